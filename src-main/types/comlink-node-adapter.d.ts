// comlink ships its Node adapter without an exports map; declare the module we import.
declare module 'comlink/dist/esm/node-adapter.mjs' {
  import type { Endpoint } from 'comlink';
  export default function nodeEndpoint(nep: unknown): Endpoint;
}
