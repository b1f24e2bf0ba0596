// The application in served mode, driven by Playwright through Debian's chromium (software
// WebGL): the token guards the page and the socket; hovering shows the engine's own pattern at
// that position; a detector's image in the Scan view is the engine's exact image of that
// detector; PCA and k-means run from their panels; a running job is cancelled; a corrupt file
// gives the engine's message and the app stays usable. The pixels drawn are checked against the
// engine's numbers mapped through the same colour map and contrast (read back from WebGL).
// Screenshots of each step are kept in test-artifacts/app/.
import fs from 'node:fs';
import net from 'node:net';
import path from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import WebSocket from 'ws';
import { chromium, type Browser, type Page } from 'playwright-core';
import { EngineService } from '../../src-main/engine/service';
import { distFile } from '../../src-main/engine/paths';
import { startServed, type Served } from '../../src-main/transport/served';
import { connectService } from '../../src-shared/contract/channel';
import { decodeMessage, encodeMessage } from '../../src-shared/contract/wire';
import { colormapLut, type ColormapName } from '../../src-shared/model/colormaps';
import { mapValue, wheelColour, type Contrast } from '../../src-shared/model/contrast';
import { makeDemoSample } from '../helpers/fixtures';

const CHROMIUM = '/usr/bin/chromium';
const ARTIFACTS = path.resolve(__dirname, '../../test-artifacts/app');

let dir: string;
let demo: string;
let service: EngineService;
let served: Served;
let browser: Browser;
let page: Page;

beforeAll(async () => {
  ({ dir, file: demo } = await makeDemoSample('scanfold-app-'));
  fs.mkdirSync(ARTIFACTS, { recursive: true });
  service = new EngineService({ workers: 2 });
  await service.open({ path: demo, datasetPath: '/scan/frames' });
  served = await startServed({ service, rendererDir: distFile('renderer') });
  browser = await chromium.launch({ executablePath: CHROMIUM, args: ['--use-angle=swiftshader', '--enable-unsafe-swiftshader', '--disable-gpu', '--no-sandbox'] });
  page = await browser.newPage({ viewport: { width: 1000, height: 860 } });
});

afterAll(async () => {
  await browser?.close();
  await served?.close();
  await service?.shutdown();
  fs.rmSync(dir, { recursive: true, force: true });
});

interface ViewState {
  contrast: Contrast;
  colormap: ColormapName;
  place: { zoom: number; cx: number; cy: number };
  cssSize: number;
  label: string | null;
  width: number;
  height: number;
  values: number[];
  lengths?: number[];
}

const viewState = (name: 'scan' | 'pattern') => page.evaluate((n) => (window as unknown as { __scanfold: { view(n: string): unknown } }).__scanfold.view(n), name) as Promise<ViewState>;

async function snap(name: string) {
  await page.screenshot({ path: path.join(ARTIFACTS, `${name}.png`) });
}

/** The canvas's drawn pixels (RGBA, rows from the top), read back from its WebGL context. */
async function canvasPixels(name: 'scan' | 'pattern'): Promise<{ width: number; height: number; rgba: number[] }> {
  return page.evaluate((n) => {
    const c = document.querySelector(`canvas[data-view=${n}]`) as HTMLCanvasElement;
    const gl = c.getContext('webgl')!;
    const px = new Uint8Array(c.width * c.height * 4);
    gl.readPixels(0, 0, c.width, c.height, gl.RGBA, gl.UNSIGNED_BYTE, px);
    // WebGL rows start at the bottom.
    const out: number[] = new Array(px.length);
    for (let y = 0; y < c.height; y++) for (let i = 0; i < c.width * 4; i++) out[(c.height - 1 - y) * c.width * 4 + i] = px[y * c.width * 4 + i];
    return { width: c.width, height: c.height, rgba: out };
  }, name);
}

/**
 * Every image pixel's drawn colour (sampled at its centre on the canvas) is the colour-map entry
 * of its value within ±2 entries (the shader computes in float32, this check in float64).
 */
