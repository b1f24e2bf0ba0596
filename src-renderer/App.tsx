// The window: a header (dataset, calibration, open), the Scan view and the Pattern view side by
// side, and a strip of panels (Detectors, Regions, Field, Components, Clusters, Fit, Activity;
// their parts in panels/). Every number comes from the engine through the contract; this file
// only asks and shows.
import { useCallback, useEffect, useMemo, useRef, useState, useSyncExternalStore } from 'react';
import type { CalibrationResult, ComFieldResult, FirstPassResult, FitResult, KeptEntry, KmeansResult, OpenedSession, PcaResult, Recoverable, RegionPatternResult, ServiceEvent } from '../src-shared/contract/service';
import type { JobInfo } from '../src-shared/contract/jobs';
import type { DetectorShape } from '../src-shared/model/detectors';
import type { DatasetDescriptor } from '../src-shared/model/dataset';
import { CATEGORY_COLOURS, type ColormapName } from '../src-shared/model/colormaps';
import type { Client, Shell } from './connection';
import type { AppState, CalibrationInput, DetectorItem, PatternShows, RegionItem, RegionItemShape, ScanShows, Store } from './store';
import { fmt, ImageView, type ImageData2D, type PointerInImage } from './views/ImageView';
import { DetectorEntry, DetectorOverlay, moveHandle, pickHandle, round2 } from './panels/detectors';
import { Scree } from './panels/Scree';
import { ColourWheel } from './panels/ColourWheel';
import { CalibrationForm } from './panels/CalibrationForm';
import { Thumbnail } from './panels/Thumbnail';
import { startTiming } from './test-hooks';
import { latestWins } from './latest-wins';
import { KEYS, keysToSave, setupOf, showsForResults, sortResults, stateFromSetup, unreachableKeys, withOutsideItems } from './session';
import { SESSION_SUFFIX } from '../src-shared/model/session';

type Job = JobInfo & { jobId: string };

/** The field's maps the panel offers, in order; 'direction' is drawn on the colour wheel with the magnitude as brightness. */
const FIELD_MAPS = ['direction', 'magnitude', 'divergence', 'curl', 'phase', 'com_x', 'com_y'] as const;

function useStore(store: Store): AppState {
  return useSyncExternalStore((l) => store.subscribe(l), () => store.get());
}

/** How often rows of an image still being computed are drawn. */
const ROWS_EVERY_MS = 200;

/** Recovery offers shown in full; any more are summed up in one line. */
const RECOVERY_OFFERS_SHOWN = 2;
const newestFirst = (list: Recoverable[]) => [...list].sort((a, b) => b.modified.localeCompare(a.modified));

/** How often unsaved work goes to the recovery file. */
const AUTOSAVE_MS = 4000;

let jobCounter = 0;
const newJobId = (what: string) => `${what}-${Date.now().toString(36)}-${++jobCounter}`;

/** Both views at the same size, as large as the window allows beside each other above the panels. */
function useViewSize(): number {
  const measure = () => Math.max(300, Math.min(760, Math.floor((window.innerWidth - 40) / 2), window.innerHeight - 330));
  const [size, setSize] = useState(measure);
  useEffect(() => {
    const onResize = () => setSize(measure());
    window.addEventListener('resize', onResize);
    return () => window.removeEventListener('resize', onResize);
  }, []);
  return size;
}

