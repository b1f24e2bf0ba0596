// The hardening of the desktop window, kept free of Electron imports so tests can check it:
// an isolated, sandboxed renderer with no Node, a strict Content-Security-Policy on every page
// of the app, and no navigation or new window anywhere but the app's own pages.

/** The app's pages are served from this scheme (registered as standard and secure). */
export const APP_SCHEME = 'scanfold-app';
export const APP_ORIGIN = `${APP_SCHEME}://app`;
export const APP_URL = `${APP_ORIGIN}/index.html`;

/**
 * Our own scripts and styles only; no network at all (the engine is reached through a
 * MessagePort, not a socket). One relaxation, 'unsafe-eval': regl compiles each draw command
 * into a generated function; only our own bundle runs on the page.
 */
export const APP_CSP = [
  "default-src 'none'", "script-src 'self' 'unsafe-eval'", "style-src 'self'", "img-src 'self' data: blob:",
  "connect-src 'none'", "font-src 'self'", "base-uri 'none'", "form-action 'none'", "frame-ancestors 'none'", "object-src 'none'",
].join('; ');

export interface HardenedWebPreferences {
  contextIsolation: true;
  sandbox: true;
  nodeIntegration: false;
  nodeIntegrationInWorker: false;
  nodeIntegrationInSubFrames: false;
  webSecurity: true;
  allowRunningInsecureContent: false;
  experimentalFeatures: false;
  webviewTag: false;
  navigateOnDragDrop: false;
  spellcheck: false;
  preload: string;
}

export function mainWindowOptions(preload: string) {
  const webPreferences: HardenedWebPreferences = {
    contextIsolation: true,
    sandbox: true,
    nodeIntegration: false,
    nodeIntegrationInWorker: false,
    nodeIntegrationInSubFrames: false,
    webSecurity: true,
    allowRunningInsecureContent: false,
    experimentalFeatures: false,
    webviewTag: false,
    navigateOnDragDrop: false,
    spellcheck: false,
    preload,
  };
  return { width: 1180, height: 900, minWidth: 960, minHeight: 700, title: 'Scanfold', backgroundColor: '#16181d', show: false, webPreferences };
}

/** Whether the window may go to `url`: only the app's own pages. */
export function isAppUrl(url: string): boolean {
  try {
    const u = new URL(url);
    return u.protocol === `${APP_SCHEME}:` && u.host === 'app';
  } catch {
    return false;
  }
}

/** The file of the built renderer a request of the app's scheme names, or null (outside it, or not a plain path). */
export function rendererFileFor(url: string, rendererDir: string, join: (a: string, b: string) => string): string | null {
  if (!isAppUrl(url)) return null;
  let p: string;
  try {
    p = decodeURIComponent(new URL(url).pathname).replace(/^\/+/, '');
  } catch {
    return null;
  }
  if (p === '') return join(rendererDir, 'index.html');
  // Plain names only: no parent steps, hidden names, drive letters, backslashes (Windows separators) or NULs.
  if (/[\\:\0]/.test(p) || p.split('/').some((part) => part === '..' || part === '' || part.startsWith('.'))) return null;
  return join(rendererDir, p);
}
