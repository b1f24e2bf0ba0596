// The engine's own process in the desktop app (an Electron utility process): the window's main
// process only opens windows and menus, so a long job never stalls them. Each window gets a
// MessagePort; the contract is served over it, and every request is validated by the service.
import { serveService, type Port } from '../../src-shared/contract/channel';
import { EngineService } from '../engine/service';
import { APP_PREVIEW_BUDGET_BYTES } from '../engine/budget';

interface PortMain {
  on(event: 'message', l: (e: { data: unknown }) => void): void;
  postMessage(m: unknown): void;
  start(): void;
}

const parentPort = (process as unknown as { parentPort?: { on(event: 'message', l: (e: { data: unknown; ports: PortMain[] }) => void): void } }).parentPort;
if (!parentPort) throw new Error('engine-host: run as an Electron utility process');

const service = new EngineService({ previewBudgetBytes: APP_PREVIEW_BUDGET_BYTES });
parentPort.on('message', (e) => {
  if (e.data !== 'scanfold:connect' || !e.ports[0]) return;
  const p = e.ports[0];
  const listeners = new Set<(m: unknown) => void>();
  p.on('message', (m) => { for (const l of listeners) l(m.data); });
  const port: Port = {
    send: (m) => p.postMessage(m),
    onMessage: (l) => { listeners.add(l); return () => listeners.delete(l); },
  };
  const stop = serveService(service, port);
  (p as unknown as { on(event: 'close', l: () => void): void }).on('close', () => { stop(); listeners.clear(); });
  p.start();
});
