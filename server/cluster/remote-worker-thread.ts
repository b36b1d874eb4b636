/** A thread of `nullsteer worker --threads N`: one RemoteWorker, stopped by a 'stop' message. */
import { parentPort, workerData } from 'node:worker_threads';
import { RemoteWorker } from './remote-worker.ts';

const port = parentPort!;
const d = workerData as { natsUrl: string; token: string | null; name: string };
const w = await RemoteWorker.start({ natsUrl: d.natsUrl, token: d.token, name: d.name, log: (line) => port.postMessage({ type: 'log', line }) });
port.on('message', async (m: { type: string }) => {
  if (m.type !== 'stop') return;
  await w.close();
  port.close();
});
