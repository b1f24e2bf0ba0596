// `scanfold session show FILE` and `scanfold session apply FILE --to DATA --out NEW`: a session
// file listed (its datasets found, moved or missing; its results and their recipes), and its
// recipe replayed on other data, through the service like everything else.
import { InputError } from '../../src-shared/model/errors';
import { SESSION_SUFFIX, type SessionMethod } from '../../src-shared/model/session';
import type { EngineOptions } from '../engine/engine';
import type { EngineService } from '../engine/service';
import { physicalPath, sameFileAt } from '../io/input-file';
import { withService } from './analysis-commands';
import { shapeText } from '../../src-shared/model/dataset';
import { parseFlags, rejectExtraPositionals, SOURCE_OPTIONS, sourceSpecFromFlags } from './source-flags';

type Flags = Record<string, string | boolean | (string | boolean)[] | undefined>;
type EngineFlags = Record<string, { type: 'string' | 'boolean' }>;

/** --relink OLD=NEW, repeatable. */
function relinkFlags(v: Flags): Record<string, string> {
  const given = [v.relink].flat().filter((x): x is string => typeof x === 'string');
  const out: Record<string, string> = {};
  for (const g of given) {
    const i = g.indexOf('=');
    if (i <= 0 || i === g.length - 1) throw new InputError(`--relink ${g}: expected OLD=NEW (the path or file name the session recorded, and where the data is now)`);
    out[g.slice(0, i)] = physicalPath(g.slice(i + 1));
  }
  return out;
}


export async function cmdSession(args: string[], engineOptions: (v: Record<string, unknown>) => EngineOptions, engineFlags: EngineFlags): Promise<void> {
  const [sub, ...rest] = args;
  if (sub === 'show') return sessionShow(rest, engineOptions, engineFlags);
  if (sub === 'apply') return sessionApply(rest, engineOptions, engineFlags);
  throw new InputError(`session ${sub ?? ''}: expected session show FILE or session apply FILE --to DATA --out NEW${SESSION_SUFFIX}`.replace('session :', 'session:'));
}

async function sessionShow(args: string[], engineOptions: (v: Record<string, unknown>) => EngineOptions, engineFlags: EngineFlags): Promise<void> {
  const parsed = parseFlags(args, { ...engineFlags, relink: { type: 'string', multiple: true }, json: { type: 'boolean' } });
  const v = parsed.values as Flags;
  rejectExtraPositionals(parsed.positionals, 'session show');
  const file = parsed.positionals[0];
  if (!file) throw new InputError(`session show needs a session file (NAME${SESSION_SUFFIX})`);
  await withService(engineOptions({ ...v, quiet: true } as Record<string, unknown>), true, async (service) => {
    const s = await service.openSession({ path: physicalPath(file), relink: relinkFlags(v), openData: false });
    const entries = await service.sessionEntries();
    const d = s.document;
    const listing = {
      session: s.path, format_version: d.formatVersion, scanfold_version: d.scanfoldVersion, created: d.created, modified: d.modified,
      datasets: s.datasets.map((x) => ({ id: x.ref.id, name: x.ref.name, shape: shapeText(x.ref.shape), dtype: x.ref.dtype, status: x.status, where: x.how, fingerprint: x.ref.fingerprint })),
      results: entries.map((r) => ({
        key: r.key, method: r.method, dataset: r.datasetRef, created: r.created, recipe: r.request,
        arrays: Object.fromEntries(r.arrays.map((a) => [a.name, { shape: a.shape, units: a.units }])),
      })),
      app: d.app ? { detectors: d.app.detectors.length, regions: d.app.regions.length, dataset: d.app.dataset } : null,
    };
    if (v.json === true) {
      process.stdout.write(JSON.stringify(listing, null, 2) + '\n');
      return;
    }
    const lines = [`${s.path}: session format ${d.formatVersion}, written by Scanfold ${d.scanfoldVersion}; created ${d.created}, modified ${d.modified}`, '', 'datasets:'];
    for (const x of listing.datasets) lines.push(`  ${x.id}  ${x.name}  ${x.shape}, ${x.dtype}  ${x.status}: ${x.where}`);
    lines.push('', 'results (in the order they were made; the recipe replays with session apply):');
    for (const r of listing.results) {
      lines.push(`  ${r.key}  ${r.method} on ${r.dataset}, ${r.created}`);
      lines.push(`      recipe ${JSON.stringify(r.recipe, (_k, x) => (Array.isArray(x) && x.length > 16 ? `(${x.length} values)` : x))}`);
      for (const [name, a] of Object.entries(r.arrays)) lines.push(`      /results/${r.key}/${name}  ${a.shape.join('×')}  ${a.units}`);
    }
    if (listing.app) lines.push('', `app setup: ${listing.app.detectors} detector(s), ${listing.app.regions} region(s), showing ${listing.app.dataset ?? 'no dataset'}`);
    process.stdout.write(lines.join('\n') + '\n');
  });
}

/** Replay one kept request on another dataset, keeping its result under the same key. */
async function replay(service: EngineService, method: SessionMethod, request: Record<string, unknown>, dataset: string, key: string): Promise<void> {
  const req = { ...request, dataset, keepAs: key };
  const call = service[method] as (r: typeof req) => Promise<unknown>;
  try {
    await call.call(service, req);
  } catch (e) {
    if (e instanceof InputError) throw new InputError(`session apply: result ${key} (${method}) cannot be made on this dataset: ${e.message}`, e.code);
    throw e;
  }
}

async function sessionApply(args: string[], engineOptions: (v: Record<string, unknown>) => EngineOptions, engineFlags: EngineFlags): Promise<void> {
  const parsed = parseFlags(args, { ...SOURCE_OPTIONS, ...engineFlags, to: { type: 'string' }, out: { type: 'string' } });
  const v = parsed.values as Flags;
  rejectExtraPositionals(parsed.positionals, 'session apply');
  const file = parsed.positionals[0];
  if (!file) throw new InputError(`session apply needs a session file: session apply FILE${SESSION_SUFFIX} --to DATA --out NEW${SESSION_SUFFIX}`);
  if (typeof v.to !== 'string') throw new InputError('session apply needs --to DATA (the dataset to replay the recipe on, with its source flags)');
  if (typeof v.out !== 'string') throw new InputError(`session apply needs --out NEW${SESSION_SUFFIX} (the new session; the one applied is left as it is)`);
  const spec = sourceSpecFromFlags(v.to, v as Record<string, unknown>);
  const source = physicalPath(file);
  if (sameFileAt(v.out, source)) throw new InputError('session apply: --out is the session being applied; give a new name so the recipe stays as it was');
  const quiet = v.quiet === true;
  await withService(engineOptions(v as Record<string, unknown>), quiet, async (service) => {
    const s = await service.openSession({ path: source, openData: false });
    const recipe = s.document.entries;
    if (!recipe.length) throw new InputError(`${s.path}: the session holds no results, so there is no recipe to apply`);
    await service.forgetSession();
    const opened = await service.open(spec);
    for (const e of recipe) {
      if (!quiet) process.stderr.write(`${e.key}: ${e.method}\n`);
      await replay(service, e.method, e.request, opened.id, e.key);
    }
    const app = s.document.app ? { ...s.document.app, dataset: opened.id } : undefined;
    const saved = await service.saveSession({ path: v.out as string, ...(app ? { app } : {}) });
    if (!quiet) process.stderr.write(`wrote ${saved.path}: ${saved.results} result(s) of ${s.path}'s recipe made on ${opened.descriptor.path}\n`);
  });
}
