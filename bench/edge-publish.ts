/**
 * `npm run bench:edge [-- --array config/arrays/ring-32.json --seconds 10 --outage 10]`: what one edge
 * puts on the site's broker, and how it comes back after the broker was away. Starts a test broker
 * (Debian's nats-server, test/helpers/nats-server.ts) and a server in this process with the built-in
 * scene and the array given (with a pose added), measures messages/s and bytes/s per subject over
 * `--seconds`, then kills the broker for `--outage` seconds and reports the entries held, the time
 * from the broker's restart to every held entry acknowledged, and what was dropped. Needs nats-server.
 * A script, not a test: it prints and asserts nothing.
 */
import { mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join, resolve } from 'node:path';
import { parseArgs } from 'node:util';
import { loadConfig } from '../server/config/load.ts';
import { startService } from '../server/service.ts';
import { startBroker } from '../test/helpers/nats-server.ts';

const { values } = parseArgs({ options: { array: { type: 'string' }, seconds: { type: 'string' }, outage: { type: 'string' }, json: { type: 'boolean' } } });
const arraySrc = resolve(values.array ?? 'config/arrays/ring-24.json');
const seconds = Number(values.seconds ?? 10);
const outageS = Number(values.outage ?? 10);
const dir = mkdtempSync(join(tmpdir(), 'nullsteer-bench-edge-'));
const a = JSON.parse(readFileSync(arraySrc, 'utf8'));
a.pose = { positionM: [0, 0, 0], headingDeg: 0 };
const arrayFile = join(dir, 'array.json');
writeFileSync(arrayFile, JSON.stringify(a));

const sleep = (ms: number) => new Promise((r) => setTimeout(r, ms));
const broker = await startBroker();
const loaded = await loadConfig({ env: {}, layers: [{ server: { host: '127.0.0.1', httpPort: 0 }, source: { kind: 'simulator' }, array: { file: arrayFile }, data: { dir }, cluster: { natsUrl: broker.url, site: 'bench', node: 'edge-1' } }] });
const svc = await startService(loaded);
const cluster = () => (svc.status() as { cluster: any }).cluster;
await sleep(3000);
const c0 = cluster();
const r0 = svc.engine.rows;
const t0 = performance.now();
await sleep(seconds * 1000);
const c1 = cluster();
const dt = (performance.now() - t0) / 1000;
const perSubject: Record<string, { messagesPerS: number; bytesPerS: number; bytesPerMessage: number }> = {};
for (const k of ['rows', 'peaks', 'status', 'journal']) {
  const n = c1.published[k] - c0.published[k];
  const b = c1.publishedBytes[k] - c0.publishedBytes[k];
  perSubject[k] = { messagesPerS: +(n / dt).toFixed(2), bytesPerS: Math.round(b / dt), bytesPerMessage: n ? Math.round(b / n) : 0 };
}
const rowsPerS = (svc.engine.rows - r0) / dt;

await broker.kill();
const rowsAtKill = svc.engine.rows;
await sleep(outageS * 1000);
const held = cluster();
const rowsDuringOutage = svc.engine.rows - rowsAtKill;
const tStart = performance.now();
await broker.start();
const tUp = performance.now();
let connectedMs = NaN;
let drainedMs = NaN;
while (performance.now() - tUp < 60_000) {
  const c = cluster();
  if (Number.isNaN(connectedMs) && c.state === 'connected') connectedMs = performance.now() - tUp;
  if (c.state === 'connected' && c.pending === 0) {
    drainedMs = performance.now() - tUp;
    break;
  }
  await sleep(10);
}
const after = cluster();
const report = {
  array: a.name,
  channels: a.positions.length,
  seconds: +dt.toFixed(2),
  engineRowsPerS: +rowsPerS.toFixed(2),
  perSubject,
  outage: {
    seconds: outageS,
    engineRowsDuringOutage: rowsDuringOutage,
    pendingAtRestart: held.pending,
    brokerStartMs: Math.round(tUp - tStart),
    reconnectedAfterMs: Math.round(connectedMs),
    allAckedAfterMs: Math.round(drainedMs),
    dropped: after.droppedByKind,
    reconnects: after.reconnects,
  },
};
await svc.close();
await broker.close();
if (values.json) console.log(JSON.stringify(report));
else console.log(JSON.stringify(report, null, 2));
process.exit(0);
