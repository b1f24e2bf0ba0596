// The renderer's one way to the engine: the contract over the loopback WebSocket of served mode
// (the token is the first part of the page's path). The Electron preload will offer the same
// ScanfoldService over IPC; nothing else in the renderer knows which transport it runs on.
import { connectService, type Port } from '../src-shared/contract/channel';
import type { ScanfoldService } from '../src-shared/contract/service';
import { decodeMessage, encodeMessage } from '../src-shared/contract/wire';

export type Client = ScanfoldService & { disconnect(): void };

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
      resolve(connectService(port));
    });
    ws.addEventListener('error', () => reject(new Error('could not connect to the Scanfold engine')));
  });
}
