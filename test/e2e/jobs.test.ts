// Jobs on the worker pool: progress, cancel at any moment, a worker killed mid-job, a reader
// failing inside a worker — and each time the next job on the same engine must succeed.
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { Engine } from '../../src-main/engine/engine';
import { CancelledError } from '../../src-shared/model/errors';
import type { SourceSpec } from '../../src-shared/model/dataset';
import type { JobProgress } from '../../src-shared/contract/jobs';
import { tightBudget } from '../helpers/fixtures';

const shape = { scanY: 64, scanX: 128, detY: 64, detX: 64 };
let dir: string;
let spec: SourceSpec;
let expectedTotal0 = 0;

beforeAll(() => {
  dir = fs.mkdtempSync(path.join(os.tmpdir(), 'scanfold-jobs-'));
  const file = path.join(dir, 'ramp.u16');
  // Analytic content: pattern p holds the value (p mod 1000) in every pixel, so its total is known.
  const patt = shape.detY * shape.detX;
  const fd = fs.openSync(file, 'w');
  const row = new Uint16Array(shape.scanX * patt);
  for (let y = 0; y < shape.scanY; y++) {
    for (let x = 0; x < shape.scanX; x++) row.fill((y * shape.scanX + x) % 1000, x * patt, (x + 1) * patt);
    fs.writeSync(fd, row);
  }
  fs.closeSync(fd);
  spec = { path: file, raw: { shape, dtype: 'uint16', byteOrder: 'little', offset: 0 } };
  expectedTotal0 = 0; // pattern 0 holds zeros
});
afterAll(() => fs.rmSync(dir, { recursive: true, force: true }));

function checkResult(total: Float64Array) {
  // analytic: pattern p sums to (p mod 1000) × det_y × det_x
  const patt = shape.detY * shape.detX;
  expect(total[0]).toBe(expectedTotal0);
  for (const p of [1, 999, 1000, 5000, shape.scanY * shape.scanX - 1]) expect(total[p]).toBe((p % 1000) * patt);
}

describe('jobs', () => {
  it('reports progress with bytes and an ETA, and finishes at fraction 1', async () => {
    const engine = new Engine({ workers: 2, budgetBytes: tightBudget(2, false, 16 << 20) });
    try {
      const job = engine.firstPass(spec);
      const seen: JobProgress[] = [];
      job.onProgress((p) => seen.push(p));
      const r = await job.result;
      checkResult(r.totalIntensity);
      expect(seen.length).toBe(r.plan.tiles.length);
      expect(seen.at(-1)!.fraction).toBe(1);
      expect(seen.at(-1)!.bytesDone).toBe(r.descriptor.byteSize);
      expect(seen[0].etaSeconds).not.toBeNull();
      expect(engine.activity()[0].state).toBe('done');
    } finally {
      await engine.close();
    }
  });

  it('cancels mid-job, and the pool is usable right after', async () => {
    const engine = new Engine({ workers: 2, budgetBytes: tightBudget(2, false, 16 << 20) });
    try {
      const job = engine.firstPass(spec);
      job.onProgress(() => job.cancel());
      await expect(job.result).rejects.toBeInstanceOf(CancelledError);
      expect(job.progress.fraction).toBeLessThan(1);
      expect(engine.activity()[0].state).toBe('cancelled');
      const again = await engine.firstPass(spec).result;
      checkResult(again.totalIntensity);
    } finally {
      await engine.close();
    }
  });

  it('fails with a message when a worker is killed mid-job; the worker is replaced', async () => {
    const engine = new Engine({ workers: 2, budgetBytes: tightBudget(2, false, 16 << 20) });
    try {
      const job = engine.firstPass(spec);
      let killed = false;
      job.onProgress(() => { if (!killed) { killed = true; void engine.pool.kill(0); } });
      await expect(job.result).rejects.toThrow(/worker 0 stopped unexpectedly/);
      expect(job.state).toBe('failed');
      const again = await engine.firstPass(spec).result;
      checkResult(again.totalIntensity);
      expect(engine.pool.replacements).toBeGreaterThanOrEqual(1);
    } finally {
      await engine.close();
    }
  });

  it('fails with the reader\'s message when the file shrinks under a running job', async () => {
    const copy = path.join(dir, 'shrinking.u16');
    fs.copyFileSync(spec.path, copy);
    const engine = new Engine({ workers: 2, budgetBytes: tightBudget(2, false, 16 << 20) });
    try {
      const job = engine.firstPass({ ...spec, path: copy });
      let cut = false;
      job.onProgress(() => { if (!cut) { cut = true; fs.truncateSync(copy, 1 << 20); } });
      await expect(job.result).rejects.toThrow(/shrinking\.u16/);
      const again = await engine.firstPass(spec).result;
      checkResult(again.totalIntensity);
    } finally {
      await engine.close();
    }
  });
});