function expectDrawn(view: ViewState, drawn: { width: number; height: number; rgba: number[] }, values: ArrayLike<number>) {
  const lut = colormapLut(view.colormap);
  const scale = drawn.width / view.cssSize;
  let checked = 0;
  const bad: string[] = [];
  for (let y = 0; y < view.height; y++) {
    for (let x = 0; x < view.width; x++) {
      const sx = Math.floor(((x - view.place.cx) * view.place.zoom + view.cssSize / 2) * scale);
      const sy = Math.floor(((y - view.place.cy) * view.place.zoom + view.cssSize / 2) * scale);
      if (sx < 0 || sy < 0 || sx >= drawn.width || sy >= drawn.height) continue;
      const t = mapValue(values[y * view.width + x], view.contrast);
      const at = (sy * drawn.width + sx) * 4;
      const got = drawn.rgba.slice(at, at + 3);
      const idx = Math.round(t * 255);
      let ok = false;
      for (let k = Math.max(0, idx - 2); k <= Math.min(255, idx + 2); k++) {
        if (Math.abs(lut[4 * k] - got[0]) <= 1 && Math.abs(lut[4 * k + 1] - got[1]) <= 1 && Math.abs(lut[4 * k + 2] - got[2]) <= 1) ok = true;
      }
      if (!ok && bad.length < 5) bad.push(`(${y}, ${x}) value ${values[y * view.width + x]} → entry ${idx}, drawn ${got}`);
      checked++;
    }
  }
  expect(bad).toEqual([]);
  expect(checked).toBeGreaterThan(0.9 * view.width * view.height);
}

describe('first pass, row by row', () => {
  it('the engine sends the bright-field image tile by tile, every row once, adding up to the final image', async () => {
    const svc = new EngineService({ workers: 2, budgetBytes: 100 * 2 ** 20 });
    try {
      const seen: { row0: number; nRows: number; values: Float64Array; label: string }[] = [];
      svc.onEvent((e) => { if (e.kind === 'image-rows') seen.push(e); });
      const o = await svc.open({ path: demo, datasetPath: '/scan/frames' });
      const first = await svc.firstPass({ dataset: o.id });
      const { scanY, scanX } = o.descriptor.shape;
      expect(seen.length).toBeGreaterThan(1); // more than one tile: the view fills in
      const assembled = new Float64Array(scanY * scanX).fill(NaN);
      const rows = new Uint8Array(scanY);
      for (const e of seen) {
        expect(e.label).toBe(first.defaultImages[0].label);
        assembled.set(e.values, e.row0 * scanX);
        for (let r = e.row0; r < e.row0 + e.nRows; r++) rows[r]++;
      }
      expect(Array.from(rows).every((n) => n === 1)).toBe(true);
      expect(assembled).toEqual(first.defaultImages[0].image);
    } finally {
      await svc.shutdown();
    }
  });
});

