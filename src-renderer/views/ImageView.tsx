// A view of one float image (the Scan view or the Pattern view): WebGL drawing through a colour
// map, pan (drag with the middle button or with Shift) and zoom (wheel, about the pointer;
// double-click fits), an SVG overlay in image coordinates for detectors and regions, and the
// pointer reported in image pixel coordinates (pixel centres at whole numbers).
import { useEffect, useMemo, useRef, useState, type ReactNode } from 'react';
import { COLORMAP_NAMES, type ColormapName } from '../../src-shared/model/colormaps';
import { percentileLimits, type Contrast } from '../../src-shared/model/contrast';
import { ImageLayer, type Placement } from './image-layer';
import type { ViewSettings } from '../store';
import { endTiming, registerView } from '../test-hooks';

export interface ImageData2D {
  values: ArrayLike<number>;
  width: number;
  height: number;
  /** What the image is, for the title bar. */
  label: string;
  /** Names the pointer event that asked for it (latency measurement, test-hooks.ts). */
  token?: string;
  /** A direction image (radians): its lengths, drawn as brightness on a cyclic map. */
  lengths?: ArrayLike<number>;
}

export interface PointerInImage {
  x: number;
  y: number;
  kind: 'move' | 'down' | 'up' | 'leave';
  shift: boolean;
  alt: boolean;
  /** When the pointer event happened (performance.now() clock). */
  timeStamp: number;
}

export interface ImageViewProps {
  name: 'scan' | 'pattern';
  title: string;
  image: ImageData2D | null;
  settings: ViewSettings;
  /** Override of the colour map (e.g. categories for a cluster map). */
  colormap?: ColormapName;
  limits?: [number, number];
  overlay?: (toScreen: (x: number, y: number) => [number, number], zoom: number) => ReactNode;
  onPointer?: (p: PointerInImage) => void;
  /** Physical size of one image pixel, for the scale bar (e.g. { size: 0.5, unit: 'nm' }); px when absent. */
  pixelSize?: { size: number; unit: string };
  footer?: ReactNode;
  /** Change this view's colour settings (colour map, scaling, limits); without it they are fixed. */
  onSettings?: (s: ViewSettings) => void;
  /** Names what the view shows (manual limits hold for one such key). */
  imageKey?: string;
  /** Side of the (square) view, CSS px. */
  size?: number;
}

/** The default side of a view, CSS px. */
export const DEFAULT_VIEW_SIZE = 440;

