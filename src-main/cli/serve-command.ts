// `scanfold serve [FILE] [source flags] [--port N]`: the application in a browser. The engine
// runs in this process; the page and the contract are served on 127.0.0.1 behind a random token
// (src-main/transport/served.ts). With FILE, the dataset is opened before the address is printed.
import { EngineService } from '../engine/service';
import type { EngineOptions } from '../engine/engine';
import { distFile } from '../engine/paths';
import { APP_PREVIEW_BUDGET_BYTES } from '../engine/budget';
import { startServed } from '../transport/served';
import { InputError } from '../../src-shared/model/errors';
import { parseFlags, rejectExtraPositionals, SOURCE_OPTIONS, sourceSpecFromFlags, wholeNumber } from './source-flags';

type EngineOptionsOf = (v: Record<string, unknown>) => EngineOptions;
type EngineFlags = Record<string, { type: 'string' | 'boolean' }>;


export async function cmdServe(args: string[], engineOptions: EngineOptionsOf, engineFlags: EngineFlags): Promise<void> {
  const parsed = parseFlags(args, { ...SOURCE_OPTIONS, ...engineFlags, port: { type: 'string' } });
  const v = parsed.values as Record<string, unknown>;
  rejectExtraPositionals(parsed.positionals, 'serve');
  const port = typeof v.port === 'string' ? wholeNumber('port', v.port, 0, 'a port number 0…65535') : 0;
  if (port > 65535) throw new InputError(`--port ${port}: expected a port number 0…65535`);
  const options = engineOptions(v);
  if (typeof v['preview-budget'] !== 'string') options.previewBudgetBytes = APP_PREVIEW_BUDGET_BYTES;
  const service = new EngineService(options);
  try {
    if (parsed.positionals[0] !== undefined) {
      const opened = await service.open(sourceSpecFromFlags(parsed.positionals[0], v));
      // The page will want the first pass: start it now, while the browser loads the page.
      service.firstPass({ dataset: opened.id }).catch((e: Error) => process.stderr.write(`scanfold: first pass: ${e.message}\n`));
    }
    const served = await startServed({ service, rendererDir: distFile('renderer'), port });
    process.stdout.write(`Scanfold is served at ${served.url}\n(open it in a browser on this machine, or through an SSH tunnel to port ${served.port}; Ctrl-C stops)\n`);
    await new Promise<void>((resolve) => {
      const stop = () => resolve();
      process.once('SIGINT', stop);
      process.once('SIGTERM', stop);
    });
    await served.close();
  } finally {
    await service.shutdown();
  }
}
