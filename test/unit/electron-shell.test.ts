// The desktop shell without the Electron runtime: the window's hardening and CSP as data, the
// runtime detection of `npm start`, and the main process's wiring run against a stand-in
// 'electron' module (the real one would try to download its binary on first import).
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { describe, expect, it, vi } from 'vitest';
import { APP_CSP, APP_URL, isAppUrl, mainWindowOptions, rendererFileFor } from '../../src-main/electron/window-options';
// @ts-expect-error plain .mjs helper of the start script
import { electronBinary } from '../../scripts/electron-runtime.mjs';

describe('window hardening', () => {
  it('isolates and sandboxes the renderer, with no Node anywhere', () => {
    const o = mainWindowOptions('/x/preload.cjs');
    expect(o.webPreferences).toMatchObject({
      contextIsolation: true, sandbox: true, nodeIntegration: false, nodeIntegrationInWorker: false, nodeIntegrationInSubFrames: false,
      webSecurity: true, allowRunningInsecureContent: false, webviewTag: false, navigateOnDragDrop: false, preload: '/x/preload.cjs',
    });
  });

  it('has a strict CSP: nothing remote, no inline script or style, no network', () => {
    const directives = Object.fromEntries(APP_CSP.split('; ').map((d) => { const [k, ...v] = d.split(' '); return [k, v]; }));
    expect(directives['default-src']).toEqual(["'none'"]);
    expect(directives['connect-src']).toEqual(["'none'"]);
    expect(directives['script-src']).toEqual(["'self'", "'unsafe-eval'"]); // regl's generated draw functions
    expect(directives['style-src']).toEqual(["'self'"]);
    expect(APP_CSP).not.toMatch(/unsafe-inline|https?:|\*/);
  });

  it('lets the window reach only the app’s own pages, and serves only files inside the renderer folder', () => {
    expect(isAppUrl(APP_URL)).toBe(true);
    for (const u of ['https://example.org/', 'file:///etc/passwd', 'scanfold-app://evil/index.html', 'not a url']) expect(isAppUrl(u)).toBe(false);
    expect(rendererFileFor('scanfold-app://app/app.js', '/r', path.join)).toBe('/r/app.js');
    expect(rendererFileFor('scanfold-app://app/', '/r', path.join)).toBe('/r/index.html');
    // URL parsing resolves dot segments, so these stay inside the folder…
    expect(rendererFileFor('scanfold-app://app/%2e%2e/secret', '/r', path.join)).toBe('/r/secret');
    // …and an encoded separator that would climb out after decoding is refused.
    expect(rendererFileFor('scanfold-app://app/..%2Fpackage.json', '/r', path.join)).toBeNull();
    // Windows separators, drive letters and undecodable escapes: refused on every platform.
    expect(rendererFileFor('scanfold-app://app/x%5C..%5C..%5Csecret.txt', '/r', path.win32.join)).toBeNull();
    expect(rendererFileFor('scanfold-app://app/C:%5Csecret.txt', '/r', path.win32.join)).toBeNull();
    expect(rendererFileFor('scanfold-app://app/%', '/r', path.join)).toBeNull();
    expect(rendererFileFor('scanfold-app://app/.hidden', '/r', path.join)).toBeNull();
    expect(rendererFileFor('https://app/app.js', '/r', path.join)).toBeNull();
  });
});

describe('npm start', () => {
  it('finds the runtime only where its installer put a binary', () => {
    const root = fs.mkdtempSync(path.join(os.tmpdir(), 'scanfold-el-'));
    try {
      expect(electronBinary(root)).toBeNull();
      const pkg = path.join(root, 'node_modules/electron');
      fs.mkdirSync(path.join(pkg, 'dist'), { recursive: true });
      fs.writeFileSync(path.join(pkg, 'path.txt'), 'electron');
      expect(electronBinary(root)).toBeNull(); // recorded but not there (the download failed)
      fs.writeFileSync(path.join(pkg, 'dist/electron'), '');
      expect(electronBinary(root)).toBe(path.join(pkg, 'dist/electron'));
    } finally {
      fs.rmSync(root, { recursive: true, force: true });
    }
  });
});

// A stand-in for the parts of Electron main.ts uses, recording what it is asked to do.
const calls = vi.hoisted(() => ({
  ready: null as null | (() => void),
  handler: null as null | ((req: { url: string }) => Promise<Response>),
  windows: [] as { options: unknown; contents: Record<string, unknown> & { handlers: Record<string, (...a: unknown[]) => void>; open?: (d: { url: string }) => { action: string }; posted: unknown[] }; loaded?: string }[],
  forked: [] as { file: string; posted: unknown[] }[],
  schemes: [] as unknown[],
  menu: null as null | { label?: string; submenu?: { label?: string; accelerator?: string; click?: () => void }[] }[],
  sent: [] as unknown[][],
}));

