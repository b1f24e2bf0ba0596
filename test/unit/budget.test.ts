import { describe, expect, it } from 'vitest';
import { choosePreviewBinning, parseBytes, planFirstPass, previewBytes, resolveEngineLimits, MiB, GiB, WORKER_THREAD_BYTES, MAX_PREVIEW_BYTES, type ReaderFacts } from '../../src-main/engine/budget';
import type { DatasetDescriptor } from '../../src-shared/model/dataset';
import { InputError } from '../../src-shared/model/errors';

function desc(scanY: number, scanX: number, detY: number, detX: number, format: 'raw' | 'hdf5' = 'raw'): DatasetDescriptor {
  const byteSize = scanY * scanX * detY * detX * 2;
  return {
    format, path: '/x', datasetPath: null, shape: { scanY, scanX, detY, detX }, storedShape: [scanY, scanX, detY, detX],
    dtype: 'uint16', byteSize, fingerprint: 'f', layout: { kind: 'contiguous', dataOffset: 0, byteOrder: 'little' }, spec: { path: '/x' }, sourceFiles: ['/x'],
  };
}

const HDF5_FIXED = 24 * MiB;
function reader(d: DatasetDescriptor, rowAlignment: number): ReaderFacts {
  return { rowAlignment, memory: d.format === 'hdf5' ? { tileCopies: 2, fixedBytes: HDF5_FIXED } : { tileCopies: 1, fixedBytes: 0 } };
}

describe('memory budget planning', () => {
  it('keeps every plan inside the budget, whatever the dataset size', () => {
    for (const d of [desc(256, 256, 128, 128), desc(1024, 1024, 256, 256), desc(4096, 4096, 128, 128, 'hdf5'), desc(7, 5, 33, 17)]) {
      for (const budget of [64 * MiB, 256 * MiB, GiB]) {
        for (const workers of [1, 2, 8]) {
          const limits = { budgetBytes: budget, previewBudgetBytes: 256 * MiB, workers };
          const unitBytes = 4 * d.shape.scanX * d.shape.detY * d.shape.detX * 2 * (d.format === 'hdf5' ? 2 : 1) * workers
            + workers * (WORKER_THREAD_BYTES + (d.format === 'hdf5' ? HDF5_FIXED : 0));
          let p;
          try {
            p = planFirstPass(d, reader(d, 4), limits);
          } catch (e) {
            // Refusing is right only when one aligned tile and the fixed cost of each worker take
            // over half the budget (the preview cube takes at most a quarter, the accumulators little).
            expect(e).toBeInstanceOf(InputError);
            expect(unitBytes).toBeGreaterThan(budget / 2);
            continue;
          }
          expect(p.plannedBytes).toBeLessThanOrEqual(budget);
          expect(p.preview.bytes).toBeLessThanOrEqual(budget / 4);
          expect(p.tileRows % 4).toBe(0);
          expect(p.tileRows % p.scanBin).toBe(0);
          // tiles cover every row exactly once
          expect(p.tiles.reduce((s, t) => s + t.nRows, 0)).toBe(d.shape.scanY);
          expect(p.tiles.every((t, i) => t.row0 === i * p.tileRows)).toBe(true);
        }
      }
    }
  });

  it('bins the detector first, down to 16 px, then the scan', () => {
    // 256×256 × 128×128 float32 is 4 GiB; 256 MiB fits at detector bin 4 (32×32), no scan binning.
    expect(choosePreviewBinning(desc(256, 256, 128, 128), 256 * MiB)).toEqual({ detBin: 4, scanBin: 1 });
    const b = choosePreviewBinning(desc(1024, 1024, 64, 64), 64 * MiB);
    expect(b.detBin).toBe(4);
    expect(previewBytes(desc(1024, 1024, 64, 64), b.detBin, b.scanBin)).toBeLessThanOrEqual(64 * MiB);
    expect(b.scanBin).toBe(4); // 1024×1024 × 16×16 × 4 B = 1 GiB; scan bin 4 → 64 MiB
  });

  it('refuses a budget too small for one tile, saying what is needed', () => {
    expect(() => planFirstPass(desc(256, 256, 256, 256), reader(desc(1, 1, 1, 1), 1), { budgetBytes: 16 * MiB, previewBudgetBytes: MiB, workers: 2 }))
      .toThrow(InputError);
    expect(() => planFirstPass(desc(256, 256, 256, 256), reader(desc(1, 1, 1, 1), 1), { budgetBytes: 16 * MiB, previewBudgetBytes: MiB, workers: 2 }))
      .toThrow(/at least/);
  });

  it('counts each worker thread and the reader\'s fixed memory in the plan', () => {
    const d = desc(64, 64, 64, 64, 'hdf5');
    const limits = { budgetBytes: 512 * MiB, previewBudgetBytes: 64 * MiB, workers: 4 };
    const p = planFirstPass(d, reader(d, 1), limits);
    expect(p.plannedBytes).toBeLessThanOrEqual(limits.budgetBytes);
    expect(p.plannedBytes).toBeGreaterThanOrEqual(4 * (WORKER_THREAD_BYTES + HDF5_FIXED));
    // 64 workers cost 64 × 34 MiB = 2.1 GiB before any tile: a 1 GiB budget cannot hold them.
    expect(() => planFirstPass(d, reader(d, 1), { ...limits, budgetBytes: GiB, workers: 64 })).toThrow(/each worker needs .* for itself .*fewer workers/);
  });

  it('caps workers at twice the cores with a note, and refuses budgets the machine cannot hold', () => {
    const machine = { cores: 2, memoryBytes: 24 * GiB };
    const r = resolveEngineLimits({ workers: 64 }, machine);
    expect(r.limits.workers).toBe(4);
    expect(r.notes[0]).toMatch(/64 workers asked for.*2 core.*using 4/);
    expect(resolveEngineLimits({}, machine).limits.workers).toBe(2);
    expect(() => resolveEngineLimits({ budgetBytes: 64 * GiB }, machine)).toThrow(/more than this machine's 24.00 GiB/);
    expect(() => resolveEngineLimits({ previewBudgetBytes: 16 * GiB }, machine)).toThrow(/preview budget of 16.00 GiB .* at most 3.00 GiB/);
    expect(() => resolveEngineLimits({ previewBudgetBytes: MAX_PREVIEW_BYTES }, machine)).not.toThrow();
  });

  it('parses sizes', () => {
    expect(parseBytes('1GiB')).toBe(GiB);
    expect(parseBytes('64MiB')).toBe(64 * MiB);
    expect(parseBytes('512m')).toBe(512 * MiB);
    expect(parseBytes('4096')).toBe(4096);
    expect(() => parseBytes('lots')).toThrow(/expected/);
  });
});
