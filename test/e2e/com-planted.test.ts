// Centre of mass with no flags on planted fields: a known phase bump over a specimen beside a
// vacuum strip, seen through known scan-to-detector rotations and flips. Analytic case: the
// pattern is a smooth disk shifted by the gradient of the phase, so the field, the rotation,
// the flip and the vacuum are all known exactly.
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { EngineService } from '../../src-main/engine/service';

const SY = 24, SX = 40, K = 33, C = 16, R = 4, BEAM = 20000, VACUUM_COLS = 8;
let dir: string;
let service: EngineService;
beforeAll(() => {
  dir = fs.mkdtempSync(path.join(os.tmpdir(), 'scanfold-planted-'));
  service = new EngineService({ workers: 2, cacheDir: null });
});
afterAll(async () => {
  await service?.shutdown();
  if (dir) fs.rmSync(dir, { recursive: true, force: true });
});

/** The phase: a positive bump over the specimen, flat (0) over the vacuum strip. */
const phase = (y: number, x: number) => 6 * Math.exp(-((x - 26) ** 2 + (y - 12) ** 2) / (2 * 5 ** 2));

/** Scan frame → detector frame under scan = R(θ)·T·detector (com-field.ts's convention): detector = T·R(−θ)·scan. */
function toDetector(sx: number, sy: number, degrees: number, flip: boolean): [number, number] {
  const t = (degrees * Math.PI) / 180;
  const rx = Math.cos(t) * sx + Math.sin(t) * sy;
  const ry = -Math.sin(t) * sx + Math.cos(t) * sy;
  return flip ? [ry, rx] : [rx, ry];
}

function writePlanted(file: string, degrees: number, flip: boolean): void {
  const data = new Float32Array(SY * SX * K * K);
  const h = 1e-4;
  for (let y = 0; y < SY; y++) {
    for (let x = 0; x < SX; x++) {
      // The beam is deflected by the phase gradient (common practice: θ ∝ ∇φ).
      const gx = (phase(y, x + h) - phase(y, x - h)) / (2 * h);
      const gy = (phase(y + h, x) - phase(y - h, x)) / (2 * h);
      const [dx, dy] = toDetector(gx, gy, degrees, flip);
      const specimen = x >= VACUUM_COLS;
      const base = (y * SX + x) * K * K;
      let sum = 0;
      const disk = new Float64Array(K * K);
      for (let py = 0; py < K; py++) {
        for (let px = 0; px < K; px++) {
          const r = Math.hypot(px - (C + dx), py - (C + dy));
          disk[py * K + px] = 1 / (1 + Math.exp((r - R) / 0.4));
          sum += disk[py * K + px];
        }
      }
      for (let i = 0; i < K * K; i++) {
        // Over the specimen, 5 % of the beam is scattered evenly over the detector (symmetric about its centre).
        data[base + i] = (specimen ? 0.95 : 1) * BEAM * disk[i] / sum + (specimen ? (0.05 * BEAM) / (K * K) : 0);
      }
    }
  }
  fs.writeFileSync(file, Buffer.from(data.buffer));
}

function correlation(a: ArrayLike<number>, b: ArrayLike<number>): number {
  let ma = 0, mb = 0;
  for (let i = 0; i < a.length; i++) { ma += a[i]; mb += b[i]; }
  ma /= a.length; mb /= b.length;
  let sab = 0, saa = 0, sbb = 0;
  for (let i = 0; i < a.length; i++) { sab += (a[i] - ma) * (b[i] - mb); saa += (a[i] - ma) ** 2; sbb += (b[i] - mb) ** 2; }
  return sab / Math.sqrt(saa * sbb);
}

describe('COM defaults on planted fields with a vacuum strip', () => {
  const cases: [number, boolean][] = [[0, false], [37, false], [130, false], [250, false], [0, true], [37, true], [130, true], [250, true]];
  it.each(cases)('θ = %d°, flip = %s: vacuum found, rotation and flip recovered, phase follows the truth', async (degrees, flip) => {
    const file = path.join(dir, `planted-${degrees}-${flip}.f32`);
    writePlanted(file, degrees, flip);
    const d = await service.open({ path: file, raw: { shape: { scanY: SY, scanX: SX, detY: K, detX: K }, dtype: 'float32', byteOrder: 'little', offset: 0 } });
    const f = await service.comField({ dataset: d.id });
    expect(f.vacuum.source).toBe('found');
    expect(f.vacuum.positions).toBe(SY * VACUUM_COLS);
    expect(f.descan).toBe('reference (vacuum found)');
    expect(f.rotation.halfTurnDetermined).toBe(true);
    const err = Math.abs(((f.rotation.degrees - degrees) % 360 + 540) % 360 - 180);
    expect(err).toBeLessThan(1);
    expect(f.rotation.flip).toBe(flip);
    const truth = Float64Array.from({ length: SY * SX }, (_, i) => phase(Math.floor(i / SX), i % SX));
    expect(correlation(f.maps.phase.data, truth)).toBeGreaterThan(0.99);
    await service.close(d.id);
  });
});
