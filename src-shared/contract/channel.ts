// The service over any message transport: one generic adapter, generated from the interface,
// for Electron IPC, a loopback WebSocket or a worker port. The server side calls the real
// service (which validates every request); the client side is a ScanfoldService whose methods
// send requests and whose onEvent hears the server's events. Errors keep their name, message
// and code, so isInputError and error codes work on the far side as they do within one process
import { CancelledError, InputError, OutputError, type InputErrorCode } from '../model/errors';
import { SERVICE_METHODS, type ScanfoldService, type ServiceEvent, type ServiceMethod } from './service';

/** What a transport must offer: send a structured-cloneable message; hear messages. */
export interface Port {
  send(message: unknown): void;
  /** Returns the function that stops listening. */
  onMessage(listener: (message: unknown) => void): () => void;
}

type Call = { t: 'call'; id: number; method: ServiceMethod; arg: unknown };
type Reply =
  | { t: 'result'; id: number; value: unknown }
  | { t: 'error'; id: number; error: { name: string; message: string; code?: string; reason?: string } }
  | { t: 'event'; event: ServiceEvent };

const METHODS = new Set<string>(SERVICE_METHODS);

/**
 * The service with every request passed through `around` (which may refuse it, time it, note its
 * job id…, and calls `call` to go on); events pass straight through.
 */
export function interceptService(service: ScanfoldService, around: (method: ServiceMethod, arg: unknown, call: () => Promise<unknown>) => Promise<unknown>): ScanfoldService {
  const methods = Object.fromEntries(SERVICE_METHODS.map((m) => [m, (arg: unknown) =>
    around(m, arg, () => (service[m] as (a: unknown) => Promise<unknown>).call(service, arg))]));
  return { ...methods, onEvent: (l: (e: ServiceEvent) => void) => service.onEvent(l) } as unknown as ScanfoldService;
}

/** Answer requests arriving on `port` with `service`, and forward its events. Returns the function that stops. */
export function serveService(service: ScanfoldService, port: Port): () => void {
  const offEvents = service.onEvent((event) => port.send({ t: 'event', event } satisfies Reply));
  const offMessages = port.onMessage((raw) => {
    const m = raw as Partial<Call> | null;
    if (!m || m.t !== 'call' || typeof m.id !== 'number') return;
    const id = m.id;
    if (typeof m.method !== 'string' || !METHODS.has(m.method)) {
      port.send({ t: 'error', id, error: { name: 'InputError', message: `${String(m.method)}: not a request this service knows`, code: 'bad-request' } } satisfies Reply);
      return;
    }
    const method = m.method as ServiceMethod;
    const fn = service[method] as (arg: unknown) => Promise<unknown>;
    Promise.resolve()
      .then(() => fn.call(service, m.arg))
      .then(
        (value) => {
          try {
            port.send({ t: 'result', id, value } satisfies Reply);
          } catch (e) {
            // A result the transport cannot carry is a failure of the request, not of the server.
            port.send({ t: 'error', id, error: { name: 'Error', message: `${method}: the result could not be sent (${(e as Error).message})` } } satisfies Reply);
          }
        },
        (e: unknown) => {
          const err = e instanceof Error ? e : new Error(String(e));
          const extra = err as Error & { code?: unknown; reason?: unknown };
          port.send({
            t: 'error', id,
            error: {
              name: err.name, message: err.message,
              ...(typeof extra.code === 'string' ? { code: extra.code } : {}),
              ...(typeof extra.reason === 'string' ? { reason: extra.reason } : {}),
            },
          } satisfies Reply);
        })
      // The port itself failing (a closed socket) must not become an unhandled rejection.
      .catch(() => undefined);
  });
  return () => { offEvents(); offMessages(); };
}

/** A ScanfoldService whose every method is a request over `port`. */
export function connectService(port: Port): ScanfoldService & { disconnect(reason?: string): void } {
  let nextId = 1;
  /** Why the connection ended (every call after it fails at once, saying so). */
  let closed: string | null = null;
  const waiting = new Map<number, { resolve: (v: unknown) => void; reject: (e: unknown) => void }>();
  const listeners = new Set<(e: ServiceEvent) => void>();
  const off = port.onMessage((raw) => {
    const m = raw as Reply | null;
    if (!m || typeof m !== 'object') return;
    if (m.t === 'event') { for (const l of listeners) l(m.event); return; }
    const w = waiting.get(m.id);
    if (!w) return;
    waiting.delete(m.id);
    if (m.t === 'result') w.resolve(m.value);
    else w.reject(rebuildError(m.error));
  });
  const call = (method: ServiceMethod) => (arg?: unknown) => new Promise((resolve, reject) => {
    if (closed !== null) { reject(new Error(closed)); return; }
    const id = nextId++;
    waiting.set(id, { resolve, reject });
    port.send({ t: 'call', id, method, arg } satisfies Call);
  });
  const client = Object.fromEntries(SERVICE_METHODS.map((m) => [m, call(m)])) as unknown as ScanfoldService;
  return Object.assign(client, {
    onEvent(listener: (e: ServiceEvent) => void) {
      listeners.add(listener);
      return () => listeners.delete(listener);
    },
    disconnect(reason = 'service connection closed') {
      if (closed !== null) return;
      closed = reason;
      off();
      for (const w of waiting.values()) w.reject(new Error(reason));
      waiting.clear();
    },
  });
}

function rebuildError(e: { name: string; message: string; code?: string; reason?: string }): Error {
  if (e.name === 'InputError') return new InputError(e.message, (e.code ?? 'bad-input') as InputErrorCode);
  if (e.name === 'CancelledError') return new CancelledError(e.message);
  if (e.name === 'OutputError') return new OutputError(e.message, e.reason ?? '');
  return Object.assign(new Error(e.message), { name: e.name, ...(e.code ? { code: e.code } : {}) });
}
