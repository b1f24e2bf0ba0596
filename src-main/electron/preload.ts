// The window's preload (sandboxed: CommonJS, the renderer-safe part of Electron only). It hands
// the page one thing: the MessagePort to the engine, over which the page speaks the typed
// contract; plus the path of a file dropped on the window, and menu commands. Nothing of Node.
import { contextBridge, ipcRenderer, webUtils } from 'electron';

ipcRenderer.on('scanfold:engine-port', (event) => {
  // A MessagePort cannot cross contextBridge; window.postMessage hands it to the page.
  window.postMessage('scanfold:engine-port', window.location.origin, event.ports);
});

contextBridge.exposeInMainWorld('scanfoldShell', {
  kind: 'electron',
  pathOfFile: (file: File): string => webUtils.getPathForFile(file),
  onMenu: (listener: (command: string, arg?: string) => void) => {
    const handler = (_e: unknown, command: string, arg?: string) => listener(String(command), arg === undefined ? undefined : String(arg));
    ipcRenderer.on('scanfold:menu', handler);
    return () => ipcRenderer.removeListener('scanfold:menu', handler);
  },
});
