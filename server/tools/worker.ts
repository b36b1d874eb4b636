/**
 * `nullsteer worker`: serve bin ranges of large arrays for engines on a NATS broker
 * (server/cluster/remote-worker.ts). With --threads N it runs N workers in N threads, each with its
 * own connection, shown to the engines as NAME/1 … NAME/N (each is planned by its own throughput).
 */
import { hostname } from 'node:os';
import { Worker } from 'node:worker_threads';
import { processIo } from '../main.ts';
import { FlagError, parseFlags, USAGE_EXIT_CODE } from './flag-suggest.ts';
import { NAME_PATTERN } from '../cluster/remote-wire.ts';

export const WORKER_USAGE = `usage: nullsteer worker --nats URL [--threads N] [--name NAME] [--token T]
  Serves bin ranges for every engine on the broker started with engine.remoteWorkers true: keeps the
  covariance of the bins it is given and answers each scan with its share of the spectra and beams.
  --nats     the broker, nats://HOST:PORT
  --threads  worker threads, 1–64 (default 1); each is a worker of its own to the engines
  --name     name shown in the engines' status (default: this host's name)
  --token    the broker's token (default: the NULLSTEER_NATS_TOKEN environment variable)`;

const OPTIONS = {
  nats: { type: 'string' },
  threads: { type: 'string' },
  name: { type: 'string' },
  token: { type: 'string' },
  help: { type: 'boolean', short: 'h' },
} as const;

export interface WorkerArgs {
  natsUrl: string;
  threads: number;
  name: string;
  token: string | null;
  help: boolean;
}

/** Parse the flags; throws FlagError with a one-line message. */
export function parseWorkerArgs(argv: string[], env: NodeJS.ProcessEnv = {}): WorkerArgs {
  const { values, positionals } = parseFlags(argv, OPTIONS, true);
  if (values.help === true) return { natsUrl: '', threads: 1, name: '', token: null, help: true };
  if (positionals.length > 0) throw new FlagError(`unexpected argument ${JSON.stringify(positionals[0].slice(0, 64))}`);
  const nats = values.nats;
  if (nats === undefined) throw new FlagError('--nats URL is required (e.g. nats://127.0.0.1:4222)');
  if (!/^nats:\/\/(\[[0-9A-Fa-f:.]+\]|[A-Za-z0-9.-]+)(:\d{1,5})?$/.test(nats)) throw new FlagError(`--nats ${JSON.stringify(nats.slice(0, 64))}: must be nats://host:port`);
  const t = values.threads ?? '1';
  const threads = Number(t);
  if (!/^\d+$/.test(t) || threads < 1 || threads > 64) throw new FlagError(`--threads ${JSON.stringify(t.slice(0, 64))}: must be a whole number in 1–64`);
  const name = values.name ?? hostname().replace(/[^A-Za-z0-9_:/@+-]/g, '-').slice(0, 56);
  if (!NAME_PATTERN.test(name) || name.length > 56) throw new FlagError(`--name ${JSON.stringify(name.slice(0, 64))}: 1–56 letters, digits or _ : / @ + -`);
  const token = values.token ?? env.NULLSTEER_NATS_TOKEN ?? null;
  if (token !== null && !/^[\x21-\x7e]{1,256}$/.test(token)) throw new FlagError('--token: printable ASCII without spaces, at most 256 characters');
  return { natsUrl: nats, threads, name, token, help: false };
}

export async function workerCommand(argv: string[]): Promise<number> {
  let args: WorkerArgs;
  try {
    args = parseWorkerArgs(argv, processIo.env);
  } catch (e) {
    if (e instanceof FlagError) {
      processIo.err(`nullsteer worker: ${e.message}\n${WORKER_USAGE}`);
      return USAGE_EXIT_CODE;
    }
    throw e;
  }
  if (args.help) {
    processIo.out(WORKER_USAGE);
    return 0;
  }
  const stopped = new Promise<void>((resolve) => {
    process.once('SIGINT', () => resolve());
    process.once('SIGTERM', () => resolve());
  });
  if (args.threads === 1) {
    const { RemoteWorker } = await import('../cluster/remote-worker.ts');
    const w = await RemoteWorker.start({ natsUrl: args.natsUrl, token: args.token, name: args.name, log: (l) => processIo.err(l) });
    processIo.out(`nullsteer worker ${args.name} (${w.id}): serving bins on ${args.natsUrl}`);
    await stopped;
    await w.close();
    return 0;
  }
  const boot = new URL('../cluster/remote-worker-boot.mjs', import.meta.url);
  const threads = Array.from({ length: args.threads }, (_, i) => {
    const t = new Worker(boot, { workerData: { natsUrl: args.natsUrl, token: args.token, name: `${args.name}/${i + 1}` } });
    t.on('message', (m: { type: string; line?: string }) => m.type === 'log' && processIo.err(String(m.line)));
    t.on('error', (e) => processIo.err(`worker thread ${i + 1}: ${String(e?.message ?? e)}`));
    return t;
  });
  processIo.out(`nullsteer worker ${args.name}: ${args.threads} threads serving bins on ${args.natsUrl}`);
  await stopped;
  threads.forEach((t) => t.postMessage({ type: 'stop' }));
  await Promise.all(threads.map((t) => new Promise((r) => t.once('exit', r))));
  return 0;
}