export function App({ client, store, shell = null }: { client: Client; store: Store; shell?: Shell | null }) {
  const viewSize = useViewSize();
  const state = useStore(store);
  const ds = state.dataset;
  const [first, setFirst] = useState<FirstPassResult | null>(null);
  const [jobs, setJobs] = useState<Map<string, Job>>(new Map());
  const [error, setError] = useState<string | null>(null);
  const [hover, setHover] = useState<{ y: number; x: number } | null>(null);
  const [pattern, setPattern] = useState<ImageData2D | null>(null);
  const [detectorImages, setDetectorImages] = useState<Map<string, ImageData2D>>(new Map());
  const [pca, setPca] = useState<PcaResult | null>(null);
  const [kmeans, setKmeans] = useState<KmeansResult | null>(null);
  const [field, setField] = useState<ComFieldResult | null>(null);
  const [fit, setFit] = useState<(FitResult & { names: string[] }) | null>(null);
  const [calibration, setCalibration] = useState<CalibrationResult | null>(null);
  const [regionPatterns, setRegionPatterns] = useState<Map<string, RegionPatternResult>>(new Map());
  /** A rectangle being drawn on the Scan view (Shift-drag), scan px. */
  const [drawing, setDrawing] = useState<{ x0: number; y0: number; x1: number; y1: number } | null>(null);
  /** A polygon being drawn (Alt-click its corners, Enter or a click on the first corner closes it), scan px. */
  const [polygon, setPolygon] = useState<[number, number][] | null>(null);
  const [rotationText, setRotationText] = useState('');
  const [flip, setFlip] = useState(false);
  // What each view shows lives in the store (a session reopens it), outside undo.
  const scanShows = state.shows.scan;
  const patternShows = state.shows.pattern;
  const setScanShows = useCallback((v: ScanShows) => store.update((s) => ({ ...s, shows: { ...s.shows, scan: v } })), [store]);
  const setPatternShows = useCallback((v: PatternShows) => store.update((s) => ({ ...s, shows: { ...s.shows, pattern: v } })), [store]);
  const setAnalyses = (change: Partial<AppState['analyses']>) => store.update((s) => ({ ...s, analyses: { ...s.analyses, ...change } }), { undoable: true });
  const [openPath, setOpenPath] = useState('');
  // The session: its file (null until saved or opened), the results the engine keeps for it, what to recover or relink.
  const [sessionPath, setSessionPath] = useState<string | null>(null);
  const sessionPathRef = useRef<string | null>(null);
  sessionPathRef.current = sessionPath;
  const [sessionInput, setSessionInput] = useState('');
  /** The file the session on view was read from (its session file, or a recovery file): relinking reads it again. */
  const [loadedFrom, setLoadedFrom] = useState<string | null>(null);
  const [sessionNote, setSessionNote] = useState<string | null>(null);
  const kept = useRef(new Set<string>());
  /**
   * Keys this page's own requests kept: the only ones it may have the engine forget. A session's
   * results (a CLI's detector-* among them, or another dataset's) belong to no item of this page.
   */
  const madeHere = useRef(new Set<string>());
  /**
   * Goes up whenever the kept results change (a new one, one replaced under the same key, a
   * session opened): read at once by the autosave snapshot, and as state for what lists them.
   */
  const keptCount = useRef(0);
  const [keptVersion, setKeptVersion] = useState(0);
  const keptChanged = useCallback(() => { keptCount.current++; setKeptVersion(keptCount.current); }, []);
  /** A result the engine kept for the session: counted only if its dataset is still the one on view (a late job's is not). */
  const markKept = useCallback((key: string, dataset: string) => {
    if (datasetRef.current !== dataset) return;
    kept.current.add(key); madeHere.current.add(key); keptChanged();
  }, [keptChanged]);
  /** What a save would write, as it stood at the last save or open: autosave skips while nothing differs. */
  const savedSnapshot = useRef<string | null>(null);
  const snapshot = useCallback(() => {
    const st = store.get();
    return JSON.stringify([setupOf(st), keysToSave(kept.current, st), keptCount.current]);
  }, [store]);
  const [absentData, setAbsentData] = useState<OpenedSession['datasets']>([]);
  /** Where the user says each missing dataset is now, by the session's dataset id. */
  const [relinkTo, setRelinkTo] = useState<Record<string, string>>({});
  /** Relinks already made for the session on view: each new one is sent with them, or it would undo them. */
  const relinked = useRef<{ session: string | null; paths: Record<string, string> }>({ session: null, paths: {} });
  const [recoverable, setRecoverable] = useState<Recoverable[]>([]);
  const [allRecoveries, setAllRecoveries] = useState(false);
  const recoverableNewest = useMemo(() => newestFirst(recoverable), [recoverable]);
  const lastRecovery = useRef<string | null>(null);

  const fail = useCallback((e: unknown) => {
    const err = e as Error;
    if (err?.name === 'CancelledError') return;
    setError(err?.message ?? String(e));
  }, []);

  // The first pass's bright-field image as it streams in, row by row.
  const [filling, setFilling] = useState<{ dataset: string; label: string; values: Float64Array; rows: number; scanY: number; scanX: number } | null>(null);
  const datasetRef = useRef<string | null>(null);
  datasetRef.current = ds?.id ?? null;
  // Rows arriving within a fifth of a second are drawn together: a render per tile (sixty-four on
  // the 2 GiB sample, each a texture upload and new limits) took CPU from the pass itself.
  const pendingRows = useRef<Extract<ServiceEvent, { kind: 'image-rows' }>[]>([]);
  const rowsFrame = useRef<ReturnType<typeof setTimeout> | null>(null);
  const jobsFrame = useRef<{ frame: number | null; jobs: Map<string, Job> }>({ frame: null, jobs: new Map() });
  useEffect(() => {
    const flushRows = () => {
      rowsFrame.current = null;
      const batch = pendingRows.current.splice(0);
      setFilling((f) => {
        let out = f;
        for (const e of batch) {
          if (e.dataset !== datasetRef.current) continue;
          const same = out && out.dataset === e.dataset && out.label === e.label && out.values.length === e.scanY * e.scanX;
          const values = same ? out!.values : new Float64Array(e.scanY * e.scanX).fill(NaN);
          values.set(e.values, e.row0 * e.scanX);
          out = { dataset: e.dataset, label: e.label, values, rows: (same ? out!.rows : 0) + e.nRows, scanY: e.scanY, scanX: e.scanX };
        }
        return out;
      });
    };
    const flushJobs = () => {
      const j = jobsFrame.current;
      j.frame = null;
      const updates = [...j.jobs.values()];
      j.jobs.clear();
      setJobs((m) => { const next = new Map(m); for (const u of updates) next.set(u.jobId, u); return next; });
    };
    const off = client.onEvent((e) => {
      if (e.kind === 'job') {
        jobsFrame.current.jobs.set(e.job.jobId, e.job);
        jobsFrame.current.frame ??= requestAnimationFrame(flushJobs);
      } else if (e.kind === 'image-rows' && e.dataset === datasetRef.current) {
        pendingRows.current.push(e);
        rowsFrame.current ??= setTimeout(flushRows, ROWS_EVERY_MS);
      }
    });
    return () => {
      off();
      if (rowsFrame.current !== null) clearTimeout(rowsFrame.current);
      if (jobsFrame.current.frame !== null) cancelAnimationFrame(jobsFrame.current.frame);
      rowsFrame.current = null;
      jobsFrame.current.frame = null;
    };
  }, [client]);

  const startDataset = useCallback(async (id: string, descriptor: DatasetDescriptor) => {
    const { scanY, scanX, detY, detX } = descriptor.shape;
    const dataset = { id, name: baseName(descriptor.path), scanY, scanX, detY, detX, dtype: descriptor.dtype, spec: descriptor.spec, fingerprint: descriptor.fingerprint };
    store.update((s) => ({ ...s, dataset, detectors: [], activeDetector: null }), { undoable: true });
    // A new dataset starts a new session.
    kept.current = new Set(); madeHere.current = new Set(); setKeptVersion((v) => v + 1); setSessionPath(null); setLoadedFrom(null); setAbsentData([]);
    void client.forgetSession().catch(() => undefined);
    setFirst(null); setPca(null); setKmeans(null); setField(null); setFit(null); setRegionPatterns(new Map()); setDetectorImages(new Map()); setFilling(null); setCalibration(null);
    store.update((s) => ({ ...s, regions: [], calibration: {} }));
    setScanShows({ kind: 'default', index: 0 }); setPatternShows({ kind: 'mean' });
    try {
      setFirst(await client.firstPass({ dataset: id, jobId: newJobId('first-pass') }));
    } catch (e) { fail(e); return; }
    // Calibration from the file's attributes, when it has them (a form fills in what is missing).
    try {
      const c = await client.calibrate({ dataset: id, keepAs: KEYS.calibration });
      setCalibration(c);
      markKept(KEYS.calibration, id);
    } catch { /* no attributes to go by: the form says what is needed */ }
  }, [client, store, fail, markKept]);

  // Served mode opens the file given on the command line before the page loads.
  useEffect(() => {
    client.datasets().then((list) => {
      const d = list[list.length - 1];
      if (d) void startDataset(d.id, d.descriptor);
    }, fail);
  }, [client, startDataset, fail]);

  const openPathNow = useCallback(async (file: string) => {
    setError(null);
    try {
      const opened = await client.open({ path: file.trim() });
      await startDataset(opened.id, opened.descriptor);
    } catch (e) { fail(e); }
  }, [client, startDataset, fail]);
  const openFile = () => openPathNow(openPath);
  const openInputRef = useRef<HTMLInputElement>(null);

  const exportImage = useCallback(() => {
    const canvas = document.querySelector('canvas[data-view=scan]') as HTMLCanvasElement | null;
    if (!canvas) return;
    canvas.toBlob((blob) => {
      if (blob) download(blob, `${store.get().dataset?.name ?? 'scan'}-scan-view.png`);
    }, 'image/png');
  }, [store]);

  // Sessions: the engine keeps each result the app asks for (keepAs) and writes them with the setup.
  /** Show an opened session: its setup, its results (also with the data absent), and its data's first pass. */
  const applySession = useCallback(async (s: OpenedSession, sessionFile: string | null) => {
    const refId = s.document.app?.dataset ?? s.document.datasets[0]?.id ?? null;
    const status = s.datasets.find((d) => d.ref.id === refId);
    setLoadedFrom(s.path);
    let dataset: AppState['dataset'] = null;
    if (status) {
      const { ref, opened } = status;
      dataset = {
        id: opened?.id ?? '', name: ref.name, ...ref.shape, dtype: ref.dtype, spec: opened?.descriptor.spec ?? ref.spec, fingerprint: ref.fingerprint,
        ...(opened ? {} : { absent: status.how }),
      };
    }
    // Only the results of the dataset on view are shown (a session may hold several datasets').
    const r = sortResults(s.results.filter((x) => refId === null || x.datasetRef === refId));
    const withItems = withOutsideItems(stateFromSetup(s.document.app, dataset), r);
    const next = s.document.app ? withItems : showsForResults(withItems, r);
    store.reset(next);
    kept.current = new Set(s.results.map((x) => x.key)); madeHere.current = new Set(); keptChanged();
    setPca(r.pca ?? null); setKmeans(r.kmeans ?? null); setField(r.field ?? null); setCalibration(r.calibration ?? null);
    if (r.fit) {
      const refs = (s.results.find((x) => x.key === KEYS.fit)?.request.references ?? []) as unknown[];
      const names = refs.map((shape, k) => next.regions.find((g) => JSON.stringify(g.shape) === JSON.stringify(shape))?.name ?? r.fit!.regions[k]);
      setFit({ ...r.fit, names });
    } else setFit(null);
    if (r.field) { setRotationText(String(round2(r.field.rotation.degrees))); setFlip(r.field.rotation.flip); }
    setDetectorImages(new Map(r.detectors.map((d) => [d.id, { values: d.image, width: d.scanX, height: d.scanY, label: next.detectors.find((x) => x.id === d.id)?.name ?? d.name }])));
    setRegionPatterns(new Map(r.regions.map((g) => [g.id, g.result])));
    setFirst(null); setFilling(null); setPattern(null);
    setAbsentData(s.datasets.filter((d) => !d.opened));
    // Another session: its dataset ids (data-1, …) say nothing about the last one's relinks.
    if (relinked.current.session !== s.path) { relinked.current = { session: null, paths: {} }; setRelinkTo({}); }
    setSessionPath(sessionFile); setSessionInput(sessionFile ?? '');
    savedSnapshot.current = snapshot();
    // The results are on view now; the data's first pass (hover, previews) follows, and the
    // calibration from the file's attributes when the session holds none.
    if (dataset && !dataset.absent) {
      client.firstPass({ dataset: dataset.id, jobId: newJobId('first-pass') }).then(setFirst, fail);
      if (!r.calibration) {
        client.calibrate({ dataset: dataset.id, keepAs: KEYS.calibration }).then((c) => {
          // Read from the file, not made by the user: it alone does not make the session unsaved.
          const clean = snapshot() === savedSnapshot.current;
          setCalibration(c); markKept(KEYS.calibration, dataset.id);
          if (clean) savedSnapshot.current = snapshot();
        }, () => undefined);
      }
    }
  }, [client, store, fail, snapshot, markKept]);

  const openSessionNow = useCallback(async (path: string, relink?: Record<string, string>) => {
    setError(null); setSessionNote(null);
    try {
      const s = await client.openSession({ path: path.trim(), ...(relink ? { relink } : {}) });
      await applySession(s, s.path);
      setSessionNote(`opened ${s.path}: ${s.results.length} result${s.results.length === 1 ? '' : 's'}`);
    } catch (e) { fail(e); }
  }, [client, applySession, fail]);

  /** Read the session again from the file it came from, with moved data relinked; its session file stays the one to save to. */
  const relinkNow = useCallback(async (from: string, relink: Record<string, string>) => {
    setError(null);
    try {
      const keep = sessionPathRef.current;
      const all = { ...(relinked.current.session === from ? relinked.current.paths : {}), ...relink };
      const s = await client.openSession({ path: from, relink: all });
      relinked.current = { session: from, paths: all };
      await applySession(s, keep);
      setSessionNote(`relinked: ${s.datasets.filter((d) => d.opened).map((d) => d.path).join(', ')}`);
    } catch (e) { fail(e); }
  }, [client, applySession, fail]);

  const saveSessionNow = useCallback(async (path?: string) => {
    const target = (path ?? (sessionInput.trim() || sessionPath) ?? '').trim();
    if (!target) { setError(`name the session file first, e.g. /data/analysis${SESSION_SUFFIX}`); return; }
    const st = store.get();
    setError(null);
    try {
      const saved = await client.saveSession({ path: target, app: setupOf(st), keys: keysToSave(kept.current, st) });
      // Saved whole: the recovery of unsaved work is out of date (the engine removes the session's own).
      if (lastRecovery.current) { void client.discardRecovery(lastRecovery.current).catch(() => undefined); lastRecovery.current = null; }
      setSessionPath(saved.path); setSessionInput(saved.path);
      savedSnapshot.current = snapshot();
      setSessionNote(`saved ${saved.results} result${saved.results === 1 ? '' : 's'} to ${saved.path}`);
    } catch (e) { fail(e); }
  }, [client, store, fail, sessionInput, sessionPath, snapshot]);

  // Autosave: unsaved changes go to the recovery file every few seconds. First, the engine
  // forgets the images of detectors (and patterns of regions) deleted beyond undo's reach.
  const autosaved = useRef<string | null>(null);
  const autosaving = useRef(false);
  useEffect(() => {
    const timer = setInterval(() => {
      const stale = unreachableKeys(madeHere.current, store.history());
      if (stale.length) {
        // Nothing a save writes changes (they were left out of it already): no autosave for this.
        for (const k of stale) { kept.current.delete(k); madeHere.current.delete(k); }
        client.forgetResults(stale).then(() => client.sessionEntries()).then(setExportables, () => undefined);
      }
      const st = store.get();
      if (!st.dataset || (kept.current.size === 0 && st.detectors.length === 0 && st.regions.length === 0)) return;
      const now = snapshot();
      if (now === savedSnapshot.current || now === autosaved.current) return;
      if (autosaving.current) return;
      autosaved.current = now;
      autosaving.current = true;
      client.autosave({ session: sessionPathRef.current, app: setupOf(st), keys: keysToSave(kept.current, st) })
        .then((r) => { lastRecovery.current = r.recovery; }, () => { autosaved.current = null; })
        .finally(() => { autosaving.current = false; });
    }, AUTOSAVE_MS);
    return () => clearInterval(timer);
  }, [client, store, snapshot]);

  // Export: one array of a kept result as a file (the engine makes the bytes; the page downloads them).
  const [exportables, setExportables] = useState<KeptEntry[]>([]);
  const [exportChoice, setExportChoice] = useState('');
  const [exportIndex, setExportIndex] = useState(0);
  const [exportFormat, setExportFormat] = useState<'png' | 'tiff' | 'npy' | 'csv'>('png');
  useEffect(() => { client.sessionEntries().then(setExportables, () => undefined); }, [client, keptVersion]);
  const exportOptions = exportables.flatMap((e) => e.arrays.map((a) => ({ value: `${e.key}/${a.name}`, key: e.key, array: a })));
  const chosenExport = exportOptions.find((o) => o.value === exportChoice) ?? exportOptions[0];
  const exportResult = async () => {
    if (!chosenExport) return;
    const { key, array } = chosenExport;
    const stack = array.shape.length === 3 && exportFormat !== 'npy';
    const view = array.dims.at(-1) === 'scan_x' ? store.get().scanView : store.get().patternView;
    setError(null);
    try {
      const f = await client.exportResult({
        key, array: array.name, format: exportFormat, ...(stack ? { index: Math.min(exportIndex, array.shape[0] - 1) } : {}),
        // The view's colour map, but a cluster map keeps the engine's categories (as the Scan view draws it).
        ...(exportFormat === 'png' ? { ...(array.units.startsWith('cluster index') ? {} : { colormap: view.colormap }), scaling: view.scaling } : {}),
      });
      download(new Blob([f.bytes as BlobPart], { type: f.mediaType }), f.fileName);
      setSessionNote(`exported ${f.description}`);
    } catch (e) { fail(e); }
  };

  // Work a crash left in recovery files, offered once at the start.
  useEffect(() => { client.recoverable().then(setRecoverable, () => undefined); }, [client]);
  const recover = async (r: Recoverable) => {
    setRecoverable((list) => list.filter((x) => x !== r));
    try {
      const s = await client.openSession({ path: r.recovery });
      await applySession(s, r.session);
      lastRecovery.current = r.recovery;
      setSessionNote(`recovered ${s.results.length} result${s.results.length === 1 ? '' : 's'} from ${r.recovery}${r.session ? `; save to write them to ${r.session}` : '; save to give them a session file'}`);
    } catch (e) { fail(e); }
  };
  const discardRecovered = (r: Recoverable) => {
    setRecoverable((list) => list.filter((x) => x !== r));
    void client.discardRecovery(r.recovery).catch(fail);
  };

  // Menu commands (desktop) and keyboard shortcuts (both ways of starting).
  useEffect(() => shell?.onMenu((command, arg) => {
    if (command === 'open' && arg) { setOpenPath(arg); void openPathNow(arg); }
    else if (command === 'undo') store.undo();
    else if (command === 'redo') store.redo();
    else if (command === 'export-image') exportImage();
    else if (command === 'open-session' && arg) void openSessionNow(arg);
    else if (command === 'save-session') void saveSessionNow(arg);
  }), [shell, store, openPathNow, exportImage, openSessionNow, saveSessionNow]);
  useEffect(() => {
    const onKey = (e: KeyboardEvent) => {
      if (!(e.ctrlKey || e.metaKey) || shell) return; // the desktop menu's accelerators handle these there
      const inField = (e.target as HTMLElement | null)?.tagName === 'INPUT';
      if (e.key.toLowerCase() === 'z' && !inField) { e.preventDefault(); if (e.shiftKey) store.redo(); else store.undo(); }
      else if (e.key.toLowerCase() === 'o') { e.preventDefault(); openInputRef.current?.focus(); }
      else if (e.key.toLowerCase() === 's') { e.preventDefault(); void saveSessionNow(); }
    };
    window.addEventListener('keydown', onKey);
    return () => window.removeEventListener('keydown', onKey);
  }, [shell, store, saveSessionNow]);

  const onDrop = (e: React.DragEvent) => {
    e.preventDefault();
    const file = e.dataTransfer.files[0];
    if (!file) return;
    if (shell) { const p = shell.pathOfFile(file); setOpenPath(p); void openPathNow(p); }
    else setError(`${file.name}: a browser does not tell the page where a dropped file lives; type its path in the open field (dropping works in the desktop app)`);
  };

  // Hover: the pattern at the probe position under the pointer; one request in flight, the latest wins.
  const hoverQueue = useRef(latestWins<{ y: number; x: number }>()).current;
  const askPattern = useCallback((pos: { y: number; x: number }) => {
    if (!ds || ds.absent) return;
    hoverQueue(pos, async (p) => {
      try {
        const r = await client.patternAt({ dataset: ds.id, y: p.y, x: p.x });
        setPattern({ values: r.pattern, width: r.detX, height: r.detY, label: `pattern at (${p.y}, ${p.x})`, token: `hover ${p.y},${p.x}` });
      } catch (e) { fail(e); }
    });
  }, [client, ds, fail, hoverQueue]);

  const addRegion = async (shape: RegionItemShape, name?: string) => {
    if (!ds) return;
    const n = store.get().regions.length;
    const item: RegionItem = { id: `r${Date.now().toString(36)}${n}`, name: name ?? `region ${n + 1}`, colour: CATEGORY_COLOURS[(n + 4) % CATEGORY_COLOURS.length], visible: true, shape };
    store.update((s) => ({ ...s, regions: [...s.regions, item] }), { undoable: true });
    await showRegion(item);
  };
  const showRegion = async (item: RegionItem, stat: 'mean' | 'max' = 'mean') => {
    if (!ds) return;
    setPatternShows({ kind: 'region', id: item.id, stat });
    if (regionPatterns.has(item.id) || ds.absent) return;
    try {
      const r = await client.regionPattern({ dataset: ds.id, region: item.shape, jobId: newJobId('region'), keepAs: KEYS.region(item.id) });
      setRegionPatterns((m) => new Map(m).set(item.id, r));
      markKept(KEYS.region(item.id), ds.id);
    } catch (e) { fail(e); }
  };

  const closePolygon = (pts: [number, number][]) => {
    setPolygon(null);
    if (pts.length >= 3) void addRegion({ kind: 'polygon', points: pts });
  };
  useEffect(() => {
    if (!polygon) return;
    const onKey = (e: KeyboardEvent) => {
      if (e.key === 'Enter') closePolygon(polygon);
      else if (e.key === 'Escape') setPolygon(null);
    };
    window.addEventListener('keydown', onKey);
    return () => window.removeEventListener('keydown', onKey);
  });

  const onScanPointer = (p: PointerInImage) => {
    if (!ds || p.kind === 'leave') return;
    const clampY = (v: number) => Math.min(ds.scanY - 1, Math.max(0, Math.round(v)));
    const clampX = (v: number) => Math.min(ds.scanX - 1, Math.max(0, Math.round(v)));
    // Alt-click adds a corner of a polygon; a click on its first corner closes it.
    if (p.kind === 'down' && p.alt) {
      const pt: [number, number] = [Math.round(p.x * 2) / 2, Math.round(p.y * 2) / 2];
      const pts = polygon ?? [];
      if (pts.length >= 3 && Math.hypot(pt[0] - pts[0][0], pt[1] - pts[0][1]) <= 1) closePolygon(pts);
      else setPolygon([...pts, pt]);
      return;
    }
    // Shift-drag draws a rectangular region.
    if (p.kind === 'down' && p.shift) { setDrawing({ x0: clampX(p.x), y0: clampY(p.y), x1: clampX(p.x), y1: clampY(p.y) }); return; }
    if (drawing) {
      const next = { ...drawing, x1: clampX(p.x), y1: clampY(p.y) };
      if (p.kind === 'up') {
        setDrawing(null);
        void addRegion({ kind: 'rectangle', x0: Math.min(next.x0, next.x1), y0: Math.min(next.y0, next.y1), x1: Math.max(next.x0, next.x1), y1: Math.max(next.y0, next.y1) });
      } else setDrawing(next);
      return;
    }
    const y = Math.round(p.y);
    const x = Math.round(p.x);
    if (y < 0 || x < 0 || y >= ds.scanY || x >= ds.scanX) return;
    startTiming(`hover ${y},${x}`, p.timeStamp);
    setHover({ y, x });
    setPatternShows({ kind: 'position' });
    askPattern({ y, x });
  };

  // Detectors: a drag answers from the preview cube at once; the release asks for the exact image.
  const previewQueue = useRef(latestWins<{ det: DetectorItem; token?: string }>()).current;
  const previewDetector = useCallback((d: DetectorItem, token?: string) => {
    // The preview cube exists once the first pass is done; before that, only the exact image follows.
    if (!ds || !first || ds.absent) return;
    previewQueue({ det: d, token }, async ({ det, token }) => {
      try {
        const r = await client.previewImages({ dataset: ds.id, detectors: [{ shape: det.shape, weighted: true }] });
        setDetectorImages((m) => new Map(m).set(det.id, { values: r.images[0], width: r.qX, height: r.qY, label: `${det.name} (preview, scan binned ${r.scanBin}×)`, token }));
      } catch (e) { fail(e); }
    });
  }, [client, ds, fail, first, previewQueue]);

  // The exact image of a detector: a new request for the same detector cancels the one before it.
  const exactJobs = useRef(new Map<string, string>());
  const exactDetector = useCallback(async (d: DetectorItem) => {
    if (!ds || ds.absent) return;
    const jobId = newJobId('detector');
    const before = exactJobs.current.get(d.id);
    if (before) void client.cancel(before);
    exactJobs.current.set(d.id, jobId);
    try {
      const r = await client.virtualImages({ dataset: ds.id, detectors: [{ shape: d.shape, label: d.name }], jobId, keepAs: KEYS.detector(d.id) });
      if (exactJobs.current.get(d.id) === jobId) exactJobs.current.delete(d.id);
      markKept(KEYS.detector(d.id), ds.id);
      // Only if the detector has not moved since.
      const now = store.get().detectors.find((x) => x.id === d.id);
      if (now && JSON.stringify(now.shape) === JSON.stringify(d.shape)) {
        setDetectorImages((m) => new Map(m).set(d.id, { values: r.images[0], width: ds.scanX, height: ds.scanY, label: d.name }));
      }
    } catch (e) { fail(e); }
  }, [client, ds, fail, store, markKept]);

  const addDetector = (kind: 'annulus' | 'disk') => {
    if (!ds) return;
    const disk = first && !('notFound' in first.brightFieldDisk) ? first.brightFieldDisk : { cx: (ds.detX - 1) / 2, cy: (ds.detY - 1) / 2, r: Math.min(ds.detX, ds.detY) / 8 };
    const edge = Math.min(disk.cx, disk.cy, ds.detX - 1 - disk.cx, ds.detY - 1 - disk.cy);
    const shape: DetectorShape = kind === 'disk'
      ? { kind: 'disk', cx: round2(disk.cx), cy: round2(disk.cy), r: round2(disk.r) }
      : { kind: 'annulus', cx: round2(disk.cx), cy: round2(disk.cy), rInner: round2(Math.min(disk.r * 1.5, edge * 0.6)), rOuter: round2(edge * 0.95) };
    const n = state.detectors.length;
    const item: DetectorItem = { id: `d${Date.now().toString(36)}${n}`, name: `${kind} ${n + 1}`, colour: CATEGORY_COLOURS[(n + 1) % CATEGORY_COLOURS.length], visible: true, shape };
    store.update((s) => ({ ...s, detectors: [...s.detectors, item], activeDetector: item.id }), { undoable: true });
    setScanShows({ kind: 'detector', id: item.id });
    previewDetector(item);
    void exactDetector(item);
  };

  const setShape = (id: string, shape: DetectorShape, undoable: boolean) => {
    store.update((s) => ({ ...s, detectors: s.detectors.map((d) => (d.id === id ? { ...d, shape } : d)) }), { undoable });
  };

  // Dragging a detector handle on the Pattern view.
  const dragRef = useRef<{ id: string; part: 'centre' | 'inner' | 'outer'; dx: number; dy: number } | null>(null);
  const dragSeq = useRef(0);
  const onPatternPointer = (p: PointerInImage) => {
    const active = state.detectors.find((d) => d.id === state.activeDetector);
    if (p.kind === 'down' && active) {
      const part = pickHandle(active.shape, p.x, p.y);
      if (part) {
        const s = active.shape as { cx: number; cy: number };
        dragRef.current = { id: active.id, part, dx: p.x - s.cx, dy: p.y - s.cy };
        store.update((st) => ({ ...st }), { undoable: true });
        setScanShows({ kind: 'detector', id: active.id });
      }
      return;
    }
    const drag = dragRef.current;
    if (!drag) return;
    const det = store.get().detectors.find((d) => d.id === drag.id);
    if (!det) return;
    const shape = moveHandle(det.shape, drag, p.x, p.y);
    setShape(det.id, shape, false);
    const moved = { ...det, shape };
    const token = `drag ${++dragSeq.current}`;
    startTiming(token, p.timeStamp);
    previewDetector(moved, token);
    if (p.kind === 'up' || p.kind === 'leave') {
      dragRef.current = null;
      void exactDetector(moved);
    }
  };

  /** Ask the engine something about the open dataset: the last error is cleared, a failure shown. */
  const onDataset = async (ask: (d: NonNullable<typeof ds>) => Promise<void>) => {
    if (!ds || ds.absent) return;
    setError(null);
    try { await ask(ds); } catch (e) { fail(e); }
  };

  const runPca = () => onDataset(async (d) => {
    setPca(await client.pca({ dataset: d.id, components: store.get().analyses.pcaComponents, jobId: newJobId('pca'), keepAs: KEYS.pca }));
    markKept(KEYS.pca, d.id);
    setScanShows({ kind: 'loading', k: 0 }); setPatternShows({ kind: 'component', k: 0 });
  });
  const applyCalibration = (input: CalibrationInput) => onDataset(async (d) => {
    store.update((s) => ({ ...s, calibration: input }), { undoable: true });
    setCalibration(await client.calibrate({ dataset: d.id, ...input, jobId: newJobId('calibration'), keepAs: KEYS.calibration }));
    markKept(KEYS.calibration, d.id);
  });
  const runField = (rotation: 'auto' | { degrees: number; flip: boolean } = store.get().analyses.fieldRotation) => onDataset(async (d) => {
    setAnalyses({ fieldRotation: rotation });
    const descanRegion = store.get().regions.find((g) => g.id === store.get().analyses.descanRegion && g.shape.kind === 'rectangle');
    const descan = descanRegion ? { descan: { kind: 'reference' as const, region: descanRegion.shape as { x0: number; y0: number; x1: number; y1: number } } } : {};
    const cal = calibration?.scanStepNm ? { mradPerPixel: calibration.mradPerPixel, energyKeV: calibration.energyKeV, scanStepNm: calibration.scanStepNm } : undefined;
    const r = await client.comField({ dataset: d.id, rotation, jobId: newJobId('field'), keepAs: KEYS.field, ...descan, ...(cal ? { calibration: cal } : {}) });
    setField(r);
    markKept(KEYS.field, d.id);
    setRotationText(String(round2(r.rotation.degrees)));
    setFlip(r.rotation.flip);
    setScanShows({ kind: 'field', map: 'direction' });
  });
  const runFit = () => onDataset(async (d) => {
    const regions = store.get().regions;
    const r = await client.fit({ dataset: d.id, references: regions.map((g) => g.shape), nonnegative: true, jobId: newJobId('fit'), keepAs: KEYS.fit });
    setFit({ ...r, names: regions.map((g) => g.name) });
    markKept(KEYS.fit, d.id);
    setScanShows({ kind: 'fit', k: 0 });
  });
  const runKmeans = () => onDataset(async (d) => {
    setKmeans(await client.kmeans({ dataset: d.id, clusters: store.get().analyses.kmeansClusters, jobId: newJobId('kmeans'), keepAs: KEYS.kmeans }));
    markKept(KEYS.kmeans, d.id);
    setScanShows({ kind: 'clusters' }); setPatternShows({ kind: 'cluster', k: 0 });
  });

  // What each view shows; memoised, so an unchanged image is neither uploaded nor rescaled again.
  const scanView = useMemo((): { image: ImageData2D | null; colormap?: ColormapName; limits?: [number, number] } => {
    if (!ds) return { image: null };
    if (scanShows.kind === 'detector') return { image: detectorImages.get(scanShows.id) ?? null };
    if (scanShows.kind === 'default' && !first && filling && filling.dataset === ds.id) {
      return { image: { values: filling.values, width: filling.scanX, height: filling.scanY, label: `${filling.label} (first pass: ${filling.rows} of ${filling.scanY} rows)` } };
    }
    if (scanShows.kind === 'default' && first) {
      const d = first.defaultImages[scanShows.index];
      return { image: d ? { values: d.image, width: ds.scanX, height: ds.scanY, label: d.label } : { values: first.totalIntensity, width: ds.scanX, height: ds.scanY, label: 'total intensity' } };
    }
    if (scanShows.kind === 'loading' && pca) {
      const n = ds.scanY * ds.scanX;
      return { image: { values: pca.loadings.subarray(scanShows.k * n, (scanShows.k + 1) * n), width: ds.scanX, height: ds.scanY, label: `loading map ${scanShows.k + 1}` } };
    }
    if (scanShows.kind === 'field' && field) {
      const m = field.maps[scanShows.map];
      if (!m) return { image: null };
      if (scanShows.map === 'direction') {
        return { image: { values: m.data, lengths: field.maps.magnitude.data, width: field.scanX, height: field.scanY, label: 'COM direction (colour) and magnitude (brightness)' }, colormap: 'sinebow' };
      }
      return { image: { values: m.data, width: field.scanX, height: field.scanY, label: `COM ${scanShows.map.replace('_', ' ')} (${m.units})` } };
    }
    if (scanShows.kind === 'fit' && fit) {
      const n = ds.scanY * ds.scanX;
      return { image: { values: fit.coefficients.subarray(scanShows.k * n, (scanShows.k + 1) * n), width: ds.scanX, height: ds.scanY, label: `fit weight of ${fit.names[scanShows.k]}` } };
    }
    if (scanShows.kind === 'residual' && fit) return { image: { values: fit.residual, width: ds.scanX, height: ds.scanY, label: 'fit residual (fraction of each pattern no reference explains)' } };
    if (scanShows.kind === 'clusters' && kmeans) {
      return { image: { values: kmeans.labels, width: ds.scanX, height: ds.scanY, label: `cluster map (${kmeans.k} clusters)` }, colormap: 'categories', limits: [-0.5, 9.5] };
    }
    return { image: null };
  }, [ds, scanShows, detectorImages, first, pca, kmeans, filling, field, fit]);
  const patternImage = useMemo((): ImageData2D | null => {
    if (!ds) return null;
    if (patternShows.kind === 'position') return pattern;
    if (patternShows.kind === 'mean' && first) return { values: first.meanPattern, width: ds.detX, height: ds.detY, label: 'mean pattern' };
    if (patternShows.kind === 'component' && pca) {
      const f = pca.features;
      const n = f.outY * f.outX;
      return { values: pca.components.subarray(patternShows.k * n, (patternShows.k + 1) * n), width: f.outX, height: f.outY, label: `component pattern ${patternShows.k + 1} (binned ${f.bin}×)` };
    }
    if (patternShows.kind === 'region') {
      const r = regionPatterns.get(patternShows.id);
      const item = state.regions.find((g) => g.id === patternShows.id);
      if (!r || !item) return null;
      return { values: patternShows.stat === 'mean' ? r.mean : r.max, width: ds.detX, height: ds.detY, label: `${patternShows.stat} pattern of ${item.name} (${r.count} positions)` };
    }
    if (patternShows.kind === 'cluster' && kmeans) {
      const n = ds.detY * ds.detX;
      return { values: kmeans.clusterPatterns.subarray(patternShows.k * n, (patternShows.k + 1) * n), width: ds.detX, height: ds.detY, label: `cluster pattern ${patternShows.k + 1}` };
    }
    return null;
  }, [ds, patternShows, pattern, first, pca, kmeans, regionPatterns, state.regions]);
  const patternIsDetectorSpace = patternImage !== null && patternShows.kind !== 'component';

  const running = [...jobs.values()].filter((j) => j.state === 'running');

  return (
    <div className="app" onDragOver={(e) => e.preventDefault()} onDrop={onDrop}>
      <header className="app-header">
        <div className="app-name">Scanfold</div>
        <div className="dataset-line" data-testid="dataset">
          {ds ? <><strong>{ds.name}</strong> <span>scan {ds.scanY} × {ds.scanX}, patterns {ds.detY} × {ds.detX}, {ds.dtype}</span></> : <span>no dataset open</span>}
        </div>
        {ds && <CalibrationForm result={calibration} input={state.calibration} apply={(c) => void applyCalibration(c)} />}
        <form className="open-form" onSubmit={(e) => { e.preventDefault(); void openFile(); }}>
 <input ref={openInputRef} aria-label="file to open" placeholder="path of an HDF5, .npy or raw file" value={openPath} onChange={(e) => setOpenPath(e.target.value)} />
          <button type="submit">Open</button>
          <button type="button" onClick={exportImage} disabled={!ds} title="the Scan view as a PNG">Export image</button>
        </form>
        <form className="open-form session-form" onSubmit={(e) => { e.preventDefault(); if (sessionInput.trim()) void openSessionNow(sessionInput); }}>
          <input aria-label="session file" placeholder={`session file, NAME${SESSION_SUFFIX}`} value={sessionInput} onChange={(e) => setSessionInput(e.target.value)} />
          <button type="button" onClick={() => void saveSessionNow()} disabled={!ds} title="write the setup and every result to the session file (Ctrl-S)">Save session</button>
          <button type="submit" disabled={!sessionInput.trim()} title="reopen the analysis saved in that file (Enter)">Open session</button>
        </form>
      </header>
      {error && <div className="error" role="alert">{error} <button onClick={() => setError(null)}>dismiss</button></div>}
      {sessionNote && <div className="note" role="status">{sessionNote} <button onClick={() => setSessionNote(null)}>dismiss</button></div>}
      {/* The newest offers in full; older ones (several stops without a save) in one line, so they never push the views away. */}
      {recoverableNewest.slice(0, allRecoveries ? undefined : RECOVERY_OFFERS_SHOWN).map((r) => (
        <div key={r.recovery} className="note recover" aria-live="polite">
          Work not saved when Scanfold last stopped: {r.session ? baseName(r.session) : 'an unsaved session'}, {r.results} result{r.results === 1 ? '' : 's'}, last written {new Date(r.modified).toLocaleString()}.
          <button onClick={() => void recover(r)}>Recover</button>
          <button onClick={() => discardRecovered(r)}>Discard</button>
        </div>
      ))}
      {!allRecoveries && recoverable.length > RECOVERY_OFFERS_SHOWN && (
        <div className="note recover">
          and {recoverable.length - RECOVERY_OFFERS_SHOWN} older unsaved session{recoverable.length - RECOVERY_OFFERS_SHOWN === 1 ? '' : 's'}.
          <button onClick={() => setAllRecoveries(true)}>Show them</button>
          <button onClick={() => recoverableNewest.slice(RECOVERY_OFFERS_SHOWN).forEach(discardRecovered)}>Discard them</button>
        </div>
      )}
      {absentData.map((d) => (
        <form key={d.ref.id} className="note relink" role="alert" onSubmit={(e) => { e.preventDefault(); const to = relinkTo[d.ref.id]?.trim(); if (loadedFrom && to) void relinkNow(loadedFrom, { [d.ref.id]: to }); }}>
          The data of this session ({d.ref.name}) {d.status === 'different' ? 'was replaced' : 'was not found'}: {d.how}. Its results are shown; to compute more, give where it is now:
          <input aria-label="where the data is now" placeholder={d.ref.absolutePath} value={relinkTo[d.ref.id] ?? ''} onChange={(e) => { const v = e.target.value; setRelinkTo((r) => ({ ...r, [d.ref.id]: v })); }} />
          <button type="submit">Relink</button>
        </form>
      ))}
      <main className="views">
        <ImageView name="scan" title="Scan view" size={viewSize} image={scanView.image} imageKey={JSON.stringify(scanShows)} settings={state.scanView} colormap={scanView.colormap} limits={scanView.limits}
          onPointer={onScanPointer}
          onSettings={(v) => store.update((s) => ({ ...s, scanView: v }), { undoable: true })}
          pixelSize={calibration?.scanStepNm && scanView.image && ds && scanView.image.width === ds.scanX ? { size: calibration.scanStepNm, unit: 'nm' } : undefined}
          overlay={(toScreen, zoom) => <>
            {state.regions.filter((g) => g.visible && g.shape.kind === 'rectangle').map((g) => {
              const s = g.shape as { x0: number; y0: number; x1: number; y1: number };
              const [x, y] = toScreen(s.x0 - 0.5, s.y0 - 0.5);
              return <rect key={g.id} className="region" stroke={g.colour} x={x} y={y} width={(s.x1 - s.x0 + 1) * zoom} height={(s.y1 - s.y0 + 1) * zoom} />;
            })}
            {state.regions.filter((g) => g.visible && g.shape.kind === 'polygon').map((g) => (
              <polygon key={g.id} className="region" stroke={g.colour} points={(g.shape as { points: [number, number][] }).points.map(([x, y]) => toScreen(x, y).join(',')).join(' ')} />
            ))}
            {polygon && <polyline className="region drawing" points={polygon.map(([x, y]) => toScreen(x, y).join(',')).join(' ')} />}
            {drawing && (() => {
              const [x, y] = toScreen(Math.min(drawing.x0, drawing.x1) - 0.5, Math.min(drawing.y0, drawing.y1) - 0.5);
              return <rect className="region drawing" x={x} y={y} width={(Math.abs(drawing.x1 - drawing.x0) + 1) * zoom} height={(Math.abs(drawing.y1 - drawing.y0) + 1) * zoom} />;
            })()}
            {hover && <rect className="hover-mark" x={toScreen(hover.x - 0.5, hover.y - 0.5)[0]} y={toScreen(hover.x - 0.5, hover.y - 0.5)[1]} width={Math.max(zoom, 3)} height={Math.max(zoom, 3)} />}
          </>}
          footer={hover && <span>probe ({hover.y}, {hover.x})</span>} />
        <ImageView name="pattern" title="Pattern view" size={viewSize} image={patternImage} imageKey={JSON.stringify(patternShows)} settings={state.patternView}
          onPointer={onPatternPointer}
          onSettings={(v) => store.update((s) => ({ ...s, patternView: v }), { undoable: true })}
          pixelSize={calibration && patternImage && ds && patternImage.width === ds.detX ? { size: calibration.mradPerPixel, unit: 'mrad' } : undefined}
          overlay={(toScreen, zoom) => patternIsDetectorSpace && state.detectors.filter((d) => d.visible).map((d) => (
            <DetectorOverlay key={d.id} item={d} active={d.id === state.activeDetector} toScreen={toScreen} zoom={zoom} />
          ))} />
      </main>
      <section className="panels">
        <div className="panel" aria-label="Detectors">
          <h2>Detectors</h2>
          <div className="row">
            <button onClick={() => addDetector('disk')} disabled={!ds || !!ds.absent}>+ disk</button>
            <button onClick={() => addDetector('annulus')} disabled={!ds || !!ds.absent}>+ annulus</button>
            <button onClick={() => store.undo()}>undo</button>
            <button onClick={() => store.redo()}>redo</button>
          </div>
          {first && first.defaultImages.map((d, i) => (
            <div key={d.label} className={`item ${scanShows.kind === 'default' && scanShows.index === i ? 'on' : ''}`} onClick={() => setScanShows({ kind: 'default', index: i })}>{d.label} (first pass)</div>
          ))}
          {state.detectors.map((d) => (
            <DetectorEntry key={d.id} item={d} active={d.id === state.activeDetector}
              select={() => { store.update((s) => ({ ...s, activeDetector: d.id })); setScanShows({ kind: 'detector', id: d.id }); setPatternShows({ kind: 'mean' }); }}
              change={(shape) => { setShape(d.id, shape, true); previewDetector({ ...d, shape }); void exactDetector({ ...d, shape }); }}
              mradPerPixel={calibration?.mradPerPixel}
              remove={() => store.update((s) => ({ ...s, detectors: s.detectors.filter((x) => x.id !== d.id), activeDetector: s.activeDetector === d.id ? null : s.activeDetector }), { undoable: true })}
              toggle={() => store.update((s) => ({ ...s, detectors: s.detectors.map((x) => (x.id === d.id ? { ...x, visible: !x.visible } : x)) }), { undoable: true })}
              rename={(name) => store.update((s) => ({ ...s, detectors: s.detectors.map((x) => (x.id === d.id ? { ...x, name } : x)) }), { undoable: true })} />
          ))}
        </div>
        <div className="panel" aria-label="Regions">
          <h2>Regions</h2>
          <div className="hint">Shift-drag on the Scan view draws a rectangle; Alt-click corners for a polygon (Enter, or a click on the first corner, closes it).</div>
          {state.regions.map((g) => (
            <div key={g.id} className={`item ${patternShows.kind === 'region' && patternShows.id === g.id ? 'on' : ''}`} onClick={() => void showRegion(g)}>
              <span className="swatch" style={{ background: g.colour }} />
              <input className="name" value={g.name} aria-label="region name" onChange={(e) => store.update((s) => ({ ...s, regions: s.regions.map((x) => (x.id === g.id ? { ...x, name: e.target.value } : x)) }), { undoable: true })} />
              <span className="unit">{g.shape.kind === 'rectangle' ? `${g.shape.x0},${g.shape.y0} – ${g.shape.x1},${g.shape.y1}` : g.shape.kind === 'polygon' ? `${g.shape.points.length} corners` : 'mask'}</span>
              <button onClick={(e) => { e.stopPropagation(); void showRegion(g, 'max'); }}>max</button>
              <button onClick={(e) => { e.stopPropagation(); store.update((s) => ({ ...s, regions: s.regions.filter((x) => x.id !== g.id) }), { undoable: true }); }}>delete</button>
            </div>
          ))}
        </div>
        <div className="panel" aria-label="Field">
          <h2>Field (COM)</h2>
          <div className="row">
            <label>descan <select aria-label="descan reference" value={state.analyses.descanRegion ?? ''} onChange={(e) => setAnalyses({ descanRegion: e.target.value || null })}>
              <option value="">vacuum found, else the mean</option>
              {state.regions.filter((g) => g.shape.kind === 'rectangle').map((g) => <option key={g.id} value={g.id}>{g.name}</option>)}
            </select></label>
          </div>
          <button onClick={() => void runField()} disabled={!first}>Compute field</button>
          {field && <>
            <div className="field-maps">
              {FIELD_MAPS.filter((k) => field.maps[k]).map((k) => (
                <button key={k} className={scanShows.kind === 'field' && scanShows.map === k ? 'on' : ''} onClick={() => setScanShows({ kind: 'field', map: k })}>{k.replace('_', ' ')}</button>
              ))}
            </div>
            {scanShows.kind === 'field' && scanShows.map === 'direction' && <ColourWheel />}
            <div className="facts">
              <div>rotation {fmt(field.rotation.degrees)}° ({field.rotation.source}){field.rotation.flip ? ', flipped' : ''}</div>
              {field.rotation.halfTurnDetermined === false && <div className="warn">half-turn not settled by vacuum: {field.rotation.halfTurnRule}</div>}
              <div>descan: {field.descan}; vacuum: {field.vacuum.source === 'none' ? 'none' : `${field.vacuum.positions} positions (${field.vacuum.source})`}</div>
              {field.notes.map((n) => <div key={n} className="warn">{n}</div>)}
            </div>
            <form className="row" onSubmit={(e) => { e.preventDefault(); const d = Number(rotationText); if (Number.isFinite(d)) void runField({ degrees: d, flip }); }}>
              <label>rotation <input aria-label="field rotation" type="number" step="0.5" value={rotationText} onChange={(e) => setRotationText(e.target.value)} />°</label>
              <label><input type="checkbox" aria-label="field flip" checked={flip} onChange={(e) => setFlip(e.target.checked)} /> flip</label>
              <button type="submit">apply</button>
              <button type="button" onClick={() => void runField('auto')}>estimate</button>
            </form>
          </>}
        </div>
        <div className="panel" aria-label="Components">
          <h2>Components</h2>
          <div className="row">
            <CountInput label="components" ariaLabel="PCA components" min={1} max={64} value={state.analyses.pcaComponents} set={(n) => setAnalyses({ pcaComponents: n })} />
            <button onClick={() => void runPca()} disabled={!first}>Run PCA</button>
          </div>
          {pca && <Scree pca={pca} selected={scanShows.kind === 'loading' ? scanShows.k : -1} pick={(k) => { setScanShows({ kind: 'loading', k }); setPatternShows({ kind: 'component', k }); }} />}
          {pca && ds && (
            <div className="thumbs" aria-label="component patterns and loading maps">
              {Array.from({ length: pca.k }, (_, k) => {
                const f = pca.features;
                const np = f.outY * f.outX, nl = ds.scanY * ds.scanX;
                const on = scanShows.kind === 'loading' && scanShows.k === k;
                const show = () => { setScanShows({ kind: 'loading', k }); setPatternShows({ kind: 'component', k }); };
                return (
                  <div key={k} className="thumb-pair">
                    <Thumbnail values={pca.components.subarray(k * np, (k + 1) * np)} width={f.outX} height={f.outY} colormap={state.patternView.colormap} label={`component pattern ${k + 1}`} selected={on} onClick={show} />
                    <Thumbnail values={pca.loadings.subarray(k * nl, (k + 1) * nl)} width={ds.scanX} height={ds.scanY} colormap={state.scanView.colormap} label={`loading map ${k + 1}`} selected={on} onClick={show} />
                  </div>
                );
              })}
            </div>
          )}
        </div>
        <div className="panel" aria-label="Clusters">
          <h2>Clusters</h2>
          <div className="row">
            <CountInput label="clusters" ariaLabel="k-means clusters" min={2} max={10} value={state.analyses.kmeansClusters} set={(n) => setAnalyses({ kmeansClusters: n })} />
            <button onClick={() => void runKmeans()} disabled={!first}>Run k-means</button>
          </div>
          {kmeans && Array.from(kmeans.sizes, (size, k) => (
            <div key={k} className={`item ${patternShows.kind === 'cluster' && patternShows.k === k ? 'on' : ''}`} onClick={() => { setScanShows({ kind: 'clusters' }); setPatternShows({ kind: 'cluster', k }); }}>
              <Thumbnail values={kmeans.clusterPatterns.subarray(k * ds!.detY * ds!.detX, (k + 1) * ds!.detY * ds!.detX)} width={ds!.detX} height={ds!.detY}
                colormap={state.patternView.colormap} scaling={state.patternView.scaling} label={`cluster pattern ${k + 1}`} size={36} selected={false}
                onClick={() => { setScanShows({ kind: 'clusters' }); setPatternShows({ kind: 'cluster', k }); }} />
              <span className="swatch" style={{ background: CATEGORY_COLOURS[k % 10] }} /> cluster {k + 1}: {size} positions
              <button onClick={(e) => { e.stopPropagation(); void addRegion({ kind: 'mask', width: ds!.scanX, height: ds!.scanY, values: Array.from(kmeans.labels, (l) => (l === k ? 1 : 0)) }, `cluster ${k + 1}`); }}>as region</button>
            </div>
          ))}
        </div>
        <div className="panel" aria-label="Fit">
          <h2>Fit</h2>
          <div className="hint">Every pattern as a non-negative mix of the regions’ mean patterns.</div>
          <button onClick={() => void runFit()} disabled={!first || state.regions.length === 0}>Fit with {state.regions.length} region{state.regions.length === 1 ? '' : 's'}</button>
          {fit && <>
            {fit.names.map((name, k) => (
              <div key={k} className={`item ${scanShows.kind === 'fit' && scanShows.k === k ? 'on' : ''}`} onClick={() => setScanShows({ kind: 'fit', k })} title={fit.regions[k]}>weight of {name} ({fit.counts[k]} positions)</div>
            ))}
            <div className={`item ${scanShows.kind === 'residual' ? 'on' : ''}`} onClick={() => setScanShows({ kind: 'residual' })}>residual</div>
          </>}
        </div>
        <div className="panel" aria-label="Export">
          <h2>Export</h2>
          {exportOptions.length === 0 ? <div className="hint">Results appear here as they are computed.</div> : <>
            <select aria-label="result to export" value={chosenExport?.value ?? ''} onChange={(e) => setExportChoice(e.target.value)}>
              {exportOptions.map((o) => <option key={o.value} value={o.value}>{o.value} ({o.array.shape.join('×')})</option>)}
            </select>
            <div className="row">
              {chosenExport && chosenExport.array.shape.length === 3 && exportFormat !== 'npy' && (
                <label>{chosenExport.array.dims[0] || 'index'} <input type="number" min={0} max={chosenExport.array.shape[0] - 1} aria-label="export index" value={exportIndex}
                  onChange={(e) => setExportIndex(Math.max(0, Math.round(Number(e.target.value)) || 0))} /></label>
              )}
              <select aria-label="export format" value={exportFormat} onChange={(e) => setExportFormat(e.target.value as typeof exportFormat)}>
                <option value="png">PNG figure</option><option value="tiff">TIFF (float32)</option><option value="npy">.npy</option><option value="csv">CSV</option>
              </select>
              <button onClick={() => void exportResult()}>Export</button>
            </div>
          </>}
        </div>
        <div className="panel activity" aria-label="Activity">
          <h2>Activity {running.length ? `(${running.length} running)` : ''}</h2>
          {[...jobs.values()].reverse().slice(0, 8).map((j) => (
            <div key={j.jobId} className={`job ${j.state}`} data-job={j.jobId}>
              <span className="job-label">{j.label}</span>
              <progress max={1} value={j.progress.fraction} />
              <span className="job-state">{j.state === 'running' ? `${Math.round(j.progress.fraction * 100)} %` : j.state}</span>
              {j.state === 'running' && <button onClick={() => void client.cancel(j.jobId)}>cancel</button>}
            </div>
          ))}
        </div>
      </section>
    </div>
  );
}

const baseName = (p: string) => p.split(/[\\/]/).pop() ?? p;

/** Hand `blob` to the browser as a download named `name`. */
function download(blob: Blob, name: string): void {
  const a = document.createElement('a');
  a.href = URL.createObjectURL(blob);
  a.download = name;
  a.click();
  setTimeout(() => URL.revokeObjectURL(a.href), 10_000);
}

/** A whole number between min and max (components, clusters); other entries are ignored. */
function CountInput({ label, ariaLabel, min, max, value, set }: { label: string; ariaLabel: string; min: number; max: number; value: number; set(n: number): void }) {
  return (
    <label>{label} <input type="number" min={min} max={max} aria-label={ariaLabel} value={value}
      onChange={(e) => { const n = Math.round(Number(e.target.value)); if (n >= min && n <= max) set(n); }} /></label>
  );
}
