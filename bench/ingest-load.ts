/**
 * The live server under UDP load: a real service (network source, default configuration: engine
 * with one bin worker per core, no recording, no dashboard) in this process, and a sender in a
 * separate process (./udp-sender.ts) offering MTU-sized int16 frames of a contiguous stream at a
 * multiple of real time. After the sender stops and every datagram is read or counted by the
 * kernel, the server's counters say what became of each frame.
 *
 * Two measurements: the accepted rate at several offered rates (ring-24, 2×, 4×, 10×), and the
 * sustainable rate per channel count: the highest offered rate at which every frame is accepted.
 * Optionally with N busy processes beside it (`background`), standing in for other work on the
 * machine.
 */
import { spawn, type ChildProcess } from 'node:child_process';
import { mkdtempSync, readdirSync, readFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { loadConfig } from '../server/config/load.ts';
import { startService } from '../server/service.ts';
import { maxSamplesPerFrame } from '../shared/frame.ts';
import type { ArrayGeometry } from '../shared/types.ts';

const SENDER = fileURLToPath(new URL('./udp-sender.ts', import.meta.url));
const FS = 48000;

export interface LoadRun {
  channels: number;
  samplesPerFrame: number;
  /** Offered multiple of real time asked of the sender, and what it achieved. */
  offeredX: number;
  sentX: number;
  framesSent: number;
  /** Sender's wall seconds. */
  sendS: number;
  framesAccepted: number;
  /** Accepted samples per channel over the sender's wall time, as a multiple of real time. */
  acceptedX: number;
  /** Frames sent and not accepted, by reason (kernel = dropped in the socket's receive buffer). */
  lost: Record<string, number>;
  /** Frames lost in gaps and resync skips (sequence numbers) plus the tail after the last arrival. */
  lostBySequence: number;
  /** sent = read + kernel drops, and read = Σ counters: every frame accounted for. */
  accounted: boolean;
  /** CPU seconds per wall second of the service's thread and of all others (bin workers, UDP receive thread). */
  mainCpuPerS: number;
  otherCpuPerS: number;
  shedStep: number;
  hopsSkipped: number;
}

/** `n` busy processes (other work on the machine) until the returned function is called. */
export function startBackground(n: number): () => void {
  const kids: ChildProcess[] = [];
  for (let i = 0; i < n; i++) kids.push(spawn(process.execPath, ['-e', 'for(;;){}'], { stdio: 'ignore' }));
  return () => {
    for (const k of kids) k.kill('SIGKILL');
  };
}

async function runSender(port: number, channels: number, speed: number, seconds: number): Promise<{ sent: number; errors: number; wallS: number; samplesPerFrame: number }> {
  const child = spawn(process.execPath, ['--import', 'tsx', SENDER, '127.0.0.1', String(port), String(channels), String(speed), String(seconds)], { stdio: ['ignore', 'pipe', 'inherit'] });
  let out = '';
  child.stdout!.on('data', (d) => (out += d));
  const code = await new Promise<number | null>((r) => child.on('exit', r));
  if (code !== 0) throw new Error(`sender exited with ${code}`);
  return JSON.parse(out.trim().split('\n').pop()!);
}

/** CPU seconds so far of this process's main thread and of all its other threads (Linux /proc; zeros elsewhere). */
function threadCpuS(): { main: number; other: number } {
  let main = 0;
  let other = 0;
  try {
    for (const tid of readdirSync('/proc/self/task')) {
      const stat = readFileSync(`/proc/self/task/${tid}/stat`, 'utf8');
      const f = stat.slice(stat.lastIndexOf(')') + 2).split(' ');
      const s = (Number(f[11]) + Number(f[12])) / 100; // utime + stime in clock ticks (USER_HZ = 100)
      if (Number(tid) === process.pid) main += s;
      else other += s;
    }
  } catch {
    /* not Linux */
  }
  return { main, other };
}

const nonZero = (o: Record<string, number>) => Object.fromEntries(Object.entries(o).filter(([, v]) => v > 0));

/** Offer `speed` × real time of `geometry`-sized int16 frames for `seconds` of wall time. */
export async function runLoad(geometry: ArrayGeometry, speed: number, seconds: number): Promise<LoadRun> {
  const loaded = await loadConfig({
    env: {},
    layers: [{ server: { host: '127.0.0.1', httpPort: 0 }, source: { kind: 'network' }, ingest: { udp: { port: 0 } }, data: { dir: mkdtempSync(join(tmpdir(), 'nullsteer-bench-')) } }],
  });
  const svc = await startService({ ...loaded, geometry });
  try {
    const channels = geometry.positions.length;
    await new Promise((r) => setTimeout(r, 300)); // the worker threads start
    const cpu0 = threadCpuS();
    const s = await runSender(svc.udpPort!, channels, speed, seconds);
    const cpu1 = threadCpuS();
    // Every datagram read (or counted by the kernel), then the reorder window released.
    let st = svc.status() as any;
    for (let t = 0; t < 300 && st.ingest.messages + (st.listeners.udp.kernelDrops ?? 0) < s.sent; t++) {
      await new Promise((r) => setTimeout(r, 100));
      st = svc.status();
    }
    svc.hub!.flush();
    st = svc.status();
    const stream = st.streams[0] ?? { rejected: {}, framesAccepted: 0, samplesAccepted: 0, framesLost: 0, nextSample: 0, firstSample: 0 };
    const kernel = st.listeners.udp.kernelDrops ?? 0;
    const read = st.ingest.messages as number;
    const sum = (o: Record<string, number>) => Object.values(o).reduce((a, b) => a + b, 0);
    const accounted = read + kernel === s.sent && sum(st.ingest.rejected) + stream.framesAccepted + stream.framesDuplicated + stream.framesLate + sum(stream.rejected) === read;
    const tail = s.sent - (stream.nextSample - stream.firstSample) / s.samplesPerFrame;
    return {
      channels,
      samplesPerFrame: s.samplesPerFrame,
      offeredX: speed,
      sentX: (s.sent * s.samplesPerFrame) / FS / s.wallS,
      framesSent: s.sent,
      sendS: s.wallS,
      framesAccepted: stream.framesAccepted,
      acceptedX: stream.samplesAccepted / FS / s.wallS,
      lost: nonZero({ kernel, ...st.ingest.rejected, ...stream.rejected, late: stream.framesLate }),
      lostBySequence: stream.framesLost + tail,
      accounted,
      mainCpuPerS: (cpu1.main - cpu0.main) / s.wallS,
      otherCpuPerS: (cpu1.other - cpu0.other) / s.wallS,
      shedStep: st.engine?.shed?.step ?? 0,
      hopsSkipped: st.engine?.hopsSkipped ?? 0,
    };
  } finally {
    await svc.close();
  }
}

export interface Sustained {
  channels: number;
  samplesPerFrame: number;
  /** Frames per second one real-time stream of this array sends. */
  framesPerSAt1x: number;
  /** Highest offered rate with every frame accepted, × real time (0 when even the lowest tried lost frames). */
  sustainedX: number;
  framesPerS: number;
  /** The sender could not offer more, or the search stopped at its highest rate: the server's limit is higher. */
  senderBound: boolean;
  trials: { offeredX: number; sentX: number; lossless: boolean; lost: Record<string, number> }[];
}

/**
 * The highest offered rate (× real time) at which every frame is accepted: doubling from 1× while
 * lossless, then `refine` bisection steps between the last lossless and the first lossy rate.
 */
export async function sustainableRate(geometry: ArrayGeometry, opts: { seconds: number; maxX: number; refine: number }): Promise<Sustained> {
  const m = geometry.positions.length;
  const n = maxSamplesPerFrame(m, 'int16');
  const trials: Sustained['trials'] = [];
  let senderBound = false;
  const trial = async (x: number): Promise<boolean> => {
    const r = await runLoad(geometry, x, opts.seconds);
    const lossless = r.framesAccepted === r.framesSent && r.accounted;
    trials.push({ offeredX: x, sentX: r.sentX, lossless, lost: r.lost });
    if (lossless && r.sentX < 0.95 * x) senderBound = true;
    return lossless && !senderBound;
  };
  let good = 0;
  let bad = 0;
  for (let x = 1; x <= opts.maxX; x *= 2) {
    if (await trial(x)) good = x;
    else {
      bad = x;
      break;
    }
  }
  if (good === 0 && !senderBound) {
    for (const x of [0.5, 0.25]) {
      if (await trial(x)) {
        good = x;
        break;
      }
      bad = x;
    }
  }
  for (let i = 0; i < opts.refine && good > 0 && bad > 0 && !senderBound; i++) {
    const x = Math.round(((good + bad) / 2) * 100) / 100;
    if (await trial(x)) good = x;
    else bad = x;
  }
  if (senderBound) good = Math.max(good, ...trials.filter((t) => t.lossless).map((t) => t.sentX));
  if (good >= opts.maxX) senderBound = true;
  return { channels: m, samplesPerFrame: n, framesPerSAt1x: FS / n, sustainedX: good, framesPerS: (good * FS) / n, senderBound, trials };
}

export interface IngestLoadResults {
  node: string;
  background: number;
  offered: LoadRun[];
  sustained: Sustained[];
}

/** The ingest part of `npm run bench`: offered 2×/4×/10× for ring-24, then the sustainable rate per channel count. */
export async function ingestLoadBench(o: { quick: boolean; background: number; ring24: ArrayGeometry; ring: (m: number) => ArrayGeometry; say: (s: string) => void }): Promise<IngestLoadResults> {
  const { say } = o;
  const stop = startBackground(o.background);
  try {
    const seconds = o.quick ? 2 : 5;
    say(`\nUDP ingest under load: sender in its own process on this machine, int16 frames ≤ 1 472 bytes, ${o.background} busy background process(es)`);
    say(`ring-24 (24 ch, 30 samples per frame, 1 600 frames/s at 1×), ${seconds} s per rate:`);
    say('  offered   sent  accepted  frames lost by reason                          by sequence  accounted  cpu: service / other threads');
    const offered: LoadRun[] = [];
    for (const x of [2, 4, 10]) {
      const r = await runLoad(o.ring24, x, seconds);
      offered.push(r);
      say(
        `  ${`${x}×`.padStart(7)} ${r.sentX.toFixed(2).padStart(6)}× ${r.acceptedX.toFixed(2).padStart(7)}×  ${(JSON.stringify(r.lost) === '{}' ? 'none' : JSON.stringify(r.lost)).padEnd(45)} ${String(r.lostBySequence).padStart(6)}       ${r.accounted ? 'yes' : 'NO '}        ${r.mainCpuPerS.toFixed(2)} / ${r.otherCpuPerS.toFixed(2)}`,
      );
    }
    const counts = o.quick ? [24, 256] : [8, 24, 64, 128, 256];
    say(`sustainable rate (every frame accepted), rings of M microphones, ${o.quick ? 1.5 : 3} s per trial:`);
    say('     M  samples/frame  frames/s at 1×  sustained  frames/s  trials (offered×: lossless?)');
    const sustained: Sustained[] = [];
    for (const m of counts) {
      const r = await sustainableRate(o.ring(m), { seconds: o.quick ? 1.5 : 3, maxX: 32, refine: o.quick ? 1 : 3 });
      sustained.push(r);
      say(
        `  ${String(m).padStart(4)} ${String(r.samplesPerFrame).padStart(14)} ${r.framesPerSAt1x.toFixed(0).padStart(15)} ${`${r.senderBound ? '≥' : ''}${r.sustainedX.toFixed(2)}×`.padStart(10)} ${r.framesPerS.toFixed(0).padStart(9)}  ${r.trials.map((t) => `${t.offeredX}:${t.lossless ? 'ok' : 'lost'}`).join(' ')}`,
      );
    }
    return { node: process.version, background: o.background, offered, sustained };
  } finally {
    stop();
  }
}
