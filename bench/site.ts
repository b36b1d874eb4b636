/**
 * The site service's cost per node and how many edges it keeps up with
 * (`npx tsx bench/site.ts [--seconds S] [--nodes 3,8,16,32,64] [--sources 4] [--json]`):
 * a real nats-server (test/helpers/nats-server.ts), the site service as its own process
 * (`nullsteer site`, with its real locator and tracker, so its CPU is its own), and this process
 * publishing for N nodes: a status message a second and 20 peak messages a second (the rate of an
 * edge at 20 rows/s). The nodes stand on a circle of 60 m radius round the site's origin; each hears
 * every one of S still sources (spread over a disc of 40 m) as a peak at its true site azimuth plus
 * 0.5° of noise, its level falling as 1/r, so the locator has S real intersections and all their
 * ghosts to sort out every window. Reports, per N: messages/s the service received (against those
 * sent), its CPU seconds per second (/proc/PID/stat utime + stime), CPU per node, windows closed
 * (2 per second when it keeps up) and sources located in its latest window. A second part times
 * locate + track of one window in this process for the same geometry, and a third the message path
 * alone (SiteCore.handle: parse, registry, windows) over 200 000 peak messages. A script, not a test.
 */
import { spawn } from 'node:child_process';
import { readFileSync } from 'node:fs';
import { fileURLToPath } from 'node:url';
import { connect } from '@nats-io/transport-node';
import { siteSubject, type NodeStatusMessage, type PeakMessage } from '../shared/site.ts';
import { MAX_SITE_PEAKS } from '../shared/site.ts';
import { SiteCore } from '../server/site/site-core.ts';
import { bearingsFromPeaks } from '../server/site/bearing-sigma.ts';
import { locateWindow } from '../server/site/locate.ts';
import { ConstantVelocityTracker } from '../server/site/tracker.ts';
import { freePort, startBroker } from '../test/helpers/nats-server.ts';

const args = process.argv.slice(2);
const flag = (name: string, dflt: string) => {
  const i = args.indexOf(name);
  return i >= 0 ? args[i + 1] : dflt;
};
const seconds = Number(flag('--seconds', '8'));
const counts = flag('--nodes', '3,8,16,32,64').split(',').map(Number);
const nSources = Number(flag('--sources', '4'));
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

/** Deterministic noise (xorshift32 + Box–Muller), so runs compare. */
let seed = 0x2545f491;
function uniform(): number {
  seed ^= seed << 13;
  seed ^= seed >>> 17;
  seed ^= seed << 5;
  return ((seed >>> 0) + 0.5) / 4294967296;
}
function gauss(): number {
  return Math.sqrt(-2 * Math.log(uniform())) * Math.cos(2 * Math.PI * uniform());
}
const RING_M = 60;
/** Node i of n on the circle. */
function nodeAt(i: number, n: number): [number, number] {
  const a = (2 * Math.PI * i) / n;
  return [RING_M * Math.cos(a), RING_M * Math.sin(a)];
}
/** S still sources on a disc of 40 m (sunflower spiral), levels −10…−4 dB at 1 m. */
const SOURCES: [number, number, number][] = Array.from({ length: nSources }, (_, k) => {
  const r = 40 * Math.sqrt((k + 0.5) / nSources), a = k * 2.39996;
  return [r * Math.cos(a), r * Math.sin(a), -10 + (6 * k) / Math.max(nSources - 1, 1)];
});

function status(site: string, node: string, i: number, n: number): NodeStatusMessage {
  const [x, y] = nodeAt(i, n);
  return { v: 1, site, node, sentUtcMs: Date.now(), uptimeS: 1, arrayName: 'ring8', channels: 8, pose: { positionM: [x, y, 0], headingDeg: 0 }, sampleRateHz: 48000, sampleIndex: null, sampleUtcMs: null, rowsPerS: 20, load: 0.3, input: 'flowing', dashboardUrl: null, pending: 0, dropped: 0 };
}
function peaks(site: string, node: string, i: number, n: number, utcMs: number): PeakMessage {
  const [x, y] = nodeAt(i, n);
  const list = SOURCES.slice(0, MAX_SITE_PEAKS).map(([sx, sy, l]) => {
    const az = (Math.atan2(sy - y, sx - x) * 180) / Math.PI + 0.5 * gauss();
    const level = l - 20 * Math.log10(Math.hypot(sx - x, sy - y));
    return { azimuthDeg: az, elevationDeg: 0, siteAzimuthDeg: az, siteElevationDeg: 0, levelDb: level, widthDeg: 6, aboveFloorDb: 15 };
  });
  return { v: 1, site, node, sampleIndex: 1000, sampleRateHz: 48000, utcMs, peaks: list };
}

interface Row {
  nodes: number;
  sentPerS: number;
  receivedPerS: number;
  cpuSPerS: number;
  cpuPerNodePct: number;
  windows: number;
  /** Sources in the service's latest window. */
  located: number;
}