vi.mock('electron', () => {
  class BrowserWindow {
    webContents: (typeof calls.windows)[number]['contents'];
    entry: (typeof calls.windows)[number];
    constructor(options: unknown) {
      const contents = {
        handlers: {} as Record<string, (...a: unknown[]) => void>, posted: [] as unknown[],
        setWindowOpenHandler(f: (d: { url: string }) => { action: string }) { contents.open = f; },
        on(ev: string, f: (...a: unknown[]) => void) { contents.handlers[ev] = f; },
        postMessage(...a: unknown[]) { contents.posted.push(a); },
        send(...a: unknown[]) { calls.sent.push(a); },
        session: { setPermissionRequestHandler() {}, setPermissionCheckHandler() {} },
      } as (typeof calls.windows)[number]['contents'];
      this.webContents = contents;
      this.entry = { options, contents };
      calls.windows.push(this.entry);
    }
    once() {}
    on() {}
    show() {}
    loadURL(url: string) { this.entry.loaded = url; return Promise.resolve(); }
  }
  return {
    app: {
      whenReady: () => ({ then: (f: () => void) => { calls.ready = f; } }),
      on() {}, getPath: () => os.tmpdir(), addRecentDocument() {}, isPackaged: false, quit() {},
    },
    BrowserWindow,
    dialog: { showOpenDialog: async () => ({ canceled: true, filePaths: [] }), showErrorBox() {} },
    Menu: { setApplicationMenu(m: unknown) { calls.menu = m as typeof calls.menu; }, buildFromTemplate: (t: unknown) => t },
    MessageChannelMain: class { port1 = 'port1'; port2 = 'port2'; },
    net: { fetch: async (url: string) => new Response(fs.readFileSync(new URL(url)), { status: 200 }) },
    protocol: {
      registerSchemesAsPrivileged: (s: unknown) => calls.schemes.push(s),
      handle: (_scheme: string, f: (req: { url: string }) => Promise<Response>) => { calls.handler = f; },
    },
    shell: { openExternal: async () => undefined },
    utilityProcess: {
      fork: (file: string) => {
        const child = { file, posted: [] as unknown[], on() {}, kill() {}, postMessage(...a: unknown[]) { child.posted.push(a); } };
        calls.forked.push(child);
        return child;
      },
    },
  };
});

describe('desktop main process (stand-in Electron)', () => {
  it('starts the engine off the window’s thread, hands the page its port, and serves pages with the CSP', async () => {
    await import('../../src-main/electron/main');
    expect(calls.schemes).toHaveLength(1);
    calls.ready!();
    expect(calls.forked).toHaveLength(1);
    expect(path.basename(calls.forked[0].file)).toBe('engine-host.mjs');
    const w = calls.windows[0];
    expect((w.options as ReturnType<typeof mainWindowOptions>).webPreferences.sandbox).toBe(true);
    expect(path.basename((w.options as ReturnType<typeof mainWindowOptions>).webPreferences.preload)).toBe('electron-preload.cjs');
    expect(w.loaded).toBe(APP_URL);
    // Navigation and new windows: refused.
    expect(w.contents.open!({ url: 'https://example.org' })).toEqual({ action: 'deny' });
    let prevented = false;
    w.contents.handlers['will-navigate']({ preventDefault: () => { prevented = true; } }, 'https://example.org');
    expect(prevented).toBe(true);
    // The page gets one end of a channel, the engine the other.
    w.contents.handlers['did-finish-load']();
    expect(calls.forked[0].posted).toEqual([['scanfold:connect', ['port1']]]);
    expect(w.contents.posted).toEqual([['scanfold:engine-port', null, ['port2']]]);
    // Pages come with the CSP; nothing outside the renderer folder is served.
    const page = await calls.handler!({ url: APP_URL });
    expect(page.status).toBe(200);
    expect(page.headers.get('content-security-policy')).toBe(APP_CSP);
    expect(await page.text()).toContain('<div id="root">');
    expect((await calls.handler!({ url: 'scanfold-app://app/..%2Fpackage.json' })).status).toBe(404);
    // The File menu opens and saves sessions; Save Session asks the page to save (Ctrl-S).
    const file = calls.menu!.find((m) => m.label === 'File')!.submenu!;
    expect(file.map((i) => i.label).filter(Boolean)).toEqual(expect.arrayContaining(['Open…', 'Open Session…', 'Save Session', 'Save Session As…', 'Export Image…']));
    const save = file.find((i) => i.label === 'Save Session')!;
    expect(save.accelerator).toBe('CmdOrCtrl+S');
    save.click!();
    expect(calls.sent.at(-1)).toEqual(['scanfold:menu', 'save-session', undefined]);
  });
});
