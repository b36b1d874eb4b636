/**
 * RTP ingest throughput (`npx tsx bench/rtp.ts [--seconds S] [--rate PACKETS_PER_S] [--json]`):
 * 64 channels as 8 streams × 8 channels, L24 at 48 kHz with 125 µs packets (6 samples each), i.e.
 * 8 × 8000 = 64 000 packets/s, sent over 127.0.0.1 by another process (bench/rtp-sender.ts) to 8
 * RTP sessions (server/ingest/rtp), each on its own receive thread, drained into its RtpStream on
 * this thread. Reports packets/s received, packets lost (the streams' count of zero-filled
 * packets), receive-queue drops and kernel drops (/proc/net/udp), CPU seconds per second of this
 * process (all its threads) and of the sender. When the full rate is not received without loss,
 * the highest loss-free rate is searched (bisection over shorter runs) and reported. A script, not a test.
 */
import { spawn } from 'node:child_process';
import { execFileSync } from 'node:child_process';
import { cpus } from 'node:os';
import { fileURLToPath } from 'node:url';
import { startRtpSession, type RtpSession } from '../server/ingest/rtp/rtp-receiver.ts';
import { RtpStream } from '../server/ingest/rtp/rtp-stream.ts';
import { parseSessionSdp } from '../server/ingest/rtp/sdp.ts';

const SENDER = fileURLToPath(new URL('./rtp-sender.ts', import.meta.url));
const STREAMS = 8;
const CHANNELS = 8;
const SAMPLES_PER_PACKET = 6;
const FULL_RATE = STREAMS * (48000 / SAMPLES_PER_PACKET); // 64 000 packets/s

const args = process.argv.slice(2);
const flag = (name: string, dflt: number) => {
  const i = args.indexOf(name);
  return i >= 0 ? Number(args[i + 1]) : dflt;
};
const json = args.includes('--json');
const seconds = flag('--seconds', 10);
const rate = flag('--rate', FULL_RATE);

export interface RtpRunResult {
  packetsPerSRequested: number;
  sent: number;
  received: number;
  packetsPerSReceived: number;
  /** Packets the streams zero-filled (sent but never placed). */
  lost: number;
  queueDrops: number;
  kernelDrops: number;
  senderWallS: number;
  /** CPU seconds per wall second: this process (receive threads + service thread), and the sender. */
  receiverCpu: number;
  senderCpu: number;
  /** Every packet sent was placed: nothing dropped by the kernel or the queue, nothing zero-filled. */
  lossFree: boolean;
  /** The sender kept up: it sent at ≥ 95 % of the requested rate (else the run measured less). */
  rateReached: boolean;
}

function machine(): { model: string; cores: number } {
  let model = cpus()[0]?.model ?? 'unknown';
  try {
    const line = execFileSync('lscpu', { encoding: 'utf8' }).split('\n').find((l) => l.startsWith('Model name:'));
    if (line) model = line.slice('Model name:'.length).trim();
  } catch {
    // lscpu absent: the model from os.cpus()
  }
  return { model, cores: cpus().length };
}

const SDP = (port: number) => ['v=0', 'o=- 1 1 IN IP4 127.0.0.1', 's=bench', 'c=IN IP4 127.0.0.1', 't=0 0', `m=audio ${port} RTP/AVP 97`, `a=rtpmap:97 L24/48000/${CHANNELS}`, 'a=ptime:0.125', ''].join('\r\n');

