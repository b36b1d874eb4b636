/**
 * Remote bin workers for tests: `nullsteer worker` child processes on a test broker, and an engine
 * whose RemoteBins has seen a given number of them join before its first plan.
 */
import { spawn, type ChildProcess } from 'node:child_process';
import { fileURLToPath } from 'node:url';
import { RemoteBins } from '../../server/cluster/remote-bins.ts';
import { waitFor } from './service.ts';

const CLI = fileURLToPath(new URL('../../bin/nullsteer.mjs', import.meta.url));

export interface WorkerProcess {
  name: string;
  child: ChildProcess;
  output: () => string;
  /** SIGKILL, as a crash or a pulled cable would: no goodbye on the broker. */
  kill(): Promise<void>;
}

export async function startWorkerProcess(natsUrl: string, name: string): Promise<WorkerProcess> {
  const child = spawn(process.execPath, [CLI, 'worker', '--nats', natsUrl, '--name', name], { stdio: ['ignore', 'pipe', 'pipe'] });
  let out = '';
  child.stdout!.on('data', (d) => (out = (out + String(d)).slice(-4000)));
  child.stderr!.on('data', (d) => (out = (out + String(d)).slice(-4000)));
  const exited = new Promise<void>((r) => child.once('exit', () => r()));
  await waitFor(() => out.includes('serving bins') || child.exitCode !== null, 30_000, `worker ${name} start`);
  if (child.exitCode !== null) throw new Error(`worker ${name} exited: ${out}`);
  return {
    name,
    child,
    output: () => out,
    kill: async () => {
      if (child.exitCode === null) child.kill('SIGKILL');
      await exited;
    },
  };
}

/** A RemoteBins connected to `natsUrl` that has `n` usable workers (heard for the join time). */
export async function remoteWith(natsUrl: string, n: number, o: { deadlineMs?: number; dropMs?: number } = {}): Promise<RemoteBins> {
  const remote = RemoteBins.start({ natsUrl, deadlineMs: o.deadlineMs ?? 250, dropMs: o.dropMs ?? 750 });
  await remote.ready;
  try {
    await waitFor(() => remote.candidates().length >= n, 30_000, `${n} remote workers joined`);
  } catch (e) {
    throw new Error(`${(e as Error).message}: ${JSON.stringify(remote.status(0))}`);
  }
  return remote;
}
