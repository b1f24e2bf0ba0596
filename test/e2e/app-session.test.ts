// Sessions in the application (served mode, Playwright driving Debian's chromium): save a
// session from the header, reopen it in a fresh page with the same detectors, regions, view
// settings and images; data moved away leaves the results shown and asks where it is now; a
// server killed with SIGKILL mid-work leaves a recovery file the next start offers.
import fs from 'node:fs';
import path from 'node:path';
import { spawn, spawnSync, type ChildProcess } from 'node:child_process';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { chromium, type Browser, type Page } from 'playwright-core';
import { makeDemoSample, PYTHON } from '../helpers/fixtures';

const CHROMIUM = '/usr/bin/chromium';
const ARTIFACTS = path.resolve(__dirname, '../../test-artifacts/app');
const cli = path.resolve(__dirname, '../../bin/scanfold.mjs');

let dir: string;
let demo: string;
let browser: Browser;
const children: ChildProcess[] = [];

/** `scanfold serve` as a user starts it, with its own state folder; resolves with the printed address. */
async function serve(stateDir: string, ...args: string[]): Promise<{ url: string; child: ChildProcess }> {
  const child = spawn(process.execPath, [cli, 'serve', ...args, '--workers', '1'], { env: { ...process.env, SCANFOLD_CACHE_DIR: 'off', SCANFOLD_STATE_DIR: stateDir } });
  children.push(child);
  const url = await new Promise<string>((resolve, reject) => {
    let out = '';
    child.stdout!.on('data', (d) => { out += d; const m = /http:\/\/127\.0\.0\.1:\d+\/\S+\//.exec(out); if (m) resolve(m[0]); });
    child.on('exit', (code) => reject(new Error(`serve exited ${code} before printing an address`)));
  });
  return { url, child };
}

type State = { detectors: { name: string; shape: unknown }[]; regions: { name: string }[]; scanView: { colormap: string }; shows: { scan: unknown }; dataset: { absent?: string } | null };
const state = (page: Page) => page.evaluate(() => (window as unknown as { __scanfold: { state(): unknown } }).__scanfold.state()) as Promise<State>;
const scanLabel = (page: Page) => page.evaluate(() => (window as unknown as { __scanfold: { view(n: string): { label: string | null } | null } }).__scanfold.view('scan')?.label ?? null);

async function newPage(url: string): Promise<Page> {
  const page = await browser.newPage({ viewport: { width: 1100, height: 900 } });
  await page.goto(url);
  return page;
}

beforeAll(async () => {
  ({ dir, file: demo } = await makeDemoSample('scanfold-app-session-'));
  fs.mkdirSync(ARTIFACTS, { recursive: true });
  browser = await chromium.launch({ executablePath: CHROMIUM, args: ['--use-angle=swiftshader', '--enable-unsafe-swiftshader', '--disable-gpu', '--no-sandbox'] });
}, 120_000);

afterAll(async () => {
  await browser?.close();
  for (const c of children) c.kill('SIGKILL');
  if (dir) fs.rmSync(dir, { recursive: true, force: true });
});

describe('sessions in the app', () => {
  const sessionFile = () => path.join(dir, 'work.scanfold.h5');

  it('save from the header; a fresh page reopens the same setup and results', async () => {
    const { url } = await serve(path.join(dir, 'state-a'), demo);
    const page = await newPage(url);
    await expect.poll(() => scanLabel(page), { timeout: 60_000 }).toBe('bright field');
    await page.getByRole('button', { name: '+ annulus' }).click();
    await expect.poll(() => scanLabel(page), { timeout: 30_000 }).toBe('annulus 1');
    await page.getByLabel('scan colour map').selectOption('cividis');
    await page.getByLabel('PCA components').fill('3');
    await page.getByRole('button', { name: 'Run PCA' }).click();
    await expect.poll(() => scanLabel(page), { timeout: 60_000 }).toBe('loading map 1');
    await page.getByLabel('session file').fill(sessionFile());
    await page.getByRole('button', { name: 'Save session' }).click();
    await expect.poll(async () => (await page.getByRole('status').allTextContents()).join(' '), { timeout: 20_000 }).toContain(`saved 3 results to ${sessionFile()}`);
    const before = await state(page);
    // Export from the Export panel: loading map 2 as float32 TIFF, downloaded; Pillow reads it and
    // it equals the session's array (h5py), both outside Scanfold.
    await page.getByLabel('result to export').selectOption('pca/loadings');
    await page.getByLabel('export format').selectOption('tiff');
    await page.getByLabel('export index').fill('1');
    const [download] = await Promise.all([page.waitForEvent('download'), page.getByRole('button', { name: 'Export', exact: true }).click()]);
    expect(download.suggestedFilename()).toBe('pca-loadings-1.tif');
    const tif = path.join(dir, 'loading-2.tif');
    await download.saveAs(tif);
    const same = spawnSync(PYTHON, ['-c', `import h5py, sys, numpy as np
from PIL import Image
t = np.asarray(Image.open(sys.argv[2]))
l = h5py.File(sys.argv[1])['results/pca/loadings'][1].astype(np.float32)
print(t.dtype, t.shape, bool(np.array_equal(t, l)))`, sessionFile(), tif], { encoding: 'utf8' });
    expect(same.stdout.trim(), same.stderr).toBe('float32 (64, 64) True');
    await page.close();

    // h5py, outside Scanfold, finds the detector's image and the PCA in the file.
    const keys = JSON.parse(spawnSync(PYTHON, ['-c', 'import h5py,sys,json; f=h5py.File(sys.argv[1]); print(json.dumps(sorted(f["results"].keys())))', sessionFile()], { encoding: 'utf8' }).stdout) as string[];
    expect(keys).toEqual(expect.arrayContaining(['calibration', 'pca']));
    expect(keys.some((k) => k.startsWith('detector-'))).toBe(true);

    const again = await newPage(url);
    await expect.poll(() => scanLabel(again), { timeout: 60_000 }).toBe('bright field');
    await again.getByLabel('session file').fill(sessionFile());
    await again.getByRole('button', { name: 'Open session' }).click();
    await expect.poll(async () => (await again.getByRole('status').allTextContents()).join(' '), { timeout: 30_000 }).toContain('opened');
    const after = await state(again);
    expect(after.detectors).toEqual(before.detectors);
    expect(after.scanView.colormap).toBe('cividis');
    expect(after.shows.scan).toEqual(before.shows.scan);
    await expect.poll(() => scanLabel(again), { timeout: 30_000 }).toBe('loading map 1');
    await again.locator('.detector-entry .swatch').first().click();
    await expect.poll(() => scanLabel(again), { timeout: 30_000 }).toBe('annulus 1');
    await again.screenshot({ path: path.join(ARTIFACTS, 'session-reopened.png') });
    await again.close();
  }, 240_000);

  it('data moved away: the results stay on view and the app asks where the data is now; relinking opens it', async () => {
    const { url } = await serve(path.join(dir, 'state-b'));
    const moved = path.join(dir, 'moved-away.h5');
    fs.renameSync(demo, moved);
    try {
      const page = await newPage(url);
      await page.getByLabel('session file').fill(sessionFile());
      await page.getByRole('button', { name: 'Open session' }).click();
      const banner = page.locator('.relink');
      await expect.poll(async () => (await banner.allTextContents()).join(' '), { timeout: 30_000 }).toContain('was not found');
      expect((await state(page)).dataset?.absent).toMatch(/not found at/);
      // The saved PCA is still shown.
      await expect.poll(() => scanLabel(page), { timeout: 30_000 }).toBe('loading map 1');
      await page.getByLabel('where the data is now').fill(moved);
      await page.getByRole('button', { name: 'Relink' }).click();
      await expect.poll(() => banner.count(), { timeout: 30_000 }).toBe(0);
      expect((await state(page)).dataset?.absent).toBeUndefined();
      await page.close();
    } finally {
      fs.renameSync(moved, demo);
    }
  }, 180_000);

  it('a server killed with SIGKILL mid-work: the next start offers the autosaved work, and recovers it', async () => {
    const stateDir = path.join(dir, 'state-c');
    const first = await serve(stateDir, demo);
    const page = await newPage(first.url);
    await expect.poll(() => scanLabel(page), { timeout: 60_000 }).toBe('bright field');
    await page.getByRole('button', { name: '+ disk' }).click();
    await expect.poll(() => scanLabel(page), { timeout: 30_000 }).toBe('disk 1');
    // Autosave runs every 4 s; wait for the recovery file, then kill the server without warning.
    const recoveries = () => (fs.existsSync(stateDir) ? fs.readdirSync(stateDir).filter((f) => /^unsaved\..+\.recovery\.h5$/.test(f)) : []);
    await expect.poll(() => recoveries().length, { timeout: 20_000 }).toBe(1);
    await page.close();
    first.child.kill('SIGKILL');
    await new Promise((r) => first.child.once('exit', r));

    // Two more stops without a save (copies of that file, listed in the state folder's index):
    // the newest two offers are shown in full, the older one summed up in a line until asked for.
    const [only] = recoveries();
    const indexFile = path.join(stateDir, 'recovery-index.json');
    const index = JSON.parse(fs.readFileSync(indexFile, 'utf8')) as { recovery: string; session: string | null }[];
    for (const copy of ['unsaved.older1-1.recovery.h5', 'unsaved.older2-2.recovery.h5']) {
      fs.copyFileSync(path.join(stateDir, only), path.join(stateDir, copy));
      index.push({ recovery: path.join(stateDir, copy), session: null });
    }
    fs.writeFileSync(indexFile, JSON.stringify(index));

    const second = await serve(stateDir);
    const next = await newPage(second.url);
    const offer = next.locator('.recover');
    await expect.poll(async () => (await offer.allTextContents()).join(' '), { timeout: 30_000 }).toContain('an unsaved session');
    expect(await offer.getByRole('button', { name: 'Recover' }).count()).toBe(2);
    expect((await offer.allTextContents()).join(' ')).toContain('and 1 older unsaved session.');
    await offer.getByRole('button', { name: 'Show them' }).click();
    await expect.poll(() => offer.getByRole('button', { name: 'Recover' }).count()).toBe(3);
    // Two discarded: their files go; one is left to recover.
    await offer.getByRole('button', { name: 'Discard' }).nth(2).click();
    await offer.getByRole('button', { name: 'Discard' }).nth(1).click();
    await expect.poll(() => recoveries().length, { timeout: 10_000 }).toBe(1);
    await offer.getByRole('button', { name: 'Recover' }).click();
    await expect.poll(async () => (await next.getByRole('status').allTextContents()).join(' '), { timeout: 30_000 }).toContain('recovered');
    expect((await state(next)).detectors.map((d) => d.name)).toEqual(['disk 1']);
    await expect.poll(() => scanLabel(next), { timeout: 30_000 }).toBe('disk 1');
    // Saving it gives it a file and removes the recovery.
    const saved = path.join(dir, 'recovered.scanfold.h5');
    await next.getByLabel('session file').fill(saved);
    await next.getByRole('button', { name: 'Save session' }).click();
    await expect.poll(async () => (await next.getByRole('status').allTextContents()).join(' '), { timeout: 20_000 }).toContain(`to ${saved}`);
    await expect.poll(() => recoveries().length, { timeout: 10_000 }).toBe(0);
    await next.close();
  }, 240_000);
});
