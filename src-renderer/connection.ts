// The renderer's one way to the engine: the contract over the loopback WebSocket of served mode
// (the token is the first part of the page's path). The Electron preload will offer the same
// ScanfoldService over IPC; nothing else in the renderer knows which transport it runs on.
import { connectService, type Port } from '../src-shared/contract/channel';
import type { ScanfoldService } from '../src-shared/contract/service';
import { decodeMessage, encodeMessage } from '../src-shared/contract/wire';

export type Client = ScanfoldService & { disconnect(reason?: string): void };

/** What every request answers once served mode's socket has closed. */
export const CONNECTION_LOST = 'the connection to the Scanfold engine was lost (was `scanfold serve` stopped?); expected it running: start it again and open the address it prints';

export function connectServed(loc: Location = window.location): Promise<Client> {
  const token = loc.pathname.split('/').filter(Boolean)[0] ?? '';
  const ws = new WebSocket(`ws://${loc.host}/${token}/contract`);
  ws.binaryType = 'arraybuffer';
  const listeners = new Set<(m: unknown) => void>();
  const pending: Uint8Array[] = [];
  const port: Port = {
    send(message) {
      const bytes = encodeMessage(message);
      if (ws.readyState === WebSocket.OPEN) ws.send(bytes);
      else pending.push(bytes);
    },
    onMessage(l) { listeners.add(l); return () => listeners.delete(l); },
  };
  ws.addEventListener('message', (e) => {
    const m = decodeMessage(new Uint8Array(e.data as ArrayBuffer));
    for (const l of listeners) l(m);
  });
  return new Promise((resolve, reject) => {
    ws.addEventListener('open', () => {
      for (const b of pending.splice(0)) ws.send(b);
      const client = connectService(port);
      // Requests waiting for an answer, and every later one, fail saying why instead of waiting forever.
      ws.addEventListener('close', () => client.disconnect(CONNECTION_LOST));
      resolve(client);
    });
    ws.addEventListener('error', () => reject(new Error('could not connect to the Scanfold engine')));
  });
}

/** What the desktop app's preload offers the page (see src-main/electron/preload.ts). */
export interface Shell {
  kind: 'electron';
  pathOfFile(file: File): string;
  onMenu(listener: (command: string, arg?: string) => void): () => void;
}

export function desktopShell(): Shell | null {
  return (window as unknown as { scanfoldShell?: Shell }).scanfoldShell ?? null;
}

/** In the desktop app: the contract over the MessagePort the main process hands the page (structured clones). */
export function connectDesktop(): Promise<Client> {
  return new Promise((resolve) => {
    const onMessage = (e: MessageEvent) => {
      if (e.source !== window || e.data !== 'scanfold:engine-port' || !e.ports[0]) return;
      window.removeEventListener('message', onMessage);
      const mp = e.ports[0];
      const listeners = new Set<(m: unknown) => void>();
      mp.onmessage = (m) => { for (const l of listeners) l(m.data); };
      const port: Port = {
        send: (message) => mp.postMessage(message),
        onMessage: (l) => { listeners.add(l); return () => listeners.delete(l); },
      };
      resolve(connectService(port));
    };
    window.addEventListener('message', onMessage);
  });
}
