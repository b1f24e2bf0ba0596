// The service over a message port (the generic adapter the app's IPC and the served mode's
// WebSocket use): same results as NumPy, events, errors with their codes, unknown requests refused.
import fs from 'node:fs';
import path from 'node:path';
import { MessageChannel, type MessagePort } from 'node:worker_threads';
import { afterAll, beforeAll, expect, it } from 'vitest';
import { EngineService } from '../../src-main/engine/service';
import { connectService, serveService, type Port } from '../../src-shared/contract/channel';
import type { ServiceEvent } from '../../src-shared/contract/service';
import { isInputError } from '../../src-shared/model/errors';
import { makeFixtures, maxRelDiff, readNpyF64 } from '../helpers/fixtures';

const portOf = (p: MessagePort): Port => ({
  send: (m) => p.postMessage(m),
  onMessage: (l) => { p.on('message', l); return () => p.off('message', l); },
});

let fx: string;
let service: EngineService;
let channel: MessageChannel;
let stop: () => void;
let client: ReturnType<typeof connectService>;

beforeAll(() => {
  fx = makeFixtures('make_engine_fixtures.py');
  service = new EngineService({ workers: 2 });
  channel = new MessageChannel();
  stop = serveService(service, portOf(channel.port1));
  client = connectService(portOf(channel.port2));
});
afterAll(async () => {
  client?.disconnect();
  stop?.();
  channel?.port1.close();
  channel?.port2.close();
  await service?.shutdown();
  if (fx) fs.rmSync(fx, { recursive: true, force: true });
});

it('open and a first pass through the port equal NumPy; job and dataset events arrive', async () => {
  const events: ServiceEvent[] = [];
  const off = client.onEvent((e) => events.push(e));
  const d = await client.open({ path: path.join(fx, 'a.npy') });
  const r = await client.firstPass({ dataset: d.id, jobId: 'over-port' });
  // reference: NumPy's mean and totals of the same array (make_engine_fixtures.py)
  expect(r.meanPattern).toBeInstanceOf(Float64Array);
  expect(maxRelDiff(r.meanPattern, readNpyF64(path.join(fx, 'a.mean.npy')).data)).toBeLessThan(1e-9);
  expect(maxRelDiff(r.totalIntensity, readNpyF64(path.join(fx, 'a.total.npy')).data)).toBeLessThan(1e-9);
  await new Promise((res) => setTimeout(res, 20));
  expect(events.some((e) => e.kind === 'job' && e.job.jobId === 'over-port' && e.job.state === 'done')).toBe(true);
  expect(events.some((e) => e.kind === 'dataset' && e.dataset === d.id && e.change === 'first-pass')).toBe(true);
  off();
  await client.close(d.id);
});

it('errors cross with their name and code; unknown requests are refused', async () => {
  const e1 = await client.open({ path: path.join(fx, 'nope.npy') }).catch((e) => e);
  expect(isInputError(e1)).toBe(true);
  expect(e1.code).toBe('missing-file');
  const e2 = await client.firstPass({ dataset: 'x', bogus: 1 } as never).catch((e) => e);
  expect(e2.message).toMatch(/^firstPass: request: unknown field "bogus"/);
  expect(e2.code).toBe('bad-request');
  // A message naming no method of the interface.
  const raw = await new Promise<{ t: string; error?: { message: string } }>((resolve) => {
    channel.port2.once('message', resolve);
    channel.port2.postMessage({ t: 'call', id: 99999, method: 'deleteEverything', arg: null });
  });
  expect(raw.t).toBe('error');
  expect(raw.error!.message).toMatch(/not a request this service knows/);
});
