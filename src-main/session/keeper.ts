// The engine's session: the results kept under a key (each with the request that made it and
// the dataset it came from), turned into a session document to save, and filled back from one.
import nodePath from 'node:path';
import { userSpec, type DatasetDescriptor } from '../../src-shared/model/dataset';
import { InputError } from '../../src-shared/model/errors';
import {
  SESSION_FORMAT, SESSION_FORMAT_VERSION, type AppSetup, type SessionDatasetRef, type SessionDocument, type SessionEntry, type SessionMethod,
} from '../../src-shared/model/session';
import type { DatasetId, KeptEntry, KeptResult } from '../../src-shared/contract/service';
import { SCANFOLD_VERSION } from '../engine/version';
import type { SessionResults } from './session-file';
import { resultArrays } from '../io/result-arrays';

/** A dataset as a session records it, before the session's folder (relative path) and ids are known. */
export type DatasetRecordOf = Omit<SessionDatasetRef, 'id' | 'relativePath'>;

interface Kept {
  key: string;
  method: SessionMethod;
  request: Record<string, unknown>;
  created: string;
  scanfoldVersion: string;
  data: DatasetRecordOf;
  result: unknown;
}

/** The record of an open dataset. */
export function datasetRecordOf(d: DatasetDescriptor): DatasetRecordOf {
  const spec = userSpec(d.spec);
  return {
    name: d.datasetPath ? `${nodePath.basename(d.path)}:${d.datasetPath}` : nodePath.basename(d.path),
    absolutePath: d.path, spec: { ...spec, path: d.path }, format: d.format, datasetPath: d.datasetPath,
    shape: { ...d.shape }, dtype: d.dtype, byteSize: d.byteSize, fingerprint: d.fingerprint,
  };
}

/** A request as plain JSON (typed arrays as lists), without what names its dataset and job. */
export function recipeOf(req: Record<string, unknown>): Record<string, unknown> {
  const { dataset: _d, jobId: _j, keepAs: _k, ...rest } = req;
  return JSON.parse(JSON.stringify(rest, (_key, v) => (ArrayBuffer.isView(v) ? Array.from(v as unknown as ArrayLike<number>) : v)));
}

export class SessionKeeper {
  private readonly kept = new Map<string, Kept>();
  /** The session file last opened or saved, and when it was first created. */
  private file: { path: string; created: string } | null = null;
  /** The app's setup of the session opened, with its dataset's record: kept when a front end without one (the CLI) saves. */
  private loadedApp: { app: AppSetup; data: DatasetRecordOf | null } | null = null;

  /** Goes up when the session is forgotten or replaced: a job started before keeps nothing. */
  generation = 0;

  /** Keep a result under req.keepAs, unless the session changed since the request began (`generation` then). */
  keep(method: SessionMethod, req: Record<string, unknown> & { keepAs?: string }, result: unknown, data: DatasetRecordOf, generation = this.generation): void {
    if (!req.keepAs || generation !== this.generation) return;
    // A replaced result moves to the end: the recipe lists results in the order they were made.
    const now = new Date().toISOString();
    this.kept.delete(req.keepAs);
    this.kept.set(req.keepAs, { key: req.keepAs, method, request: recipeOf(req), created: now, scanfoldVersion: SCANFOLD_VERSION, data, result });
  }

  /** Drop the results kept under `keys`; returns those that were kept. */
  drop(keys: string[]): string[] {
    return keys.filter((k) => this.kept.delete(k));
  }

  forget(): void {
    this.generation++;
    this.kept.clear();
    this.file = null;
    this.loadedApp = null;
  }

  /** Where the data of the kept results was (nothing a session write makes may replace it). */
  dataPaths(): string[] {
    return [...new Set([...this.kept.values()].map((k) => k.data.absolutePath).concat(this.loadedApp?.data ? [this.loadedApp.data.absolutePath] : []))];
  }

  /** Kept results, each with the engine's id of its dataset when that dataset is open. */
  entries(openIdOf: (fingerprint: string) => DatasetId | null, refIdOf: (fingerprint: string) => string): KeptResult[] {
    return [...this.kept.values()].map((k) => {
      const dataset = openIdOf(k.data.fingerprint);
      const datasetRef = refIdOf(k.data.fingerprint);
      // A result names its dataset: the engine's id now, or the session's when the data is absent.
      return { key: k.key, method: k.method, dataset, datasetRef, request: k.request, created: k.created, result: { ...(k.result as object), dataset: dataset ?? datasetRef } as never };
    });
  }

