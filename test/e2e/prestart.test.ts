// Worker threads started before the command line loads (src-main/engine/prestart.ts): a pool
// adopts them as its own, and they get the pool's configuration (index, memory allowance) by
// message, as freshly spawned ones do.
import fs from 'node:fs';
import { afterAll, describe, expect, it } from 'vitest';
import { adoptPrestarted, prestartWorkers, workersWanted } from '../../src-main/engine/prestart';
import { WorkerPool } from '../../src-main/engine/worker-pool';
import { distFile } from '../../src-main/engine/paths';
import { H5WASM_BASE_BYTES } from '../../src-main/io/hdf5';
import { makeDemoSample } from '../helpers/fixtures';

const dirs: string[] = [];
afterAll(() => { for (const d of dirs) fs.rmSync(d, { recursive: true, force: true }); });

describe('workers started ahead of the pool', () => {
  it('how many a command wants: its --workers, else the cores; none for help or commands without data', () => {
    const data = new Set(['com', 'image']);
    expect(workersWanted(['com', 'f.h5', '--out', 'o.h5'], 4, data)).toBe(4);
    expect(workersWanted(['com', 'f.h5', '--workers', '2'], 4, data)).toBe(2);
    expect(workersWanted(['image', 'f.h5', '--workers=3'], 4, data)).toBe(3);
    // More than the cores: the pool spawns the rest itself.
    expect(workersWanted(['com', 'f.h5', '--workers', '16'], 4, data)).toBe(4);
    // A bad count is left to the flag parser's message.
    expect(workersWanted(['com', 'f.h5', '--workers', 'two'], 4, data)).toBeNull();
    expect(workersWanted(['com', '--help'], 4, data)).toBeNull();
    expect(workersWanted(['info', 'f.h5'], 4, data)).toBeNull();
    expect(workersWanted([], 4, data)).toBeNull();
  });

  it('a pool adopts them, numbers them, and they honour its memory allowance', async () => {
    const { dir, file } = await makeDemoSample('scanfold-prestart-');
    dirs.push(dir);
    prestartWorkers(2);
    // The demo's chunks are compressed: a worker refuses to read them on less than HDF5's base memory.
    const pool = new WorkerPool({ size: 2, memoryPerWorkerBytes: H5WASM_BASE_BYTES / 2 });
    try {
      expect(adoptPrestarted(distFile('tile-worker.mjs')), 'the pool took both').toBeNull();
      expect((await pool.each((w) => w.ping())).sort()).toEqual([0, 1]);
      const refusals = await pool.each((w) => w.open({ path: file, datasetPath: '/scan/frames' }).then(() => null, (e: { message: string }) => e.message));
      for (const message of refusals) expect(message).toMatch(/each worker's share of the memory budget/);
    } finally {
      await pool.close();
    }
    // Without an allowance the same workers (prestarted again) open it.
    prestartWorkers(1);
    const open = new WorkerPool({ size: 1 });
    try {
      const [reply] = await open.each((w) => w.open({ path: file, datasetPath: '/scan/frames' }));
      expect(reply.descriptor.shape).toMatchObject({ scanY: 64, scanX: 64 });
    } finally {
      await open.close();
    }
  });
});
