// Child process of the SIGKILL test (test/e2e/session.test.ts): saves a large session to the
// path given, over and over, through the same code path as the engine, until it is killed.
import { OutputFile } from '../../src-main/io/output-file';
import { writeSessionFile } from '../../src-main/session/session-file';
import type { SessionDocument } from '../../src-shared/model/session';

const target = process.argv[2];
const side = 2048;
const shape = { scanY: 1, scanX: 1, detY: side, detX: side };
const doc: SessionDocument = {
  format: 'scanfold-session', formatVersion: 1, scanfoldVersion: 'test', created: 'now', modified: 'now',
  datasets: [{
    id: 'data-1', name: 'x.npy', absolutePath: '/nowhere/x.npy', relativePath: 'x.npy', spec: { path: '/nowhere/x.npy' }, format: 'npy', datasetPath: null,
    shape, dtype: 'float64', byteSize: 8 * side * side, fingerprint: 'sha256:0',
  }],
  entries: [{ key: 'big', method: 'regionPattern', dataset: 'data-1', request: { region: { kind: 'rectangle', x0: 0, y0: 0, x1: 0, y1: 0 } }, created: 'now', scanfoldVersion: 'test', fingerprint: 'sha256:0' }],
  app: null,
};
const mean = new Float64Array(side * side).map((_, i) => i);
const result = { dataset: 'data-1', descriptor: { shape }, mean, max: mean, count: 1, region: 'x', nonFiniteInputs: 0, seconds: 0 };
process.stdout.write('writing\n');
for (;;) {
  await writeSessionFile(OutputFile.create(target, { flag: 'session' }), doc, new Map([['big', { method: 'regionPattern', result }]]));
}
