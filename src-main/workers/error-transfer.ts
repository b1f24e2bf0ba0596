import * as Comlink from 'comlink';

/**
 * Errors cross from a worker with their name, message and stack only; ours also carry a code
 * (InputError's 'missing-file', 'too-large', …), which clients branch on. Installed in every
 * worker, so the code survives the crossing; the main thread's default handler restores it.
 */
export function keepErrorCodesAcrossThreads(): void {
  const base = Comlink.transferHandlers.get('throw');
  if (!base) return;
  Comlink.transferHandlers.set('throw', {
    canHandle: base.canHandle,
    serialize(thrown: unknown) {
      const [wire, transfer] = base.serialize(thrown);
      const value = (thrown as { value?: unknown }).value;
      const code = value instanceof Error ? (value as Error & { code?: unknown }).code : undefined;
      const w = wire as { isError?: boolean; value?: Record<string, unknown> };
      if (w.isError && w.value && typeof code === 'string') w.value.code = code;
      return [wire, transfer];
    },
    deserialize: base.deserialize,
  });
}
