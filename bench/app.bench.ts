// The application's latencies in a real browser (Debian's chromium, software WebGL) in served
// mode on the 2 GiB sample: open → first full image beside a plain read of the file; pointer →
// pattern drawn (and the engine's share of it) over 100 hover moves; detector drag → preview
// image drawn (and the engine's share) over 100 drag steps. Median and 95th percentile.
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { chromium } from 'playwright-core';
import { EngineService } from '../src-main/engine/service';
import { distFile } from '../src-main/engine/paths';
import { APP_PREVIEW_BUDGET_BYTES } from '../src-main/engine/budget';
import { startServed } from '../src-main/transport/served';
import type { ScanfoldService } from '../src-shared/contract/service';
import { interceptService } from '../src-shared/contract/channel';

const CHROMIUM = '/usr/bin/chromium';

function stats(ms: number[]): string {
  if (!ms.length) return 'no samples';
  const s = [...ms].sort((a, b) => a - b);
  const q = (p: number) => s[Math.min(s.length - 1, Math.ceil(p * s.length) - 1)];
  return `median ${q(0.5).toFixed(1)} ms, p95 ${q(0.95).toFixed(1)} ms (n = ${s.length})`;
}

/** The service with the time of each request recorded, as the engine spends it. */
function timedService(real: ScanfoldService, log: Record<string, number[]>): ScanfoldService {
  return interceptService(real, async (method, _arg, call) => {
    const t0 = performance.now();
    const r = await call();
    (log[method] ??= []).push(performance.now() - t0);
    return r;
  });
}

export async function runAppBenchmark(opts: { h5: string; workers: number; plainReadSeconds: number }): Promise<void> {
  if (!fs.existsSync(CHROMIUM)) {
    console.log(`\napp latencies: skipped (${CHROMIUM} is missing; apt-get install chromium)`);
    return;
  }
  // A state folder of its own: the app autosaves its unsaved work there, which would otherwise
  // be offered for recovery at the user's next start.
  const stateDir = fs.mkdtempSync(path.join(os.tmpdir(), 'scanfold-bench-state-'));
  const real = new EngineService({ workers: opts.workers, previewBudgetBytes: APP_PREVIEW_BUDGET_BYTES, stateDir });
  const log: Record<string, number[]> = {};
  const browser = await chromium.launch({ executablePath: CHROMIUM, args: ['--use-angle=swiftshader', '--enable-unsafe-swiftshader', '--disable-gpu', '--no-sandbox'] });
  try {
    const t0 = performance.now();
    const opened = await real.open({ path: opts.h5, datasetPath: '/scan/frames' });
    // As `scanfold serve FILE` does: the first pass starts while the page loads.
    real.firstPass({ dataset: opened.id }).catch(() => undefined);
    const served = await startServed({ service: timedService(real, log), rendererDir: distFile('renderer') });
    const page = await browser.newPage({ viewport: { width: 1000, height: 860 } });
    const view = (name: string) => page.evaluate((n) => (window as unknown as { __scanfold: { view(n: string): { label: string | null; place: { zoom: number; cx: number; cy: number }; cssSize: number } | null } }).__scanfold.view(n), name);
    const latencies = () => page.evaluate(() => (window as unknown as { __scanfold: { latencies(): { token: string; ms: number }[] } }).__scanfold.latencies());
    await page.goto(served.url);
    await page.waitForFunction(() => (window as unknown as { __scanfold?: { view(n: string): { label: string | null } | null } }).__scanfold?.view('scan')?.label === 'bright field', null, { timeout: 600_000, polling: 20 });
    const openSeconds = (performance.now() - t0) / 1000;

    // Hover: 100 positions along a diagonal sweep, each waited for, so every one is measured.
    const scan = (await page.locator('canvas[data-view=scan]').boundingBox())!;
    const sv = (await view('scan'))!;
    await latencies();
    for (let i = 0; i < 100; i++) {
      const y = 20 + ((i * 37) % 216);
      const x = 20 + ((i * 53) % 216);
      await page.mouse.move(scan.x + (x - sv.place.cx) * sv.place.zoom + sv.cssSize / 2, scan.y + (y - sv.place.cy) * sv.place.zoom + sv.cssSize / 2);
      await page.waitForFunction((label) => (window as unknown as { __scanfold: { view(n: string): { label: string | null } } }).__scanfold.view('pattern').label === label, `pattern at (${y}, ${x})`, { polling: 'raf' });
    }
    const hover = (await latencies()).filter((l) => l.token.startsWith('hover')).map((l) => l.ms);
    const hoverEngine = (log.patternAt ?? []).slice(-100);

    // Drag: the outer circle of an annulus, 100 steps at 60 steps a second.
    await page.getByRole('button', { name: '+ annulus' }).click();
    await page.waitForFunction(() => (window as unknown as { __scanfold: { view(n: string): { label: string | null } } }).__scanfold.view('scan').label === 'annulus 1', null, { timeout: 120_000 });
    const pat = (await page.locator('canvas[data-view=pattern]').boundingBox())!;
    const pv = (await view('pattern'))!;
    const shape = await page.evaluate(() => {
      const inputs = Array.from(document.querySelectorAll("input[type=number]")) as HTMLInputElement[];
      return Object.fromEntries(inputs.map((i) => [i.getAttribute('aria-label')!.split(' ').pop()!, Number(i.value)]));
    });
    const toScreen = (x: number, y: number) => [pat.x + (x - pv.place.cx) * pv.place.zoom + pv.cssSize / 2, pat.y + (y - pv.place.cy) * pv.place.zoom + pv.cssSize / 2];
    log.previewImages = [];
    await latencies();
    const [hx, hy] = toScreen(shape.cx + shape.rOuter, shape.cy);
    await page.mouse.move(hx, hy);
    await page.mouse.down();
    for (let i = 1; i <= 100; i++) {
      const r = shape.rOuter - 0.25 * i;
      const [mx, my] = toScreen(shape.cx + r, shape.cy);
      await page.mouse.move(mx, my);
      await page.waitForTimeout(16);
    }
    await page.mouse.up();
    await page.waitForTimeout(500);
    const drag = (await latencies()).filter((l) => l.token.startsWith('drag')).map((l) => l.ms);
    const dragEngine = log.previewImages;

    console.log(`\napp in a browser (served mode, chromium with software WebGL, ${opts.workers} workers, 2 GiB HDF5 sample, one run):`);
    console.log(`open → first full image (bright field): ${openSeconds.toFixed(2)} s; a plain read of the file: ${opts.plainReadSeconds.toFixed(2)} s (${(opts.plainReadSeconds / openSeconds).toFixed(2)} × the plain read's speed)`);
    console.log(`pointer → pattern drawn: ${stats(hover)}; engine time (patternAt): ${stats(hoverEngine)}`);
    console.log(`detector drag → preview image drawn: ${stats(drag)} (steps whose image was drawn; a step overtaken by the next is skipped); engine time (previewImages): ${stats(dragEngine)}`);
    await served.close();
  } finally {
    await browser.close();
    await real.shutdown();
    fs.rmSync(stateDir, { recursive: true, force: true });
  }
}
