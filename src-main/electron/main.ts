// The desktop app's main process: thin wiring only. It serves the built renderer on the app's
// own scheme (with the CSP), opens the hardened window, starts the engine in a utility process
// and hands the window a MessagePort to it, and offers native menus, the open dialog and the
// recent files. Everything else happens in the engine (through the contract) or the page.
import { app, BrowserWindow, dialog, Menu, MessageChannelMain, net, protocol, shell, utilityProcess, type MenuItemConstructorOptions } from 'electron';
import fs from 'node:fs';
import path from 'node:path';
import { pathToFileURL } from 'node:url';
import { distFile } from '../engine/paths';
import { APP_CSP, APP_SCHEME, APP_URL, isAppUrl, mainWindowOptions, rendererFileFor } from './window-options';

protocol.registerSchemesAsPrivileged([{ scheme: APP_SCHEME, privileges: { standard: true, secure: true, supportFetchAPI: false } }]);

const recentFile = () => path.join(app.getPath('userData'), 'recent.json');
function recent(): string[] {
  try {
    const list = JSON.parse(fs.readFileSync(recentFile(), 'utf8'));
    return Array.isArray(list) ? list.filter((p): p is string => typeof p === 'string').slice(0, 10) : [];
  } catch {
    return [];
  }
}
function remember(file: string): void {
  const list = [file, ...recent().filter((p) => p !== file)].slice(0, 10);
  fs.mkdirSync(path.dirname(recentFile()), { recursive: true });
  fs.writeFileSync(recentFile(), JSON.stringify(list));
  app.addRecentDocument(file);
  buildMenu();
}

let win: BrowserWindow | null = null;
const send = (command: string, arg?: string) => win?.webContents.send('scanfold:menu', command, arg);

async function openDialog(): Promise<void> {
  if (!win) return;
  const r = await dialog.showOpenDialog(win, {
    title: 'Open a 4D-STEM dataset',
    properties: ['openFile'],
    filters: [{ name: 'HDF5, NumPy or raw', extensions: ['h5', 'hdf5', 'npy', 'raw', 'bin', 'dat'] }, { name: 'All files', extensions: ['*'] }],
  });
  if (!r.canceled && r.filePaths[0]) {
    remember(r.filePaths[0]);
    send('open', r.filePaths[0]);
  }
}

async function openSessionDialog(): Promise<void> {
  if (!win) return;
  const r = await dialog.showOpenDialog(win, {
    title: 'Open a session', properties: ['openFile'],
    filters: [{ name: 'Scanfold session', extensions: ['h5'] }, { name: 'All files', extensions: ['*'] }],
  });
  if (!r.canceled && r.filePaths[0]) send('open-session', r.filePaths[0]);
}

async function saveSessionDialog(): Promise<void> {
  if (!win) return;
  const r = await dialog.showSaveDialog(win, { title: 'Save the session as', defaultPath: 'analysis.scanfold.h5', filters: [{ name: 'Scanfold session', extensions: ['h5'] }] });
  if (!r.canceled && r.filePath) send('save-session', r.filePath);
}

function buildMenu(): void {
  const template: MenuItemConstructorOptions[] = [
    {
      label: 'File',
      submenu: [
        { label: 'Open…', accelerator: 'CmdOrCtrl+O', click: () => void openDialog() },
        { label: 'Open Recent', submenu: recent().length ? recent().map((f) => ({ label: f, click: () => { remember(f); send('open', f); } })) : [{ label: 'none yet', enabled: false }] },
        { type: 'separator' },
        { label: 'Open Session…', accelerator: 'CmdOrCtrl+Shift+O', click: () => void openSessionDialog() },
        { label: 'Save Session', accelerator: 'CmdOrCtrl+S', click: () => send('save-session') },
        { label: 'Save Session As…', accelerator: 'CmdOrCtrl+Shift+S', click: () => void saveSessionDialog() },
        { type: 'separator' },
        { label: 'Export Image…', accelerator: 'CmdOrCtrl+E', click: () => send('export-image') },
        { type: 'separator' },
        { role: 'quit' },
      ],
    },
    {
      label: 'Edit',
      submenu: [
        { label: 'Undo', accelerator: 'CmdOrCtrl+Z', click: () => send('undo') },
        { label: 'Redo', accelerator: 'CmdOrCtrl+Shift+Z', click: () => send('redo') },
        { type: 'separator' },
        { role: 'copy' }, { role: 'paste' }, { role: 'selectAll' },
      ],
    },
    { label: 'View', submenu: [{ role: 'resetZoom' }, { role: 'zoomIn' }, { role: 'zoomOut' }, { type: 'separator' }, { role: 'togglefullscreen' }] },
  ];
  Menu.setApplicationMenu(Menu.buildFromTemplate(template));
}