describe('served mode', () => {
  it('refuses a page request or a socket without the token', async () => {
    const base = `http://127.0.0.1:${served.port}`;
    expect((await fetch(`${base}/`)).status).toBe(403);
    expect((await fetch(`${base}/not-the-token/index.html`)).status).toBe(403);
    expect((await fetch(served.url)).status).toBe(200);
    const tryConnect = (url: string, origin?: string) => new Promise<string>((resolve) => {
      const ws = new WebSocket(url, origin ? { origin } : {});
      ws.on('open', () => { ws.close(); resolve('open'); });
      ws.on('error', () => resolve('refused'));
      ws.on('unexpected-response', () => resolve('refused'));
    });
    expect(await tryConnect(`ws://127.0.0.1:${served.port}/wrong/contract`)).toBe('refused');
    expect(await tryConnect(`ws://127.0.0.1:${served.port}/${served.token}/contract`, 'http://example.org')).toBe('refused');
    expect(await tryConnect(`ws://127.0.0.1:${served.port}/${served.token}/contract`)).toBe('open');
  });

  it('survives hostile requests: a bad URL, a foreign Host (DNS rebinding), a bad escape, a text frame, a reset', async () => {
    const raw = (text: string) => new Promise<string>((resolve) => {
      const s = net.connect(served.port, '127.0.0.1', () => s.write(text));
      let got = '';
      s.on('data', (d) => { got += d.toString('latin1'); });
      s.on('close', () => resolve(got));
      s.on('error', () => resolve(got));
      setTimeout(() => s.destroy(), 1500);
    });
    expect(await raw('GET //[ HTTP/1.1\r\nHost: 127.0.0.1\r\nConnection: close\r\n\r\n')).toMatch(/^HTTP\/1.1 403/);
    expect(await raw(`GET /${served.token}/index.html HTTP/1.1\r\nHost: attacker.example\r\nConnection: close\r\n\r\n`)).toMatch(/^HTTP\/1.1 403/);
    expect(await raw(`GET /${served.token}/% HTTP/1.1\r\nHost: 127.0.0.1\r\nConnection: close\r\n\r\n`)).toMatch(/^HTTP\/1.1 400/);
    expect(await raw(`GET /${served.token}/contract HTTP/1.1\r\nHost: attacker.example:${served.port}\r\nUpgrade: websocket\r\nConnection: Upgrade\r\nSec-WebSocket-Key: dGhlIHNhbXBsZSBub25jZQ==\r\nSec-WebSocket-Version: 13\r\n\r\n`)).toMatch(/^HTTP\/1.1 403/);
    // An upgrade without the token, reset at once.
    await new Promise<void>((resolve) => {
      const s = net.connect(served.port, '127.0.0.1', () => { s.write('GET /x HTTP/1.1\r\nHost: 127.0.0.1\r\nUpgrade: websocket\r\nConnection: Upgrade\r\n\r\n'); s.resetAndDestroy(); resolve(); });
    });
    // A text frame closes that socket only.
    const closed = await new Promise<number>((resolve) => {
      const ws = new WebSocket(`ws://127.0.0.1:${served.port}/${served.token}/contract`);
      ws.on('open', () => ws.send('{"t":"call"}'));
      ws.on('close', (code) => resolve(code));
    });
    expect(closed).toBe(1003);
    await new Promise((r) => setTimeout(r, 200));
    expect((await fetch(served.url)).status).toBe(200); // still serving
  });

  it('opens the demo: the first pass fills the Scan view with the bright-field image', async () => {
    await page.goto(served.url);
    await expect.poll(async () => (await viewState('scan'))?.label, { timeout: 60_000 }).toBe('bright field');
    const first = await service.firstPass({ dataset: (await service.datasets())[0].id });
    const view = await viewState('scan');
    expect(view.values).toEqual(Array.from(first.defaultImages[0].image));
    expectDrawn(view, await canvasPixels('scan'), first.defaultImages[0].image);
    await snap('1-opened');
  });

  it('calibrates from the file’s attributes, shows mrad and nm on the scale bars, and takes values from the form', async () => {
    const id = (await service.datasets())[0].id;
    const c = await service.calibrate({ dataset: id });
    const summary = page.locator('.calibration > button');
    const fmt = (v: number) => Number(v.toPrecision(4)).toString();
    await expect.poll(() => summary.textContent(), { timeout: 20_000 }).toBe(`${fmt(c.energyKeV)} keV · ${fmt(c.mradPerPixel)} mrad/px · ${fmt(c.scanStepNm!)} nm/step`);
    expect(await page.locator('[aria-label="Pattern view"] .scale-bar text').textContent()).toMatch(/ mrad$/);
    expect(await page.locator('[aria-label="Scan view"] .scale-bar text').textContent()).toMatch(/ nm$/);
    await summary.click();
    await page.getByLabel('convergence semi-angle (mrad)').fill('25');
    await page.getByRole('button', { name: 'calibrate' }).click();
    const given = await service.calibrate({ dataset: id, convergenceMrad: 25 });
    expect(given.mradPerPixel).not.toBeCloseTo(c.mradPerPixel, 3);
    await expect.poll(() => summary.textContent(), { timeout: 20_000 }).toContain(`${fmt(given.mradPerPixel)} mrad/px`);
  });

  it('hovering the Scan view shows the engine’s pattern at that probe position', async () => {
    const scan = (await page.locator('canvas[data-view=scan]').boundingBox())!;
    const view = await viewState('scan');
    const [y, x] = [21, 37];
    await page.mouse.move(scan.x + (x - view.place.cx) * view.place.zoom + view.cssSize / 2, scan.y + (y - view.place.cy) * view.place.zoom + view.cssSize / 2);
    await expect.poll(async () => (await viewState('pattern'))?.label, { timeout: 20_000 }).toBe(`pattern at (${y}, ${x})`);
    const engine = await service.patternAt({ dataset: (await service.datasets())[0].id, y, x });
    const pv = await viewState('pattern');
    expect(pv.values).toEqual(Array.from(engine.pattern));
    expectDrawn(pv, await canvasPixels('pattern'), engine.pattern);
    await snap('2-hover');
  });

  it('an annulus entered in the Detectors panel gives the engine’s exact image of that detector', async () => {
    await page.getByRole('button', { name: '+ annulus' }).click();
    const set = async (field: string, value: string) => {
      const input = page.getByLabel(`annulus 1 ${field}`);
      await input.fill(value);
    };
    await set('cx', '47.5');
    await set('cy', '47.5');
    await set('rInner', '12');
    await set('rOuter', '40');
    await expect.poll(async () => (await viewState('scan'))?.label, { timeout: 30_000 }).toBe('annulus 1');
    const spec = { shape: { kind: 'annulus' as const, cx: 47.5, cy: 47.5, rInner: 12, rOuter: 40 } };
    const exact = await service.virtualImages({ dataset: (await service.datasets())[0].id, detectors: [spec] });
    await expect.poll(async () => (await viewState('scan')).values, { timeout: 30_000 }).toEqual(Array.from(exact.images[0]));
    const view = await viewState('scan');
    expectDrawn(view, await canvasPixels('scan'), exact.images[0]);
    await snap('3-annulus');
    // The store holds the recipe as plain JSON: what reopens the data, and the detector.
    const state = await page.evaluate(() => (window as unknown as { __scanfold: { state(): unknown } }).__scanfold.state()) as { dataset: { spec: { path: string }; fingerprint: string }; detectors: { shape: unknown }[] };
    const opened = (await service.datasets())[0];
    expect(state.dataset.spec.path).toBe(demo);
    expect(state.dataset.fingerprint).toBe(opened.descriptor.fingerprint);
    expect(state.detectors.map((d) => d.shape)).toEqual([spec.shape]);
    // Export image: a PNG of the Scan view as drawn (its size, read from the PNG header).
    const [download] = await Promise.all([page.waitForEvent('download'), page.getByRole('button', { name: 'Export image' }).click()]);
    const png = fs.readFileSync(await download.path());
    expect(png.subarray(0, 8)).toEqual(Buffer.from([0x89, 0x50, 0x4e, 0x47, 0x0d, 0x0a, 0x1a, 0x0a]));
    const drawn = await canvasPixels('scan');
    expect([png.readUInt32BE(16), png.readUInt32BE(20)]).toEqual([drawn.width, drawn.height]);
    expect(download.suggestedFilename()).toBe('demo.h5-scan-view.png');
  });

  it('the contrast controls (colour map, gamma, manual limits) change the drawn pixels as they say, and undo restores them', async () => {
    await page.getByLabel('scan colour map').selectOption('cividis');
    await page.getByLabel('scan scaling').selectOption('gamma');
    await page.getByLabel('scan gamma').fill('0.5');
    await page.getByLabel('scan lower limit').fill('1000');
    await page.getByLabel('scan upper limit').fill('9000');
    await page.getByLabel('scan upper limit').press('Enter');
    await expect.poll(async () => (await viewState('scan')).contrast, { timeout: 10_000 }).toEqual({ lo: 1000, hi: 9000, scaling: { kind: 'gamma', gamma: 0.5 } });
    const view = await viewState('scan');
    expect(view.colormap).toBe('cividis');
    expectDrawn(view, await canvasPixels('scan'), view.values);
    await snap('3b-contrast');
    await page.getByRole('button', { name: 'auto' }).first().click();
    await expect.poll(async () => (await viewState('scan')).contrast.lo, { timeout: 10_000 }).not.toBe(1000);
    await page.getByRole('button', { name: 'undo' }).click();
    await expect.poll(async () => (await viewState('scan')).contrast.lo, { timeout: 10_000 }).toBe(1000);
  });

  it('the Field panel shows the engine’s COM field: direction on the colour wheel with magnitude as brightness, and each map', async () => {
    await page.getByRole('button', { name: 'Compute field' }).click();
    await expect.poll(async () => (await viewState('scan'))?.label, { timeout: 60_000 }).toMatch(/^COM direction/);
    const field = await service.comField({ dataset: (await service.datasets())[0].id });
    const view = await viewState('scan');
    expect(view.values).toEqual(Array.from(field.maps.direction.data));
    expect(view.lengths).toEqual(Array.from(field.maps.magnitude.data));
    // Every pixel: the cyclic map at its direction times its brightness (±2 entries, ±2 levels).
    const drawn = await canvasPixels('scan');
    const lut = colormapLut('sinebow');
    const scale = drawn.width / view.cssSize;
    const bad: string[] = [];
    for (let y = 0; y < view.height; y++) {
      for (let x = 0; x < view.width; x++) {
        const i = y * view.width + x;
        const sx = Math.floor(((x - view.place.cx) * view.place.zoom + view.cssSize / 2) * scale);
        const sy = Math.floor(((y - view.place.cy) * view.place.zoom + view.cssSize / 2) * scale);
        const at = (sy * drawn.width + sx) * 4;
        const got = drawn.rgba.slice(at, at + 3);
        let ok = false;
        for (const d of [-0.03, 0, 0.03]) {
          const want = wheelColour(view.values[i] + d, view.lengths![i], view.contrast.hi, lut);
          if (want.every((w, c) => Math.abs(w - got[c]) <= 2.5 + 0.02 * w)) ok = true;
        }
        if (!ok && bad.length < 5) bad.push(`(${y}, ${x}) direction ${view.values[i]} length ${view.lengths![i]} drawn ${got}`);
      }
    }
    expect(bad).toEqual([]);
    await snap('4a-field');
    await page.getByRole('button', { name: 'phase', exact: true }).click();
    await expect.poll(async () => (await viewState('scan'))?.label, { timeout: 10_000 }).toMatch(/^COM phase/);
    expect((await viewState('scan')).values).toEqual(Array.from(field.maps.phase.data));
    // A given rotation: the engine's field with that rotation.
    await page.getByLabel('field rotation').fill('30');
    await page.getByRole('button', { name: 'apply' }).click();
    const turned = await service.comField({ dataset: (await service.datasets())[0].id, rotation: { degrees: 30, flip: field.rotation.flip } });
    await expect.poll(async () => (await viewState('scan')).values, { timeout: 60_000 }).toEqual(Array.from(turned.maps.direction.data));
  });

  it('runs PCA and k-means from their panels', async () => {
    await page.getByRole('button', { name: 'Run PCA' }).click();
    await expect.poll(async () => (await viewState('scan'))?.label, { timeout: 60_000 }).toBe('loading map 1');
    expect((await viewState('pattern')).label).toMatch(/^component pattern 1/);
    // The thumbnails side by side: a click on one shows its pair large, as the engine computed it.
    await page.getByRole('button', { name: 'loading map 3', exact: true }).click();
    await expect.poll(async () => (await viewState('scan'))?.label, { timeout: 10_000 }).toBe('loading map 3');
    expect((await viewState('pattern')).label).toMatch(/^component pattern 3/);
    const pcaEngine = await service.pca({ dataset: (await service.datasets())[0].id, components: 8 });
    expect((await viewState('scan')).values).toEqual(Array.from(pcaEngine.loadings.subarray(2 * 64 * 64, 3 * 64 * 64)));
    // The scree chart (uPlot): its plot area spans components 0.5 … n + 0.5; a click picks the nearest.
    const over = (await page.locator('.scree .u-over').boundingBox())!;
    const n = pcaEngine.explainedVarianceRatio.length;
    await page.mouse.click(over.x + ((2 - 0.5) / n) * over.width, over.y + over.height / 2);
    await expect.poll(async () => (await viewState('scan'))?.label, { timeout: 10_000 }).toBe('loading map 2');
    expect((await viewState('pattern')).label).toMatch(/^component pattern 2/);
    await snap('4-pca');
    await page.getByRole('button', { name: 'Run k-means' }).click();
    await expect.poll(async () => (await viewState('scan'))?.label, { timeout: 60_000 }).toBe('cluster map (4 clusters)');
    const labels = (await viewState('scan')).values;
    expect(new Set(labels).size).toBe(4);
    await snap('5-kmeans');
  });

  it('a region drawn on the Scan view shows its mean pattern; a cluster becomes a region; the fit uses both', async () => {
    await page.evaluate(() => window.scrollTo(0, 0));
    const scan = (await page.locator('canvas[data-view=scan]').boundingBox())!;
    const view = await viewState('scan');
    const at = (x: number, y: number) => [scan.x + (x - view.place.cx) * view.place.zoom + view.cssSize / 2, scan.y + (y - view.place.cy) * view.place.zoom + view.cssSize / 2];
    const [ax, ay] = at(4, 6);
    const [bx, by] = at(9, 20);
    await page.keyboard.down('Shift');
    await page.mouse.move(ax, ay);
    await page.mouse.down();
    await page.mouse.move((ax + bx) / 2, (ay + by) / 2);
    await page.mouse.move(bx, by);
    await page.mouse.up();
    await page.keyboard.up('Shift');
    await expect.poll(async () => (await viewState('pattern'))?.label, { timeout: 20_000 }).toBe('mean pattern of region 1 (90 positions)');
    const id = (await service.datasets())[0].id;
    const rect = { kind: 'rectangle' as const, x0: 4, y0: 6, x1: 9, y1: 20 };
    const engine = await service.regionPattern({ dataset: id, region: rect });
    expect((await viewState('pattern')).values).toEqual(Array.from(engine.mean));
    await snap('6a-region');
    // Cluster 1 of the k-means run as a second region, then the fit with both.
    await page.getByRole('button', { name: 'as region' }).first().click();
    await expect.poll(async () => (await viewState('pattern'))?.label, { timeout: 20_000 }).toMatch(/^mean pattern of cluster 1/);
    await page.getByRole('button', { name: 'Fit with 2 regions' }).click();
    await expect.poll(async () => (await viewState('scan'))?.label, { timeout: 60_000 }).toMatch(/^fit weight of/);
    const km = await service.kmeans({ dataset: id, clusters: 4 });
    const mask = { kind: 'mask' as const, width: 64, height: 64, values: Array.from(km.labels, (l) => (l === 0 ? 1 : 0)) };
    const want = await service.fit({ dataset: id, references: [rect, mask], nonnegative: true });
    expect((await viewState('scan')).values).toEqual(Array.from(want.coefficients.subarray(0, 64 * 64)));
    await snap('6b-fit');
    // The drawn region as the field's descan reference (the rotation stays the one given before).
    await page.getByLabel('descan reference').selectOption({ label: 'region 1' });
    const flip = await page.getByLabel('field flip').isChecked();
    await page.getByRole('button', { name: 'Compute field' }).click();
    const descanned = await service.comField({ dataset: id, rotation: { degrees: 30, flip }, descan: { kind: 'reference', region: { x0: 4, y0: 6, x1: 9, y1: 20 } } });
    expect(descanned.descan).toMatch(/region given/);
    await expect.poll(async () => (await viewState('scan')).values, { timeout: 60_000 }).toEqual(Array.from(descanned.maps.direction.data));
    await expect.poll(() => page.locator('.facts').textContent()).toMatch(/descan: reference \(region given\)/);
    // A polygon: Alt-click its corners, Enter closes it; its mean pattern is the engine's.
    const corners: [number, number][] = [[30, 30], [50, 34], [44, 55], [28, 48]];
    await page.evaluate(() => window.scrollTo(0, 0));
    const box = (await page.locator('canvas[data-view=scan]').boundingBox())!;
    const sv = await viewState('scan');
    await page.keyboard.down('Alt');
    for (const [x, y] of corners) await page.mouse.click(box.x + (x - sv.place.cx) * sv.place.zoom + sv.cssSize / 2, box.y + (y - sv.place.cy) * sv.place.zoom + sv.cssSize / 2);
    await page.keyboard.up('Alt');
    await page.keyboard.press('Enter');
    const poly = await service.regionPattern({ dataset: id, region: { kind: 'polygon', points: corners } });
    await expect.poll(async () => (await viewState('pattern'))?.label, { timeout: 20_000 }).toBe(`mean pattern of region 3 (${poly.count} positions)`);
    expect((await viewState('pattern')).values).toEqual(Array.from(poly.mean));
    await snap('6c-polygon');
  });

  it('a corrupt file gives the engine’s message, and the app stays usable', async () => {
    const bad = path.join(dir, 'corrupt.npy');
    fs.writeFileSync(bad, Buffer.from('\x93NUMPY\x01\x00garbage that is not a header'));
    await page.getByLabel('file to open').fill(bad);
    await page.getByRole('button', { name: 'Open', exact: true }).click();
    const alert = page.getByRole('alert');
    await expect.poll(async () => (await alert.count()) > 0 ? alert.first().textContent() : '', { timeout: 20_000 }).toMatch(/corrupt\.npy/);
    await snap('6-corrupt-file');
    // Still usable: the hover still answers.
    await page.evaluate(() => window.scrollTo(0, 0));
    const scan = (await page.locator('canvas[data-view=scan]').boundingBox())!;
    await page.mouse.move(scan.x + 100, scan.y + 100);
    await expect.poll(async () => (await viewState('pattern'))?.label, { timeout: 20_000 }).toMatch(/^pattern at/);
  });
});