async function runOne(n: number): Promise<Row> {
  const broker = await startBroker();
  const port = await freePort();
  const child = spawn(process.execPath, [...(process.env.SITE_BENCH_PROF ? ['--cpu-prof', '--cpu-prof-dir', process.env.SITE_BENCH_PROF] : []), BIN, 'site', '--nats', broker.url, '--site', 'bench', '--http-port', String(port)], { stdio: ['ignore', 'pipe', 'inherit'] });
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
          nc.publish(siteSubject('bench', node, 'status'), enc.encode(JSON.stringify(status('bench', node, i, n))));
          sent++;
        }
        nc.publish(siteSubject('bench', node, 'peaks'), enc.encode(JSON.stringify(peaks('bench', node, i, n, now))));
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
    const located = ((await (await fetch(`http://127.0.0.1:${port}/api/site/sources`)).json()) as { sources: unknown[] }).sources.length;
    const cpu = (c1 - c0) / dt;
    return { nodes: n, sentPerS: (s1 - s0) / dt, receivedPerS: (m1.messages - m0.messages) / dt, cpuSPerS: cpu, cpuPerNodePct: (100 * cpu) / n, windows: m1.windows - m0.windows, located };
  } finally {
    await nc.close();
    child.kill('SIGTERM');
    await new Promise((r) => child.once('exit', r));
    await broker.close();
  }
}

/** Locate + track of one window (10 peak messages per node, as at 20 rows/s), ms, median of `windows`. */
function locateCost(n: number, windows = 12): { msPerWindow: number; located: number } {
  const tracker = new ConstantVelocityTracker();
  const times: number[] = [];
  let located = 0;
  const t0 = Date.now();
  for (let w = 0; w < windows; w++) {
    const tw = t0 + w * 500;
    const bearings = [];
    for (let i = 0; i < n; i++) {
      const [x, y] = nodeAt(i, n);
      for (let k = 0; k < 10; k++) bearings.push(...bearingsFromPeaks(peaks('bench', `n${i}`, i, n, tw + k * 50), { positionM: [x, y, 0], headingDeg: 0 }, { clockOffsetMs: 0, useElevation: false }));
    }
    const a = performance.now();
    const hints = tracker.predict(tw);
    const out = tracker.update(tw, locateWindow(bearings, { speedOfSoundMps: 343, windowUtcMs: tw, hints }));
    times.push(performance.now() - a);
    located = out.length;
  }
  times.sort((p, q) => p - q);
  return { msPerWindow: times[Math.floor(times.length / 2)], located };
}

function inProcess(): { messagesPerS: number; usPerMessage: number } {
  let now = Date.now();
  const core = new SiteCore({ site: 'bench', windowS: 0.5, offlineAfterS: 3, locate: () => [], tracker: { update: () => [] }, toBearings: (m, pose) => m.peaks.map((p) => ({ node: m.node, originM: pose.positionM, azimuthDeg: p.azimuthDeg, elevationDeg: null, sigmaDeg: 3, levelDb: p.levelDb, utcMs: m.utcMs })), nowMs: () => now });
  const enc = new TextEncoder();
  const N = 64;
  for (let i = 0; i < N; i++) core.handle(siteSubject('bench', `n${i}`, 'status'), enc.encode(JSON.stringify(status('bench', `n${i}`, i, N))));
  const msgs = Array.from({ length: N }, (_, i) => enc.encode(JSON.stringify(peaks('bench', `n${i}`, i, N, now))));
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
const locate = counts.map((n) => ({ nodes: n, ...locateCost(n) }));
const ip = inProcess();
if (json) console.log(JSON.stringify({ seconds, sources: nSources, rows, locate, inProcess: ip }));
else {
  console.log(`site service, ${nSources} still sources, nodes on a 60 m circle, ${PEAKS_PER_S} peak messages/s + 1 status/s per node, ${seconds} s each`);
  console.log('nodes  sent/s  received/s  CPU s/s  CPU per node  windows  located | locate+track per window');
  rows.forEach((r, i) => console.log(`${String(r.nodes).padStart(5)}  ${r.sentPerS.toFixed(0).padStart(6)}  ${r.receivedPerS.toFixed(0).padStart(10)}  ${r.cpuSPerS.toFixed(3).padStart(7)}  ${r.cpuPerNodePct.toFixed(2).padStart(10)} %  ${String(r.windows).padStart(7)}  ${String(r.located).padStart(7)} | ${locate[i].msPerWindow.toFixed(1)} ms (${locate[i].located} located)`));
  console.log(`in process (parse + registry + windows): ${ip.messagesPerS.toFixed(0)} peak messages/s, ${ip.usPerMessage.toFixed(1)} µs each → about ${Math.floor(ip.messagesPerS / (PEAKS_PER_S + 1))} nodes at ${PEAKS_PER_S} messages/s on one core (before locating)`);
}