async function run(packetsPerS: number, runSeconds: number): Promise<RtpRunResult> {
  const streams: RtpStream[] = [];
  const sessions: RtpSession[] = [];
  let frames = 0;
  for (let s = 0; s < STREAMS; s++) {
    const desc = parseSessionSdp(SDP(5004 + 2 * s), `bench-${s}`);
    const stream = new RtpStream(desc, { jitterMs: 20, sampleRateHz: 48000, streamId: s }, (b) => (frames += b.frames));
    streams.push(stream);
    sessions.push(await startRtpSession(desc, stream, { host: '127.0.0.1', port: 0, receiveBufferBytes: 8 << 20, queueBytes: 32 << 20 }));
  }
  const ticker = setInterval(() => {
    const now = performance.now();
    for (const st of streams) st.tick(now);
  }, 5);
  const cpu0 = process.cpuUsage();
  const t0 = performance.now();
  const child = spawn(process.execPath, ['--import', 'tsx', SENDER, sessions.map((x) => x.port).join(','), String(CHANNELS), String(SAMPLES_PER_PACKET), String(packetsPerS), String(runSeconds)], { stdio: ['ignore', 'pipe', 'inherit'] });
  let out = '';
  child.stdout!.on('data', (d) => (out += d));
  await new Promise<void>((r) => child.on('exit', () => r()));
  const sender = JSON.parse(out.trim().split('\n').pop() ?? '{}') as { sent: number; wallS: number; cpuS: number };
  // Let the queues drain and the jitter buffers release (generous: a busy machine).
  const received = () => streams.reduce((n, st) => n + st.status().datagrams, 0);
  const drops = () => sessions.reduce((n, x) => n + x.queueDrops + (x.kernel()?.drops ?? 0), 0);
  const settleUntil = performance.now() + 5000;
  while (received() + drops() < sender.sent && performance.now() < settleUntil) await new Promise((r) => setTimeout(r, 20));
  const wallS = (performance.now() - t0) / 1000;
  const cpu = process.cpuUsage(cpu0);
  clearInterval(ticker);
  for (const st of streams) st.flush();
  const kernelDrops = sessions.reduce((n, x) => n + (x.kernel()?.drops ?? 0), 0);
  const queueDrops = sessions.reduce((n, x) => n + x.queueDrops, 0);
  const got = received();
  const lost = streams.reduce((n, st) => n + st.status().lost, 0);
  await Promise.all(sessions.map((x) => x.close()));
  if (frames === 0) throw new Error('nothing received');
  return {
    packetsPerSRequested: packetsPerS,
    sent: sender.sent,
    received: got,
    packetsPerSReceived: got / sender.wallS,
    lost,
    queueDrops,
    kernelDrops,
    senderWallS: sender.wallS,
    receiverCpu: (cpu.user + cpu.system) / 1e6 / wallS,
    senderCpu: sender.cpuS / sender.wallS,
    lossFree: got === sender.sent && lost === 0,
    rateReached: sender.sent / sender.wallS >= 0.95 * packetsPerS,
  };
}

const m = machine();
const full = await run(rate, seconds);
let highestLossFree: number | null = full.lossFree && full.rateReached ? rate : null;
const search: RtpRunResult[] = [];
if (!full.lossFree) {
  // Bisection over 4 s runs between 0 and the requested rate, to 1/16 of it.
  let lo = 0;
  let hi = rate;
  while (hi - lo > rate / 16) {
    const mid = Math.round((lo + hi) / 2);
    const r = await run(mid, 4);
    search.push(r);
    if (r.lossFree) lo = mid;
    else hi = mid;
  }
  highestLossFree = lo > 0 ? lo : null;
}
const result = { machine: m, streams: STREAMS, channelsPerStream: CHANNELS, samplesPerPacket: SAMPLES_PER_PACKET, seconds, full, highestLossFreePacketsPerS: highestLossFree, search };
if (json) console.log(JSON.stringify(result));
else {
  const f = (x: number, d = 0) => x.toFixed(d);
  console.log(`machine: ${m.model}, ${m.cores} cores`);
  console.log(`RTP ingest: ${STREAMS} streams × ${CHANNELS} ch L24 48 kHz, ${SAMPLES_PER_PACKET} samples (125 µs) per packet, ${seconds} s`);
  console.log(`  requested ${f(rate)} packets/s: sent ${full.sent} in ${f(full.senderWallS, 2)} s, received ${full.received} (${f(full.packetsPerSReceived)} packets/s)`);
  console.log(`  lost ${full.lost}, queue drops ${full.queueDrops}, kernel drops ${full.kernelDrops}; CPU per second: receiver ${f(full.receiverCpu, 2)}, sender ${f(full.senderCpu, 2)}`);
  if (!full.lossFree) console.log(`  not loss-free; highest loss-free rate found: ${highestLossFree ?? 'none'} packets/s`);
  else if (full.rateReached) console.log('  loss-free at the requested rate');
  else console.log(`  loss-free, but the sender reached only ${f(full.sent / full.senderWallS)} packets/s (it shares the machine's cores)`);
  for (const r of search) console.log(`    ${f(r.packetsPerSRequested)} packets/s: received ${r.received}/${r.sent}, lost ${r.lost}, queue ${r.queueDrops}, kernel ${r.kernelDrops}${r.lossFree ? ' (loss-free)' : ''}`);
}
