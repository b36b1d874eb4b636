/**
 * `npm run bench -- --remote N [--workload W32] [--local L] [--json]`: the cost of remote bin workers.
 * A broker (Debian nats-server) and N `nullsteer worker` processes start on this machine; the same
 * workload runs with the local threads alone and with L local threads plus the N workers, offline
 * (as fast as it goes) and paced in real time. Reported: bytes/s per worker on the wire (both ways,
 * at real-time rate), the added row latency (p50/p99, paced), the front end's main-thread time per
 * MB published, every process's CPU per second of signal, and that no row was partial.
 *
 * On one machine the workers share its cores with the engine: this measures correctness and
 * overhead, not capacity (README "Large arrays" has the capacity model).
 */
import { spawn, type ChildProcess } from 'node:child_process';
import { readFileSync } from 'node:fs';
import { availableParallelism, cpus } from 'node:os';
import { fileURLToPath } from 'node:url';
import { RemoteBins } from '../server/cluster/remote-bins.ts';
import { Engine } from '../server/engine/engine.ts';
import type { ProcessingParams } from '../server/engine/params.ts';
import type { ArrayGeometry, Block } from '../shared/types.ts';
import { natsAvailable, startBroker } from '../test/helpers/nats-server.ts';
import { FS, geometryOf, paramsFor, sceneBlocks, WORKLOADS } from './engine.ts';

const CLI = fileURLToPath(new URL('../bin/nullsteer.mjs', import.meta.url));

/** CPU seconds (user + system) a process has used, from /proc (Linux). */
function procCpuS(pid: number): number {
  try {
    const f = readFileSync(`/proc/${pid}/stat`, 'utf8');
    const parts = f.slice(f.lastIndexOf(')') + 2).split(' ');
    return (Number(parts[11]) + Number(parts[12])) / 100;
  } catch {
    return NaN;
  }
}

const selfCpuS = () => {
  const u = process.cpuUsage();
  return (u.user + u.system) / 1e6;
};

interface RunFigures {
  rtf: number;
  cpuFrontS: number;
  cpuWorkersS: number[];
  rows: number;
  partialRows: number;
  latencyP50: number;
  latencyP99: number;
  bytesOutPerS: number[];
  bytesInPerS: number[];
  frontEndMsPerMB: number;
  perWorkerBins: number[];
}

async function waitUntil(pred: () => boolean, ms: number, what: string): Promise<void> {
  const until = Date.now() + ms;
  while (!pred()) {
    if (Date.now() > until) throw new Error(`timed out waiting for ${what}`);
    await new Promise((r) => setTimeout(r, 20));
  }
}

async function run(g: ArrayGeometry, p: ProcessingParams, blocks: Block[], local: number, natsUrl: string | null, remoteN: number, pids: number[], paced: boolean): Promise<RunFigures> {
  let remote: RemoteBins | undefined;
  if (natsUrl) {
    remote = RemoteBins.start({ natsUrl, deadlineMs: paced ? 1000 : 600_000, dropMs: paced ? 5000 : 600_000 });
    await remote.ready;
    await waitUntil(() => remote!.candidates().length >= remoteN, 30_000, `${remoteN} workers`);
  }
  let rows = 0;
  let partial = 0;
  const e = await Engine.create({ geometry: g, sampleRateHz: FS, params: p, workers: local, speedOfSoundMps: 343.2, shedding: false, onRow: (r) => (rows++, r.partial && partial++), ...(remote ? { remote } : {}) });
  try {
    const warm = Math.min(100, Math.floor(blocks.length / 4));
    for (const b of blocks.slice(0, warm)) await e.pushAsync(b);
    await e.drain(120_000);
    e.clearTimings();
    const rows0 = rows;
    const out0 = remote ? remote.parts.map((x) => x.bytesSent) : [];
    const in0 = remote ? remote.parts.map((x) => x.bytesReceived) : [];
    const fe0 = remote?.frontEndMs ?? 0;
    const pub0 = remote?.bytesPublished ?? 0;
    const c0 = selfCpuS();
    const w0 = pids.map(procCpuS);
    const t0 = performance.now();
    const s0 = blocks[warm].sampleIndex;
    for (const b of blocks.slice(warm)) {
      if (paced) {
        const due = t0 + ((b.sampleIndex - s0) / FS) * 1000;
        let wait = due - performance.now();
        while (wait > 0) {
          await new Promise((r) => setTimeout(r, Math.min(wait, 5)));
          wait = due - performance.now();
        }
        e.push(b);
      } else await e.pushAsync(b);
    }
    await e.drain(120_000);
    const wallS = (performance.now() - t0) / 1000;
    const signalS = (blocks[blocks.length - 1].sampleIndex + blocks[blocks.length - 1].frames - s0) / FS;
    const lat = e.latencyPercentiles();
    const st = e.status() as { perWorker: { bins: number }[] };
    const mb = ((remote?.bytesPublished ?? 0) - pub0) / 1e6;
    return {
      rtf: wallS / signalS,
      cpuFrontS: (selfCpuS() - c0) / signalS,
      cpuWorkersS: pids.map((pid, i) => (procCpuS(pid) - w0[i]) / signalS),
      rows: rows - rows0,
      partialRows: partial,
      latencyP50: lat.p50,
      latencyP99: lat.p99,
      bytesOutPerS: remote ? remote.parts.map((x, i) => (x.bytesSent - out0[i]) / signalS) : [],
      bytesInPerS: remote ? remote.parts.map((x, i) => (x.bytesReceived - in0[i]) / signalS) : [],
      frontEndMsPerMB: mb > 0 ? ((remote?.frontEndMs ?? 0) - fe0) / mb : NaN,
      perWorkerBins: st.perWorker.map((w) => w.bins),
    };
  } finally {
    await e.close();
  }
}

