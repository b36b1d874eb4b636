/**
 * The site service's cost per node (`npx tsx bench/site.ts [--seconds S] [--nodes 8,32,64] [--json]`):
 * a real nats-server (test/helpers/nats-server.ts), the site service as its own process
 * (`nullsteer site`, so its CPU is its own), and this process publishing for N nodes: a status
 * message a second and 20 peak messages a second, each with 3 peaks (the rate of an edge at 20 rows/s).
 * Reports, per N: messages/s the service received (against those sent), its CPU seconds per second
 * (/proc/PID/stat utime + stime), CPU per node, and windows closed. Then a second part measures the
 * service's own message path in this process (SiteCore.handle: parse, registry, windows) over
 * 200 000 peak messages, for the message rate one core sustains. The locator and tracker are the
 * service's placeholders here (not wired yet): the figures are for receiving, checking and
 * windowing, not for locating. A script, not a test.
 */
import { spawn } from 'node:child_process';
import { readFileSync } from 'node:fs';
import { fileURLToPath } from 'node:url';
import { connect } from '@nats-io/transport-node';
import { siteSubject, type NodeStatusMessage, type PeakMessage } from '../shared/site.ts';
import { SiteCore } from '../server/site/site-core.ts';
import { freePort, startBroker } from '../test/helpers/nats-server.ts';

const args = process.argv.slice(2);
const flag = (name: string, dflt: string) => {
  const i = args.indexOf(name);
  return i >= 0 ? args[i + 1] : dflt;
};
const seconds = Number(flag('--seconds', '8'));
const counts = flag('--nodes', '8,32,64').split(',').map(Number);
const json = args.includes('--json');
const CLK_TCK = 100; // Linux USER_HZ
const PEAKS_PER_S = 20;
const BIN = fileURLToPath(new URL('../bin/nullsteer.mjs', import.meta.url));
const sleep = (ms: number) => new Promise<void>((r) => setTimeout(r, ms));

function cpuS(pid: number): number {
  const f = readFileSync(`/proc/${pid}/stat`, 'utf8');
  const rest = f.slice(f.lastIndexOf(')') + 2).split(' ');
  return (Number(rest[11]) + Number(rest[12])) / CLK_TCK; // fields 14 and 15 of proc(5)
}

function status(site: string, node: string, i: number): NodeStatusMessage {
  return { v: 1, site, node, sentUtcMs: Date.now(), uptimeS: 1, arrayName: 'ring8', channels: 8, pose: { positionM: [i * 10, 0, 0], headingDeg: 0 }, sampleRateHz: 48000, sampleIndex: null, sampleUtcMs: null, rowsPerS: 20, load: 0.3, input: 'flowing', dashboardUrl: null, pending: 0, dropped: 0 };
}
function peaks(site: string, node: string, utcMs: number): PeakMessage {
  const p = (az: number) => ({ azimuthDeg: az, elevationDeg: 0, siteAzimuthDeg: az, siteElevationDeg: 0, levelDb: -20, widthDeg: 6, aboveFloorDb: 15 });
  return { v: 1, site, node, sampleIndex: 1000, sampleRateHz: 48000, utcMs, peaks: [p(30), p(120), p(250)] };
}

interface Row {
  nodes: number;
  sentPerS: number;
  receivedPerS: number;
  cpuSPerS: number;
  cpuPerNodePct: number;
  windows: number;
}

