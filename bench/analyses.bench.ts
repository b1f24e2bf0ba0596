// `npm run bench` (second part): virtual detectors and COM over the page-cached `large` sample,
// beside a plain read of the same bytes and NumPy (memmap + mask dot, memmap COM), as ratios
// from one run; and the preview-cube detector update a drag gets.
import fs from 'node:fs';
import path from 'node:path';
import { spawnSync } from 'node:child_process';
import type { SourceSpec } from '../src-shared/model/dataset';
import type { DetectorSpec } from '../src-shared/model/detectors';
import { compileDetector } from '../src-shared/compute/detector-masks';
import { Engine } from '../src-main/engine/engine';
import { previewDetectorImages } from '../src-main/engine/preview';
import { projectRoot } from '../src-main/engine/paths';

const PY = '/usr/bin/python3';

function median(xs: number[]): number { const s = [...xs].sort((a, b) => a - b); return s[Math.floor(s.length / 2)]; }

export async function runAnalysesBenchmark(opts: { raw: string; shape: number[]; workers: number; readRate: number }): Promise<void> {
  const [sy, sx, ky, kx] = opts.shape;
  const spec: SourceSpec = { path: opts.raw, format: 'raw', raw: { shape: { scanY: sy, scanX: sx, detY: ky, detX: kx }, dtype: 'uint16', byteOrder: 'little', offset: 0 } };
  const c = { x: (kx - 1) / 2, y: (ky - 1) / 2 };
  // The same detectors the NumPy script builds (numpy_detectors.py).
  const annulus: DetectorSpec = { shape: { kind: 'annulus', cx: c.x, cy: c.y, rInner: ky * 0.15, rOuter: ky * 0.45 } };
  const four: DetectorSpec[] = [annulus,
    { shape: { kind: 'disk', cx: c.x, cy: c.y, r: ky * 0.1 } },
    { shape: { kind: 'rectangle', x0: 0, y0: 0, x1: Math.ceil(kx / 2) - 1, y1: ky - 1 } },
    { shape: { kind: 'rectangle', x0: 0, y0: 0, x1: kx - 1, y1: Math.ceil(ky / 2) - 1 } }];
  const engine = new Engine({ workers: opts.workers });
  const bytes = sy * sx * ky * kx * 2;
  const rate = (s: number) => bytes / s;
  try {
    const summary = await engine.firstPass(spec).result; // warms the workers and gives the preview cube
    const time = async (fn: () => Promise<{ seconds: number }>) => {
      const runs = [];
      for (let i = 0; i < 3; i++) runs.push((await fn()).seconds);
      return median(runs);
    };
    const one = await time(() => engine.virtualImages(spec, [compileDetector(annulus, ky, kx)]).result);
    const fourT = await time(() => engine.virtualImages(spec, four.map((d) => compileDetector(d, ky, kx))).result);
    const com = await time(() => engine.comSums(spec, { mask: null, threshold: 0 }).result);
    const comMasked = await time(() => engine.comSums(spec, { mask: compileDetector({ shape: { kind: 'disk', cx: c.x, cy: c.y, r: ky * 0.3 } }, ky, kx), threshold: 0 }).result);
    // A drag: the annulus moves by a third of a pixel per step; each step compiles the weighted detector and answers from the preview cube.
    const drag: number[] = [];
    for (let i = 0; i < 15; i++) {
      const t0 = performance.now();
      const det = compileDetector({ shape: { kind: 'annulus', cx: c.x + i / 3, cy: c.y, rInner: ky * 0.15, rOuter: ky * 0.45 }, weighted: true }, ky, kx);
      previewDetectorImages(summary.preview, [det]);
      drag.push(performance.now() - t0);
    }
    let numpy: Record<string, number | string> | null = null;
    if (fs.existsSync(PY)) {
      // OPENBLAS_CORETYPE / OPENBLAS_L2_SIZE are set on this machine for old OpenBLAS builds and slow a
      // current one; unset both for the NumPy side alone, as a user's NumPy runs.
      const env = { ...process.env };
      delete env.OPENBLAS_CORETYPE; delete env.OPENBLAS_L2_SIZE;
      const p = spawnSync(PY, [path.join(projectRoot(), 'bench/numpy_detectors.py'), opts.raw, String(sy), String(sx), String(ky), String(kx)], { encoding: 'utf8', env });
      if (p.status === 0) numpy = JSON.parse(p.stdout.trim().split('\n').pop()!);
      else console.error('NumPy comparison skipped: ' + (p.stderr || p.error?.message));
    }
    const row = (what: string, s: number, np?: number) => {
      const cells = [what, (rate(s) / 1e9).toFixed(2), (rate(s) / opts.readRate).toFixed(2)];
      if (np !== undefined) cells.push(`${(np / s).toFixed(2)}× NumPy (${(rate(np) / 1e9).toFixed(2)} GB/s)`);
      return cells.join(' | ');
    };
    console.log(`\nvirtual detectors and COM (${opts.workers} workers, warm engine, median of 3), one run:`);
    console.log('what | GB/s | × plain read | vs NumPy');
    console.log(row('one annular detector', one, numpy?.one_detector as number | undefined));
    console.log(row('four detectors at once', fourT, numpy?.four_detectors as number | undefined));
    console.log(row('centre of mass, whole pattern', com, numpy?.com as number | undefined));
    console.log(row('centre of mass, disk mask', comMasked));
    console.log(`preview-cube detector update (weighted annulus, ${summary.preview.qY}×${summary.preview.qX} × ${summary.preview.pY}×${summary.preview.pX} cube): median ${median(drag).toFixed(1)} ms, max ${Math.max(...drag).toFixed(1)} ms over ${drag.length} drag steps`);
  } finally {
    await engine.close();
  }
}