let quitting = false;

function startEngine(): Electron.UtilityProcess {
  const engine = utilityProcess.fork(distFile('engine-host.mjs'), [], { serviceName: 'Scanfold engine', stdio: 'inherit' });
  engine.on('exit', (code) => {
    if (code !== 0 && win && !quitting) dialog.showErrorBox('Scanfold', `The engine stopped (exit code ${code}); restart Scanfold. Your files are untouched.`);
  });
  return engine;
}

// Every web contents, this window's or any other, may go nowhere and open nothing.
app.on('web-contents-created', (_e, contents) => {
  contents.setWindowOpenHandler(() => ({ action: 'deny' }));
  contents.on('will-navigate', (e, url) => { if (!isAppUrl(url)) e.preventDefault(); });
  contents.on('will-redirect', (e, url) => { if (!isAppUrl(url)) e.preventDefault(); });
});

app.whenReady().then(() => {
  const rendererDir = distFile('renderer');
  protocol.handle(APP_SCHEME, async (request) => {
    const file = rendererFileFor(request.url, rendererDir, path.join);
    if (!file || !fs.existsSync(file) || !fs.statSync(file).isFile()) return new Response('not found', { status: 404 });
    const res = await net.fetch(pathToFileURL(file).toString());
    const headers = new Headers(res.headers);
    headers.set('Content-Security-Policy', APP_CSP);
    headers.set('X-Content-Type-Options', 'nosniff');
    return new Response(res.body, { status: res.status, headers });
  });
  const engine = startEngine();
  buildMenu();
  win = new BrowserWindow(mainWindowOptions(distFile('electron-preload.cjs')));
  const contents = win.webContents;
  // Nothing but the app's own pages, ever: links open in the user's browser, nothing else opens.
  contents.setWindowOpenHandler(({ url }) => {
    if (/^https?:\/\//.test(url)) void shell.openExternal(url);
    return { action: 'deny' };
  });
  contents.on('will-navigate', (e, url) => { if (!isAppUrl(url)) e.preventDefault(); });
  contents.session.setPermissionRequestHandler((_wc, _permission, callback) => callback(false));
  contents.session.setPermissionCheckHandler(() => false);
  // Each load of the page (a reload too) gets a fresh channel to the engine; the file named on
  // the command line is opened on the first load only.
  let argvFile: string | undefined = process.argv.slice(app.isPackaged ? 1 : 2).find((a) => !a.startsWith('-') && fs.existsSync(a) && fs.statSync(a).isFile());
  contents.on('did-finish-load', () => {
    const { port1, port2 } = new MessageChannelMain();
    engine.postMessage('scanfold:connect', [port1]);
    contents.postMessage('scanfold:engine-port', null, [port2]);
    if (argvFile) { send('open', path.resolve(argvFile)); argvFile = undefined; }
  });
  win.once('ready-to-show', () => win?.show());
  void win.loadURL(APP_URL);
  win.on('closed', () => { win = null; });
  app.on('before-quit', () => { quitting = true; });
  app.on('window-all-closed', () => { quitting = true; engine.kill(); app.quit(); });
});