  recipes(openIdOf: (fingerprint: string) => DatasetId | null): KeptEntry[] {
    return this.entries(openIdOf, (fp) => this.refIdOf(fp)).map(({ result, ...e }) => ({
      ...e, arrays: Object.entries(resultArrays(e.method, result)).map(([name, a]) => ({ name, shape: a.shape, dims: a.dims ?? [], units: String(a.attrs?.units ?? '') })),
    }));
  }

  /** A stable id of a kept result's dataset (the fingerprint's order among the kept results). */
  refIdOf(fingerprint: string): string {
    const order = [...new Set([...this.kept.values()].map((k) => k.data.fingerprint))];
    return `data-${order.indexOf(fingerprint) + 1}`;
  }

  /** The app's scan step from the session opened, when its setup gave one. */
  get appScanStepNm(): number | undefined {
    return this.loadedApp?.app.calibration.scanStepNm;
  }

  /**
   * The document and results to save at `path` (absolute): the kept results (all, or `keys`),
   * the datasets they use and the one the app shows (of `open`, the open datasets), and the app's setup.
   */
  document(path: string, open: { id: DatasetId; data: DatasetRecordOf }[], app: AppSetup | undefined, keys: string[] | undefined): { doc: SessionDocument; results: SessionResults } {
    for (const k of keys ?? []) if (!this.kept.has(k)) throw new InputError(`saveSession: keys: no result is kept as ${JSON.stringify(k)}; kept: ${[...this.kept.keys()].join(', ') || 'none'}`, 'bad-request');
    const chosen = [...this.kept.values()].filter((k) => !keys || keys.includes(k.key));
    const refs = new Map<string, SessionDatasetRef>();
    const folder = nodePath.dirname(path);
    const refFor = (d: DatasetRecordOf): SessionDatasetRef => {
      let ref = refs.get(d.fingerprint);
      if (!ref) {
        ref = { id: `data-${refs.size + 1}`, ...d, relativePath: nodePath.relative(folder, d.absolutePath) };
        refs.set(d.fingerprint, ref);
      }
      return ref;
    };
    const entries: SessionEntry[] = chosen.map((k) => ({
      key: k.key, method: k.method, dataset: refFor(k.data).id, request: k.request, created: k.created, scanfoldVersion: k.scanfoldVersion, fingerprint: k.data.fingerprint,
    }));
    let appSetup: AppSetup | null = null;
    if (!app && this.loadedApp) {
      const { app: a, data } = this.loadedApp;
      appSetup = { ...a, dataset: data ? refFor(data).id : null };
    } else if (app) {
      const on = open.find((o) => o.id === app.dataset);
      const shown = app.dataset === null ? null : on ? refFor(on.data).id : undefined;
      if (shown === undefined) throw new InputError(`saveSession: app.dataset ${JSON.stringify(app.dataset)} is not an open dataset`, 'bad-request');
      appSetup = { ...app, dataset: shown };
    }
    const now = new Date().toISOString();
    const doc: SessionDocument = {
      format: SESSION_FORMAT, formatVersion: SESSION_FORMAT_VERSION, scanfoldVersion: SCANFOLD_VERSION,
      created: this.file?.path === path ? this.file.created : now, modified: now,
      datasets: [...refs.values()], entries, app: appSetup,
    };
    const results: SessionResults = new Map(chosen.map((k) => [k.key, { method: k.method, result: k.result }]));
    return { doc, results };
  }

  saved(path: string, doc: SessionDocument): void {
    this.file = { path, created: doc.created };
  }

  /** Replace what is kept by a session's results; `found` gives the new record of data found elsewhere (by session id). */
  load(path: string, doc: SessionDocument, results: SessionResults, found: Map<string, DatasetRecordOf>): void {
    this.generation++;
    this.kept.clear();
    const refs = new Map(doc.datasets.map((d) => [d.id, d]));
    for (const e of doc.entries) {
      const { id: _id, relativePath: _rel, ...recorded } = refs.get(e.dataset)!;
      const data = found.get(e.dataset) ?? recorded;
      this.kept.set(e.key, { key: e.key, method: e.method, request: e.request, created: e.created, scanfoldVersion: e.scanfoldVersion, data, result: results.get(e.key)!.result });
    }
    this.file = { path, created: doc.created };
    const shown = doc.app?.dataset != null ? refs.get(doc.app.dataset)! : null;
    this.loadedApp = doc.app ? { app: doc.app, data: shown ? found.get(shown.id) ?? (({ id: _i, relativePath: _r, ...rest }) => rest)(shown) : null } : null;
  }
}