async function runOne(n: number): Promise<Row> {
  const broker = await startBroker();
  const port = await freePort();
  const child = spawn(process.execPath, [BIN, 'site', '--nats', broker.url, '--site', 'bench', '--http-port', String(port)], { stdio: ['ignore', 'pipe', 'inherit'] });
  const nc = await connect({ servers: broker.url.replace('nats://', ''), waitOnFirstConnect: true });
  try {
    const get = async () => (await (await fetch(`http://127.0.0.1:${port}/api/site`)).json()) as any;
    for (let i = 0; ; i++) {
      try {
        if ((await get()).broker.state === 'connected') break;
      } catch {
        /* not listening yet */
      }
      if (i > 200) throw new Error('site service did not start');
      await sleep(100);
    }
    const enc = new TextEncoder();
    const names = Array.from({ length: n }, (_, i) => `n${i}`);
    let sent = 0;
    const tickMs = 1000 / PEAKS_PER_S;
    let ticks = 0;
    const t = setInterval(() => {
      ticks++;
      const now = Date.now();
      names.forEach((node, i) => {
        if (ticks % PEAKS_PER_S === 1) {
          nc.publish(siteSubject('bench', node, 'status'), enc.encode(JSON.stringify(status('bench', node, i))));
          sent++;
        }
        nc.publish(siteSubject('bench', node, 'peaks'), enc.encode(JSON.stringify(peaks('bench', node, now))));
        sent++;
      });
    }, tickMs);
    await sleep(2000); // warm-up
    const m0 = (await get()).counters;
    const s0 = sent;
    const c0 = cpuS(child.pid!);
    const w0 = performance.now();
    await sleep(seconds * 1000);
    const c1 = cpuS(child.pid!);
    const dt = (performance.now() - w0) / 1000;
    const s1 = sent;
    clearInterval(t);
    await sleep(300); // what is in flight arrives
    const m1 = (await get()).counters;
    const cpu = (c1 - c0) / dt;
    return { nodes: n, sentPerS: (s1 - s0) / dt, receivedPerS: (m1.messages - m0.messages) / dt, cpuSPerS: cpu, cpuPerNodePct: (100 * cpu) / n, windows: m1.windows - m0.windows };
  } finally {
    await nc.close();
    child.kill('SIGTERM');
    await new Promise((r) => child.once('exit', r));
    await broker.close();
  }
}

function inProcess(): { messagesPerS: number; usPerMessage: number } {
  let now = Date.now();
  const core = new SiteCore({ site: 'bench', windowS: 0.5, offlineAfterS: 3, locate: () => [], tracker: { update: () => [] }, toBearings: (m, pose) => m.peaks.map((p) => ({ node: m.node, originM: pose.positionM, azimuthDeg: p.azimuthDeg, elevationDeg: null, sigmaDeg: 3, levelDb: p.levelDb, utcMs: m.utcMs })), nowMs: () => now });
  const enc = new TextEncoder();
  const N = 64;
  for (let i = 0; i < N; i++) core.handle(siteSubject('bench', `n${i}`, 'status'), enc.encode(JSON.stringify(status('bench', `n${i}`, i))));
  const msgs = Array.from({ length: N }, (_, i) => enc.encode(JSON.stringify(peaks('bench', `n${i}`, now))));
  const total = 200_000;
  const t0 = performance.now();
  for (let k = 0; k < total; k++) {
    core.handle(siteSubject('bench', `n${k % N}`, 'peaks'), msgs[k % N]);
    if (k % 1000 === 999) {
      now += 100;
      core.tick();
    }
  }
  const s = (performance.now() - t0) / 1000;
  return { messagesPerS: total / s, usPerMessage: (s * 1e6) / total };
}

const rows: Row[] = [];
for (const n of counts) rows.push(await runOne(n));
const ip = inProcess();
if (json) console.log(JSON.stringify({ seconds, rows, inProcess: ip }));
else {
  console.log(`site service, ${PEAKS_PER_S} peak messages/s + 1 status/s per node, ${seconds} s each`);
  console.log('nodes  sent/s  received/s  CPU s/s  CPU per node  windows');
  for (const r of rows) console.log(`${String(r.nodes).padStart(5)}  ${r.sentPerS.toFixed(0).padStart(6)}  ${r.receivedPerS.toFixed(0).padStart(10)}  ${r.cpuSPerS.toFixed(3).padStart(7)}  ${r.cpuPerNodePct.toFixed(2).padStart(10)} %  ${String(r.windows).padStart(7)}`);
  console.log(`in process (parse + registry + windows): ${ip.messagesPerS.toFixed(0)} peak messages/s, ${ip.usPerMessage.toFixed(1)} µs each → about ${Math.floor(ip.messagesPerS / (PEAKS_PER_S + 1))} nodes at ${PEAKS_PER_S} messages/s on one core (before locating)`);
}