export async function benchRemote(opts: { remote: number; workload: string; local: number; seconds: number; json: boolean }): Promise<void> {
  const say = (s: string) => !opts.json && console.log(s);
  if (!natsAvailable) {
    console.log('bench --remote needs Debian nats-server (apt-get install nats-server)');
    return;
  }
  const w = WORKLOADS.find((x) => x.name === opts.workload);
  if (!w) throw new Error(`unknown workload ${opts.workload}`);
  const g = await geometryOf(w);
  const p = paramsFor(w);
  const blocks = sceneBlocks(g, opts.seconds + 1);
  const pacedBlocks = sceneBlocks(g, Math.min(opts.seconds, 6) + 1);
  say(`${w.name} with ${opts.remote} remote workers on this machine (${availableParallelism()} cores, ${cpus()[0]?.model ?? 'unknown CPU'}), ${opts.local} local thread(s) beside them`);
  const allLocal = availableParallelism();
  const localOff = await run(g, p, blocks, allLocal, null, 0, [], false);
  const localPaced = await run(g, p, pacedBlocks, allLocal, null, 0, [], true);
  say(`  local only (${allLocal} threads): rtf ${localOff.rtf.toFixed(3)}, CPU ${localOff.cpuFrontS.toFixed(3)} s/s; paced latency p50 ${localPaced.latencyP50.toFixed(1)} ms, p99 ${localPaced.latencyP99.toFixed(1)} ms`);
  const broker = await startBroker();
  const children: ChildProcess[] = [];
  try {
    for (let i = 0; i < opts.remote; i++) {
      const c = spawn(process.execPath, [CLI, 'worker', '--nats', broker.url, '--name', `bench-${i + 1}`], { stdio: ['ignore', 'pipe', 'inherit'] });
      children.push(c);
      await new Promise<void>((resolve, reject) => {
        c.stdout!.once('data', () => resolve());
        c.once('exit', (code) => reject(new Error(`worker exited with ${code}`)));
      });
    }
    const pids = children.map((c) => c.pid!);
    const off = await run(g, p, blocks, opts.local, broker.url, opts.remote, pids, false);
    const paced = await run(g, p, pacedBlocks, opts.local, broker.url, opts.remote, pids, true);
    const kb = (x: number) => (x / 1000).toFixed(0);
    say(`  with remote: bins per part ${off.perWorkerBins.join(' / ')} (local first)`);
    say(`    offline: rtf ${off.rtf.toFixed(3)}; CPU per second of signal: front end ${off.cpuFrontS.toFixed(3)} s, workers ${off.cpuWorkersS.map((x) => x.toFixed(3)).join(' / ')} s; partial rows ${off.partialRows}`);
    say(`    paced:   latency p50 ${paced.latencyP50.toFixed(1)} ms (+${(paced.latencyP50 - localPaced.latencyP50).toFixed(1)}), p99 ${paced.latencyP99.toFixed(1)} ms (+${(paced.latencyP99 - localPaced.latencyP99).toFixed(1)}); partial rows ${paced.partialRows} of ${paced.rows}`);
    say(`    wire at real-time rate, per worker: to it ${paced.bytesOutPerS.map(kb).join(' / ')} kB/s, from it ${paced.bytesInPerS.map(kb).join(' / ')} kB/s`);
    say(`    front end: ${paced.frontEndMsPerMB.toFixed(2)} ms of main-thread time per MB published (copy to float32 + hand to the client)`);
    if (opts.json) console.log(JSON.stringify({ workload: w.name, remote: opts.remote, local: opts.local, cpu: cpus()[0]?.model, localOnly: { offline: localOff, paced: localPaced }, withRemote: { offline: off, paced } }, null, 1));
  } finally {
    for (const c of children) c.kill('SIGTERM');
    await Promise.all(children.map((c) => new Promise((r) => (c.exitCode !== null ? r(null) : c.once('exit', r)))));
    await broker.close();
  }
}