export function ImageView(props: ImageViewProps) {
  const SIZE = props.size ?? DEFAULT_VIEW_SIZE;
  const canvasRef = useRef<HTMLCanvasElement>(null);
  const layerRef = useRef<ImageLayer | null>(null);
  const [place, setPlace] = useState<Placement>({ zoom: 1, cx: 0, cy: 0 });
  const [fittedFor, setFittedFor] = useState('');
  const dragRef = useRef<{ x: number; y: number; cx: number; cy: number } | null>(null);
  const dpr = typeof window !== 'undefined' ? window.devicePixelRatio || 1 : 1;
  const { image } = props;

  const contrast: Contrast = useMemo(() => {
    // A direction image's limits are those of its lengths (0 … the 99.5th percentile).
    const manual = props.settings.limits && (props.settings.limitsFor ?? null) === (props.imageKey ?? null) ? props.settings.limits : null;
    const [lo, hi] = props.limits ?? manual ?? (image?.lengths ? [0, percentileLimits(image.lengths)[1]] : image ? percentileLimits(image.values) : [0, 1]);
    return { lo, hi, scaling: props.settings.scaling };
  }, [image, props.limits, props.settings.limits, props.settings.limitsFor, props.imageKey, props.settings.scaling]);
  const colormap = props.colormap ?? props.settings.colormap;

  useEffect(() => {
    const layer = new ImageLayer(canvasRef.current!);
    layerRef.current = layer;
    return () => { layer.destroy(); layerRef.current = null; };
  }, []);

  // Fit the image when its size changes.
  useEffect(() => {
    if (!image) return;
    const key = `${image.width}x${image.height}@${SIZE}`;
    if (key === fittedFor) return;
    setFittedFor(key);
    setPlace(fit(image.width, image.height, SIZE));
  }, [image, fittedFor, SIZE]);

  useEffect(() => {
    const layer = layerRef.current;
    if (!layer) return;
    if (image) layer.setImage(image.values, image.width, image.height, image.lengths);
  }, [image]);

  useEffect(() => {
    const layer = layerRef.current;
    if (!layer) return;
    layer.render(contrast, colormap, { zoom: place.zoom * dpr, cx: place.cx, cy: place.cy }, image?.lengths !== undefined);
    registerView(props.name, { layer, contrast, colormap, place, image, cssSize: SIZE });
    if (image?.token) endTiming(image.token);
  }, [image, contrast, colormap, place, dpr, props.name, SIZE]);

  const toImage = (clientX: number, clientY: number): [number, number] => {
    const r = canvasRef.current!.getBoundingClientRect();
    return [(clientX - r.left - SIZE / 2) / place.zoom + place.cx, (clientY - r.top - SIZE / 2) / place.zoom + place.cy];
  };
  const toScreen = (x: number, y: number): [number, number] => [(x - place.cx) * place.zoom + SIZE / 2, (y - place.cy) * place.zoom + SIZE / 2];

  const report = (e: React.PointerEvent, kind: PointerInImage['kind']) => {
    const [x, y] = toImage(e.clientX, e.clientY);
    props.onPointer?.({ x, y, kind, shift: e.shiftKey, alt: e.altKey, timeStamp: e.timeStamp });
  };

  return (
    <section className="view" aria-label={props.title} style={{ width: SIZE + 2 }}>
      <header className="view-title">
        <span>{props.title}</span>
        <span className="view-what">{image?.label ?? '—'}</span>
      </header>
      <div className="view-stage" style={{ width: SIZE, height: SIZE }}
        onWheel={(e) => {
          const [x, y] = toImage(e.clientX, e.clientY);
          const zoom = Math.min(256, Math.max(0.05, place.zoom * Math.exp(-e.deltaY * 0.0015)));
          // Keep the image point under the pointer where it is.
          setPlace({ zoom, cx: x - (x - place.cx) * (place.zoom / zoom), cy: y - (y - place.cy) * (place.zoom / zoom) });
        }}
        onDoubleClick={() => image && setPlace(fit(image.width, image.height, SIZE))}
        onPointerDown={(e) => {
          (e.target as Element).setPointerCapture?.(e.pointerId);
          if (e.button === 1 || (e.button === 0 && e.shiftKey && !props.onPointer)) {
            dragRef.current = { x: e.clientX, y: e.clientY, cx: place.cx, cy: place.cy };
            return;
          }
          if (e.button === 0) report(e, 'down');
        }}
        onPointerMove={(e) => {
          const d = dragRef.current;
          if (d) {
            setPlace({ zoom: place.zoom, cx: d.cx - (e.clientX - d.x) / place.zoom, cy: d.cy - (e.clientY - d.y) / place.zoom });
            return;
          }
          report(e, 'move');
        }}
        onPointerUp={(e) => {
          if (dragRef.current) { dragRef.current = null; return; }
          report(e, 'up');
        }}
        onPointerLeave={(e) => report(e, 'leave')}
      >
        <canvas ref={canvasRef} width={SIZE * dpr} height={SIZE * dpr} style={{ width: SIZE, height: SIZE }} data-view={props.name} />
        <svg className="view-overlay" width={SIZE} height={SIZE}>
          {props.overlay?.(toScreen, place.zoom)}
          <ScaleBar zoom={place.zoom} pixelSize={props.pixelSize} size={SIZE} />
        </svg>
      </div>
      <footer className="view-footer">
        <span>limits {fmt(contrast.lo)} … {fmt(contrast.hi)} {props.settings.scaling.kind}</span>
        {props.footer}
      </footer>
      {props.onSettings && !props.colormap && (
        <ContrastControls name={props.name} settings={props.settings} contrast={contrast} values={image?.values ?? null} onSettings={props.onSettings} imageKey={props.imageKey ?? null} />
      )}
    </section>
  );
}

function fit(w: number, h: number, size: number): Placement {
  return { zoom: Math.min(size / w, size / h) * 0.96, cx: (w - 1) / 2, cy: (h - 1) / 2 };
}

/** A bar of a round length (1, 2 or 5 × 10ⁿ) about a fifth of the view wide. */
function ScaleBar({ zoom, pixelSize, size: SIZE }: { zoom: number; pixelSize?: { size: number; unit: string }; size: number }) {
  const per = pixelSize?.size ?? 1;
  const unit = pixelSize?.unit ?? 'px';
  const target = (SIZE / 5 / zoom) * per;
  const p = Math.pow(10, Math.floor(Math.log10(target)));
  const len = [5, 2, 1].map((m) => m * p).find((v) => v <= target) ?? p;
  const px = (len / per) * zoom;
  return (
    <g className="scale-bar" transform={`translate(${SIZE - px - 14}, ${SIZE - 16})`}>
      <rect width={px} height={4} />
      <text x={px / 2} y={-5} textAnchor="middle">{`${len} ${unit}`}</text>
    </g>
  );
}

export function fmt(v: number): string {
  if (!Number.isFinite(v)) return String(v);
  const a = Math.abs(v);
  return a !== 0 && (a < 1e-3 || a >= 1e5) ? v.toExponential(2) : Number(v.toPrecision(4)).toString();
}

