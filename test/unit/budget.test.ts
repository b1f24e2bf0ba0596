import { describe, expect, it } from 'vitest';
import { choosePreviewBinning, parseBytes, planFirstPass, previewBytes, MiB, GiB } from '../../src-main/engine/budget';
import type { DatasetDescriptor } from '../../src-shared/model/dataset';
import { InputError } from '../../src-shared/model/errors';

function desc(scanY: number, scanX: number, detY: number, detX: number, format: 'raw' | 'hdf5' = 'raw'): DatasetDescriptor {
  const byteSize = scanY * scanX * detY * detX * 2;
  return {
    format, path: '/x', datasetPath: null, shape: { scanY, scanX, detY, detX }, storedShape: [scanY, scanX, detY, detX],
    dtype: 'uint16', byteSize, fingerprint: 'f', layout: { kind: 'contiguous', dataOffset: 0, byteOrder: 'little' }, spec: { path: '/x' },
  };
}

describe('memory budget planning', () => {
  it('keeps every plan inside the budget, whatever the dataset size', () => {
    for (const d of [desc(256, 256, 128, 128), desc(1024, 1024, 256, 256), desc(4096, 4096, 128, 128, 'hdf5'), desc(7, 5, 33, 17)]) {
      for (const budget of [64 * MiB, 256 * MiB, GiB]) {
        for (const workers of [1, 2, 8]) {
          const limits = { budgetBytes: budget, previewBudgetBytes: 256 * MiB, workers };
          const unitBytes = 4 * d.shape.scanX * d.shape.detY * d.shape.detX * 2 * (d.format === 'hdf5' ? 2 : 1) * workers;
          let p;
          try {
            p = planFirstPass(d, 4, limits);
          } catch (e) {
            // Refusing is right only when one aligned tile per worker takes over half the budget
            // (the preview cube takes at most a quarter, the accumulators little).
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
    expect(() => planFirstPass(desc(256, 256, 256, 256), 1, { budgetBytes: 16 * MiB, previewBudgetBytes: MiB, workers: 2 }))
      .toThrow(InputError);
    expect(() => planFirstPass(desc(256, 256, 256, 256), 1, { budgetBytes: 16 * MiB, previewBudgetBytes: MiB, workers: 2 }))
      .toThrow(/at least/);
  });

  it('parses sizes', () => {
    expect(parseBytes('1GiB')).toBe(GiB);
    expect(parseBytes('64MiB')).toBe(64 * MiB);
    expect(parseBytes('512m')).toBe(512 * MiB);
    expect(parseBytes('4096')).toBe(4096);
    expect(() => parseBytes('lots')).toThrow(/expected/);
  });
});