describe('served mode, a long job', () => {
  it('a running job can be cancelled from the Activity list, and the app goes on', async () => {
    // 512 MiB of zeros (a sparse .npy) through the plain TypeScript kernels on one worker: a first
    // pass of several seconds, long enough to be caught running.
    const big = path.join(dir, 'zeros.npy');
    const header = "{'descr': '<u2', 'fortran_order': False, 'shape': (128, 128, 128, 128), }";
    const padded = header.padEnd(128 - 10 - 1, ' ') + '\n';
    const fd = fs.openSync(big, 'w');
    fs.writeSync(fd, Buffer.concat([Buffer.from('\x93NUMPY\x01\x00', 'latin1'), Buffer.from([padded.length & 0xff, padded.length >> 8]), Buffer.from(padded, 'latin1')]));
    fs.ftruncateSync(fd, 128 + 2 * 128 ** 4);
    fs.closeSync(fd);
    const slow = new EngineService({ workers: 1, kernel: 'reference' });
    const slowServed = await startServed({ service: slow, rendererDir: distFile('renderer') });
    const p = await browser.newPage({ viewport: { width: 1000, height: 860 } });
    try {
      await p.goto(slowServed.url);
      await p.getByLabel('file to open').fill(big);
      await p.getByRole('button', { name: 'Open', exact: true }).click();
      const running = p.locator('.job.running');
      await expect.poll(() => running.count(), { timeout: 30_000 }).toBe(1);
      await p.screenshot({ path: path.join(ARTIFACTS, '7-running.png') });
      // The pointer keeps answering while the job runs: the pattern under it comes from a worker
      // of its own, not from behind the job's tiles.
      const scan = (await p.locator('canvas[data-view=scan]').boundingBox())!;
      await p.mouse.move(scan.x + scan.width / 2 + 3, scan.y + scan.height / 2 + 3);
      await expect.poll(() => p.evaluate(() => (window as unknown as { __scanfold: { view(n: string): { label: string | null } } }).__scanfold.view('pattern').label), { timeout: 10_000 }).toMatch(/^pattern at/);
      expect(await running.count()).toBe(1);
      await running.getByRole('button', { name: 'cancel' }).click();
      await expect.poll(() => p.locator('.job.cancelled').count(), { timeout: 30_000 }).toBe(1);
      await p.screenshot({ path: path.join(ARTIFACTS, '8-cancelled.png') });
      expect(await p.getByRole('alert').count()).toBe(0);
      // A client that goes away takes its running jobs with it.
      const ws = new WebSocket(`ws://127.0.0.1:${slowServed.port}/${slowServed.token}/contract`);
      await new Promise((r) => ws.on('open', r));
      const client = connectService({
        send: (m) => ws.send(encodeMessage(m)),
        onMessage: (l) => { const h = (d: Buffer) => l(decodeMessage(new Uint8Array(d))); ws.on('message', h); return () => ws.off('message', h); },
      });
      const orphan = client.firstPass({ dataset: (await slow.datasets())[0].id, jobId: 'left-behind' });
      orphan.catch(() => undefined);
      await expect.poll(async () => (await slow.jobs()).find((j) => j.jobId === 'left-behind')?.state, { timeout: 30_000 }).toBe('running');
      ws.close();
      await expect.poll(async () => (await slow.jobs()).find((j) => j.jobId === 'left-behind')?.state, { timeout: 30_000 }).toBe('cancelled');
      // The engine goes on: the same dataset's first pass runs again to the end on request.
      const id = (await slow.datasets())[0].id;
      const again = await slow.virtualImages({ dataset: id, detectors: [{ shape: { kind: 'disk', cx: 10, cy: 10, r: 3 } }], badPixels: 'none' });
      expect(again.images[0].every((v) => v === 0)).toBe(true); // all zeros in, all zeros out
    } finally {
      await p.close();
      await slowServed.close();
      await slow.shutdown();
    }
  });

  it('one app page at a time: a second tab is told another has the engine, and works once that one is closed', async () => {
    const second = await startServed({ service, rendererDir: distFile('renderer') });
    const label = (p: Page) => p.evaluate(() => (window as unknown as { __scanfold: { view(n: string): { label: string | null } } }).__scanfold.view('scan').label);
    const a = await browser.newPage({ viewport: { width: 1000, height: 860 } });
    const b = await browser.newPage({ viewport: { width: 1000, height: 860 } });
    try {
      await a.goto(second.url);
      await expect.poll(() => label(a), { timeout: 60_000 }).toBe('bright field');
      await b.goto(second.url);
      await expect.poll(async () => (await b.getByRole('alert').allTextContents()).join(' '), { timeout: 20_000 }).toMatch(/open in another tab or window.*close the other, then reload this page/);
      expect(await label(b)).toBeNull();
      await b.screenshot({ path: path.join(ARTIFACTS, '9-another-tab.png') });
      // A tool (no Origin: not a page) is still served meanwhile.
      const ws = new WebSocket(`ws://127.0.0.1:${second.port}/${second.token}/contract`);
      await new Promise((r) => ws.on('open', r));
      const tool = connectService({
        send: (m) => ws.send(encodeMessage(m)),
        onMessage: (l) => { const h = (d: Buffer) => l(decodeMessage(new Uint8Array(d))); ws.on('message', h); return () => ws.off('message', h); },
      });
      expect((await tool.datasets()).length).toBeGreaterThan(0);
      ws.close();
      await a.close();
      await b.reload();
      await expect.poll(() => label(b), { timeout: 60_000 }).toBe('bright field');
      expect(await b.getByRole('alert').count()).toBe(0);
      // The server stops: the page's next request fails at once, saying so, instead of waiting forever.
      await second.close();
      await b.getByLabel('file to open').fill(demo);
      await b.getByRole('button', { name: 'Open', exact: true }).click();
      await expect.poll(async () => (await b.getByRole('alert').allTextContents()).join(' '), { timeout: 10_000 }).toMatch(/connection to the Scanfold engine was lost/);
    } finally {
      await a.close().catch(() => undefined);
      await b.close();
      await second.close();
    }
  }, 120_000);
});