/** Colour map, scaling and limits of a view, with a histogram of its values and the limits on it. */
function ContrastControls({ name, settings, contrast, values, onSettings, imageKey }: { name: string; settings: ViewSettings; contrast: Contrast; values: ArrayLike<number> | null; onSettings: (s: ViewSettings) => void; imageKey: string | null }) {
  const hist = useMemo(() => (values ? histogram(values, 48, contrast.lo, contrast.hi) : null), [values, contrast.lo, contrast.hi]);
  const [lo, setLo] = useState('');
  const [hi, setHi] = useState('');
  useEffect(() => { setLo(fmt(contrast.lo)); setHi(fmt(contrast.hi)); }, [contrast.lo, contrast.hi]);
  const applyLimits = () => {
    const a = Number(lo), b = Number(hi);
    if (Number.isFinite(a) && Number.isFinite(b) && b > a) onSettings({ ...settings, limits: [a, b], limitsFor: imageKey });
    else { setLo(fmt(contrast.lo)); setHi(fmt(contrast.hi)); }
  };
  const scaling = settings.scaling;
  return (
    <div className="contrast" aria-label={`${name} contrast`}>
      <select aria-label={`${name} colour map`} value={settings.colormap} onChange={(e) => onSettings({ ...settings, colormap: e.target.value as ColormapName })}>
        {COLORMAP_NAMES.filter((c) => c !== 'categories').map((c) => <option key={c} value={c}>{c}</option>)}
      </select>
      <select aria-label={`${name} scaling`} value={scaling.kind}
        onChange={(e) => onSettings({ ...settings, scaling: e.target.value === 'gamma' ? { kind: 'gamma', gamma: 0.5 } : { kind: e.target.value as 'linear' | 'log' } })}>
        <option value="linear">linear</option><option value="log">log</option><option value="gamma">gamma</option>
      </select>
      {scaling.kind === 'gamma' && (
        <input aria-label={`${name} gamma`} type="number" step="0.1" min="0.05" value={scaling.gamma}
          onChange={(e) => { const g = Number(e.target.value); if (g > 0) onSettings({ ...settings, scaling: { kind: 'gamma', gamma: g } }); }} />
      )}
      <input aria-label={`${name} lower limit`} className="limit" value={lo} onChange={(e) => setLo(e.target.value)} onBlur={applyLimits} onKeyDown={(e) => e.key === 'Enter' && applyLimits()} />
      {hist && <Histogram hist={hist} lo={contrast.lo} hi={contrast.hi} />}
      <input aria-label={`${name} upper limit`} className="limit" value={hi} onChange={(e) => setHi(e.target.value)} onBlur={applyLimits} onKeyDown={(e) => e.key === 'Enter' && applyLimits()} />
      <button disabled={settings.limits === null || (settings.limitsFor ?? null) !== imageKey} onClick={() => onSettings({ ...settings, limits: null, limitsFor: null })} title="limits from the 0.5 and 99.5 percentiles">auto</button>
    </div>
  );
}

/** Counts over the limits and a tenth of their span either side (values beyond go to the end bins). */
function histogram(values: ArrayLike<number>, bins: number, lo: number, hi: number): { min: number; max: number; counts: Uint32Array } | null {
  if (!(hi > lo)) return null;
  const min = lo - 0.1 * (hi - lo), max = hi + 0.1 * (hi - lo);
  const counts = new Uint32Array(bins);
  const w = (max - min) / bins || 1;
  for (let i = 0; i < values.length; i++) { const v = values[i]; if (Number.isFinite(v)) counts[Math.min(bins - 1, Math.max(0, Math.floor((v - min) / w)))]++; }
  return { min, max, counts };
}

function Histogram({ hist, lo, hi }: { hist: { min: number; max: number; counts: Uint32Array }; lo: number; hi: number }) {
  const W = 110, H = 22;
  const top = Math.log1p(Math.max(...hist.counts));
  const x = (v: number) => ((v - hist.min) / ((hist.max - hist.min) || 1)) * W;
  const bw = W / hist.counts.length;
  return (
    <svg className="histogram" width={W} height={H} role="img" aria-label="histogram of the values (log counts) with the limits">
      {Array.from(hist.counts, (c, i) => <rect key={i} x={i * bw} y={H - (Math.log1p(c) / (top || 1)) * H} width={bw} height={(Math.log1p(c) / (top || 1)) * H} />)}
      <line className="lim" x1={x(lo)} x2={x(lo)} y1={0} y2={H} />
      <line className="lim" x1={x(hi)} x2={x(hi)} y1={0} y2={H} />
    </svg>
  );
}
