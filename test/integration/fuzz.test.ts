/**
 * Seeded fuzzing of the ingest path over real sockets on 127.0.0.1: a flood of malformed datagrams
 * (and WebSocket messages) mixed with a known, contiguous good stream. Every datagram the test sends
 * is classified locally first (decodeFrame plus the hub's stream checks), so the expected count per
 * reject reason is known exactly; a mutation that would turn into an acceptable frame is forced to a
 * known reject (rate 44100 → rate_mismatch) so nothing but the good stream ever reaches a sequencer,
 * except deliberate far-off frames (out_of_range) that never form a consecutive pair.
 *
 * Pacing: the service runs in this process, so the sender waits (setImmediate) whenever more than
 * WINDOW datagrams are in flight (sent − svc.hub.messages). That keeps the kernel receive buffer far
 * from full, so nothing is lost on loopback and the counts must match exactly.
 */
import { createSocket, type Socket } from 'node:dgram';
import { setFlagsFromString } from 'node:v8';
import { runInNewContext } from 'node:vm';
import { afterEach, describe, expect, it } from 'vitest';
import WebSocket from 'ws';
import { decodeFrame, decodeSamplesChecked, encodeFrame, type SampleEncoding } from '../../shared/frame.ts';
import type { Block } from '../../shared/types.ts';
import type { Service } from '../../server/service.ts';
import { collectBlocks, getStatus, startTestService, waitFor } from '../helpers/service.ts';

const M = 4;
const FS = 48000;
const N = 120;
const GOOD = 77;
const START = 10_000_000; // > maxGap, so frames near 0 are "far behind"
const MAX_GAP = 10 * FS; // ingest.maxGapSeconds default × fs
const ENCODINGS: SampleEncoding[] = ['int16', 'float32']; // int24/int32 frames → encoding_mismatch
const TWO53 = 2n ** 53n;

// A real collection before each memory reading, so garbage not yet collected is not taken for growth.
setFlagsFromString('--expose-gc');
const gc = runInNewContext('gc') as () => void;
/** Memory after a full collection: rss and what JS still holds (heap + array buffers), bytes. */
function memory(): { rss: number; retained: number } {
  gc();
  const m = process.memoryUsage();
  return { rss: m.rss, retained: m.heapUsed + m.arrayBuffers };
}
const mb = (b: number) => (b / 2 ** 20).toFixed(0);

let svc: Service | null = null;
let udp: Socket | null = null;
afterEach(async () => {
  udp?.close();
  udp = null;
  await svc?.close();
  svc = null;
});

function mulberry32(seed: number): () => number {
  let a = seed >>> 0;
  return () => {
    a = (a + 0x6d2b79f5) >>> 0;
    let t = Math.imul(a ^ (a >>> 15), a | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
}

/** Exactly representable float32 test signal. */
function value(s: number, c: number): number {
  return Math.fround(0.5 * Math.sin(0.0123 * s + c) + 0.01 * c);
}

function goodFrame(k: number, streamId = GOOD): Uint8Array {
  const first = START + k * N;
  const x = new Float32Array(N * M);
  for (let i = 0; i < N; i++) for (let c = 0; c < M; c++) x[i * M + c] = value(first + i, c);
  return encodeFrame({ streamId, sequence: k, firstSample: first, sampleRateHz: FS, channels: M, samplesPerChannel: N, encoding: 'float32' }, x);
}

type Expect = Record<string, number>;
const bump = (m: Expect, k: string) => (m[k] = (m[k] ?? 0) + 1);

/**
 * Builds bad datagrams and predicts what the server does with each. `tracked` is the set of stream
 * ids the hub tracks (full: any other id is too_many_streams).
 */
class Fuzzer {
  readonly rnd: () => number;
  readonly ingest: Expect = {};
  readonly stream: Expect = {};
  bad = 0;
  kinds: Expect = {};
  /** Last out_of_range frame since a good one: a consecutive successor would resync the stream. */
  lastFar: { first: number; seq: number; n: number } | null = null;
  constructor(
    seed: number,
    readonly tracked: Set<number>,
  ) {
    this.rnd = mulberry32(seed);
  }
  int(n: number): number {
    return Math.floor(this.rnd() * n);
  }
  randomBytes(len: number): Uint8Array {
    const b = new Uint8Array(len);
    for (let i = 0; i < len; i++) b[i] = this.int(256);
    return b;
  }
  /** A valid frame of any encoding and a plausible shape, to be mutated. */
  template(): Uint8Array {
    const enc = (['int16', 'int24', 'int32', 'float32'] as const)[this.int(4)];
    const n = 1 + this.int(this.rnd() < 0.9 ? 200 : 1000);
    const m = this.rnd() < 0.8 ? M : 1 + this.int(8);
    const ids = [...this.tracked];
    const streamId = this.rnd() < 0.7 ? GOOD : this.rnd() < 0.5 ? ids[this.int(ids.length)] : this.int(2 ** 32);
    const x = new Float32Array(n * m);
    for (let i = 0; i < x.length; i++) x[i] = this.rnd() * 2 - 1;
    const bytesPer = enc === 'int16' ? 2 : enc === 'int24' ? 3 : 4;
    const nn = 32 + n * m * bytesPer > 65507 ? Math.floor((65507 - 32) / (m * bytesPer)) : n;
    return encodeFrame(
      { streamId, sequence: this.int(2 ** 32), firstSample: this.int(2 ** 40), sampleRateHz: this.rnd() < 0.9 ? FS : 1 + this.int(200000), channels: m, samplesPerChannel: nn, encoding: enc },
      x.subarray(0, nn * m),
    );
  }
  /** One bad datagram, already classified and counted. */
  next(goodNext: number): Uint8Array {
    let b: Uint8Array;
    const kind = this.int(11);
    switch (kind) {
      case 0: // random bytes 0–2000
        b = this.randomBytes(this.int(2001));
        break;
      case 1: {
        // random bytes behind a valid magic/version/encoding
        b = this.randomBytes(this.int(2001));
        if (b.length >= 6) {
          b.set([0x4e, 0x53, 0x46, 0x52, 1, 1 + this.int(4)]);
        }
        break;
      }
      case 2: {
        // bit flips anywhere
        b = this.template();
        const flips = 1 + this.int(8);
        for (let i = 0; i < flips; i++) b[this.int(b.length)] ^= 1 << this.int(8);
        break;
      }
      case 3: // truncation
        b = this.template();
        b = b.slice(0, this.int(b.length));
        break;
      case 4: {
        // extension
        const t = this.template();
        b = new Uint8Array(t.length + 1 + this.int(100));
        b.set(t);
        b.set(this.randomBytes(b.length - t.length), t.length);
        break;
      }
      case 5: {
        // headerBytes pointing past the end (or below 32, or a little extra header)
        b = this.template();
        const dv = new DataView(b.buffer);
        const r = this.rnd();
        dv.setUint16(6, r < 0.4 ? b.length + 1 + this.int(65535 - b.length) : r < 0.7 ? this.int(32) : 33 + this.int(64), true);
        break;
      }
      case 6: {
        // huge channel counts / samplesPerChannel
        b = this.template();
        const dv = new DataView(b.buffer);
        if (this.rnd() < 0.5) dv.setUint16(28, this.rnd() < 0.5 ? 65535 : this.int(65536), true);
        else dv.setUint16(30, this.rnd() < 0.5 ? 65535 : this.int(65536), true);
        break;
      }
      case 7: {
        // wrong magic / version / encoding
        b = this.template();
        const which = this.int(3);
        if (which === 0) b[this.int(4)] ^= 1 + this.int(255);
        else if (which === 1) b[4] = this.rnd() < 0.5 ? 0 : 2 + this.int(254);
        else b[5] = this.rnd() < 0.5 ? 0 : 5 + this.int(251);
        break;
      }
      case 8: {
        // firstSample near 2^53 and beyond
        b = this.template();
        const dv = new DataView(b.buffer);
        const off = BigInt(this.int(1000));
        const r = this.rnd();
        dv.setBigUint64(16, r < 0.3 ? TWO53 - 1n - off : r < 0.6 ? TWO53 + off : r < 0.8 ? 2n ** 64n - 1n - off : BigInt(this.int(2 ** 32)) << 32n, true);
        break;
      }
      case 9: {
        // float32 payload with NaN / ±Inf
        b = goodFrame(this.int(1000));
        const dv = new DataView(b.buffer);
        const bad = [Number.NaN, Number.POSITIVE_INFINITY, Number.NEGATIVE_INFINITY][this.int(3)];
        dv.setFloat32(32 + 4 * this.int(N * M), bad, true);
        if (this.rnd() < 0.2) dv.setUint32(8, [...this.tracked][this.int(this.tracked.size)], true);
        break;
      }
      default: {
        // a valid frame of the good stream, far from its clock (ahead, near 2^53, or far behind)
        const r = this.rnd();
        const first = r < 0.4 ? goodNext + MAX_GAP + 1 + this.int(2 ** 40) : r < 0.7 ? 2 ** 53 - 1 - this.int(100000) : this.int(START - MAX_GAP - 2 * N);
        const seq = this.int(2 ** 32);
        b = goodFrame(0);
        const dv = new DataView(b.buffer);
        dv.setBigUint64(16, BigInt(first), true);
        dv.setUint32(12, seq, true);
        const lf = this.lastFar;
        if (lf && first === lf.first + lf.n && seq === (lf.seq + 1) % 2 ** 32) dv.setUint32(12, (seq + 7) % 2 ** 32, true);
        break;
      }
    }
    bump(this.kinds, String(kind));
    return this.classify(b, goodNext);
  }
  /** Predict the server's verdict; force anything acceptable to a known reject. */
  classify(b: Uint8Array, goodNext: number): Uint8Array {
    this.bad++;
    const r = decodeFrame(b);
    if (!r.ok) {
      bump(this.ingest, r.reason);
      return b;
    }
    const f = r.frame;
    if (!this.tracked.has(f.streamId)) {
      bump(this.ingest, 'too_many_streams');
      return b;
    }
    if (f.sampleRateHz !== FS) return bump(this.stream, 'rate_mismatch'), b;
    if (f.channels !== M) return bump(this.stream, 'channel_mismatch'), b;
    if (!ENCODINGS.includes(f.encoding)) return bump(this.stream, 'encoding_mismatch'), b;
    // input.maxFloatLevelDbfs default +60 dBFS = 10^(60/20) = 1000 full-scale units: bit flips in a
    // float32 exponent make samples far beyond it.
    const check = decodeSamplesChecked(f, new Float32Array(f.channels * f.samplesPerChannel), 1000);
    if (check !== 'ok') return bump(this.stream, check), b;
    const end = f.firstSample + f.samplesPerChannel;
    const lf = this.lastFar;
    const resyncs = lf !== null && f.firstSample === lf.first + lf.n && f.sequence === (lf.seq + 1) % 2 ** 32;
    if (f.streamId === GOOD && (f.firstSample - goodNext > MAX_GAP || goodNext - end > MAX_GAP) && !resyncs) {
      this.lastFar = { first: f.firstSample, seq: f.sequence, n: f.samplesPerChannel };
      bump(this.stream, 'out_of_range');
      return b;
    }
    // It would be accepted (a frame of a tracked stream): make it a rate mismatch instead.
    new DataView(b.buffer, b.byteOffset, b.byteLength).setUint32(24, 44100, true);
    this.bad--;
    return this.classify(b, goodNext);
  }
}

function sumCounts(objs: Record<string, number>[]): Expect {
  const out: Expect = {};
  for (const o of objs) for (const [k, v] of Object.entries(o)) if (v) out[k] = (out[k] ?? 0) + v;
  return out;
}

const nonZero = (o: Record<string, number>): Expect => Object.fromEntries(Object.entries(o).filter(([, v]) => v !== 0));

function checkGoodTimeline(blocks: Block[], frames: number): void {
  let next = START;
  for (const b of blocks) {
    expect(b.streamId).toBe(GOOD);
    expect(b.sampleIndex).toBe(next);
    expect(b.gap).toBe(false);
    expect(b.discontinuity).toBe(false);
    for (let i = 0; i < b.frames; i++) {
      for (let c = 0; c < M; c++) {
        const v = b.data[c * b.frames + i];
        if (v !== value(b.sampleIndex + i, c)) expect(v, `sample ${b.sampleIndex + i} ch ${c}`).toBe(value(b.sampleIndex + i, c));
      }
    }
    next += b.frames;
  }
  expect(next - START).toBe(frames * N);
}

async function openUdp(): Promise<Socket> {
  const s = createSocket('udp4');
  await new Promise<void>((r) => s.bind(0, '127.0.0.1', () => r()));
  return s;
}

const tick = () => new Promise<void>((r) => setImmediate(r));

/** Fill the hub with the good stream (first, so it is selected) and filler streams up to maxStreams. */
async function prime(send: (b: Uint8Array) => Promise<void>, blocks: Block[], maxStreams: number): Promise<Set<number>> {
  const OPEN = 20;
  for (let k = 0; k < OPEN; k++) await send(goodFrame(k));
  await waitFor(() => blocks.reduce((n, b) => n + b.frames, 0) >= OPEN * N, 3000, 'opening frames');
  const tracked = new Set([GOOD]);
  for (let s = 1; s < maxStreams; s++) {
    tracked.add(1000 + s);
    await send(goodFrame(0, 1000 + s));
  }
  await waitFor(() => svc!.hub!.status().every((s) => s.framesAccepted > 0), 3000, 'filler streams accepted');
  return tracked;
}

describe('ingest fuzzing', () => {
  it('survives 200,000 malformed UDP datagrams, counting each once, with the good stream exact', { timeout: 90_000 }, async () => {
    svc = await startTestService({ input: { encodings: ENCODINGS } });
    const blocks = collectBlocks(svc);
    const hub = svc.hub!;
    udp = await openUdp();
    const port = svc.udpPort!;
    let sent = 0;
    let sendErrors = 0;
    const sendRaw = (b: Uint8Array, cb?: () => void) => {
      sent++;
      udp!.send(b, port, '127.0.0.1', (e) => {
        if (e) sendErrors++;
        cb?.();
      });
    };
    const sendWait = (b: Uint8Array) => new Promise<void>((r) => sendRaw(b, r));
    const st0 = await getStatus(svc);
    const maxStreams = 8; // config default
    const tracked = await prime(sendWait, blocks, maxStreams);
    const OPEN = 20;

    const fz = new Fuzzer(0xc0ffee, tracked);
    const BAD = 200_000;
    const GOOD_EVERY = 100; // one good frame per 100 bad datagrams
    const WINDOW = 64;
    let goodK = OPEN;
    const mem0 = memory();
    const rss0 = mem0.rss;
    let rssPeak = rss0;
    const t0 = performance.now();
    const deadline = Date.now() + 70_000;
    let baseMessages = hub.messages;
    let sentInRun = 0;
    for (let i = 0; i < BAD && Date.now() < deadline; i++) {
      if (i % GOOD_EVERY === 0) {
        sendRaw(goodFrame(goodK++));
        fz.lastFar = null;
        sentInRun++;
      }
      sendRaw(fz.next(START + goodK * N));
      sentInRun++;
      // Keep at most WINDOW datagrams between the sender and the hub.
      while (sentInRun - (hub.messages - baseMessages) > WINDOW && Date.now() < deadline) await tick();
      if (i % 10_000 === 0) rssPeak = Math.max(rssPeak, process.memoryUsage().rss);
    }
    // Every datagram of the test (the priming ones too: one may still have been on its way when
    // baseMessages was read) has reached the hub before the figures are read.
    await waitFor(() => hub.messages - st0.ingest.messages >= sent, 10_000, 'all datagrams received');
    const seconds = (performance.now() - t0) / 1000;
    const goodFrames = goodK;
    await waitFor(() => blocks.reduce((n, b) => n + b.frames, 0) >= goodFrames * N, 5000, 'good stream');
    const mem1 = memory();
    const rss1 = mem1.rss;
    rssPeak = Math.max(rssPeak, rss1);
    const st = await getStatus(svc);
    console.log(
      `[fuzz udp] ${fz.bad} bad + ${goodFrames - OPEN} good datagrams in ${seconds.toFixed(1)} s ` +
        `(${Math.round(sentInRun / seconds)}/s); rss ${(rss0 / 2 ** 20).toFixed(0)} → ${(rss1 / 2 ** 20).toFixed(0)} MB (peak ${mb(rssPeak)}), retained ${mb(mem0.retained)} → ${mb(mem1.retained)} MB; ` +
        `ingest ${JSON.stringify(nonZero(st.ingest.rejected))} streams ${JSON.stringify(sumCounts(st.streams.map((s: any) => s.rejected)))}`,
    );
    expect(sendErrors).toBe(0);
    expect(fz.bad).toBe(BAD);
    // Stays up and answers.
    expect(st.service).toBe('nullsteer');
    expect(st.ingest.messages - st0.ingest.messages).toBe(sent);
    // Every bad datagram counted exactly once, per reason.
    expect(nonZero(st.ingest.rejected)).toEqual(fz.ingest);
    expect(sumCounts(st.streams.map((s: any) => s.rejected))).toEqual(fz.stream);
    const totalRejected = Object.values(st.ingest.rejected as Expect).reduce((a, b) => a + b, 0) + Object.values(sumCounts(st.streams.map((s: any) => s.rejected))).reduce((a, b) => a + b, 0);
    expect(totalRejected).toBe(fz.bad);
    // Every good frame accepted, contiguous and exact.
    const good = st.streams.find((s: any) => s.streamId === GOOD);
    expect(good).toMatchObject({ selected: true, framesAccepted: goodFrames, samplesAccepted: goodFrames * N, framesLost: 0, gapSamples: 0, resyncs: 0, framesDuplicated: 0, framesLate: 0 });
    checkGoodTimeline(blocks, goodFrames);
    // Bounded state.
    expect(st.streams.length).toBeLessThanOrEqual(maxStreams);
    expect(rss1 - rss0).toBeLessThan(100 * 2 ** 20);
    expect(mem1.retained - mem0.retained).toBeLessThan(50 * 2 ** 20);
    // Every reason the fuzzer aims at actually occurred.
    for (const r of ['short_header', 'bad_magic', 'bad_version', 'bad_header_length', 'bad_encoding', 'bad_field', 'truncated', 'trailing_bytes', 'too_many_streams']) expect(fz.ingest[r] ?? 0, r).toBeGreaterThan(50);
    for (const r of ['rate_mismatch', 'channel_mismatch', 'encoding_mismatch', 'non_finite', 'out_of_range']) expect(fz.stream[r] ?? 0, r).toBeGreaterThan(50);
  });

  it('a flood of refused frames under ever new stream ids keeps the stream table bounded and every reject counted', { timeout: 90_000 }, async () => {
    // Streams that never had a frame accepted are forgotten to make room; their reject counts must
    // not vanish with them, and a real sender arriving afterwards must still get a slot.
    svc = await startTestService({ input: { encodings: ENCODINGS } });
    const blocks = collectBlocks(svc);
    const hub = svc.hub!;
    udp = await openUdp();
    const rnd = mulberry32(4242);
    const IDS = 3000;
    const want: Expect = {};
    for (let k = 0; k < IDS; k++) {
      const b = goodFrame(k, 5000 + k);
      const dv = new DataView(b.buffer);
      const r = rnd();
      if (r < 0.4) dv.setUint32(24, 44100, true), bump(want, 'rate_mismatch');
      else if (r < 0.7) dv.setFloat32(32 + 4 * Math.floor(rnd() * N * M), Number.NaN, true), bump(want, 'non_finite');
      else {
        // 2 channels of int32 (same byte length) → channel_mismatch
        dv.setUint16(28, 2, true), dv.setUint16(30, 2 * N, true), bump(want, 'channel_mismatch');
      }
      await new Promise<void>((res) => udp!.send(b, svc!.udpPort!, '127.0.0.1', () => res()));
      while (k + 1 - hub.messages > 64) await tick();
      if (k % 500 === 0) expect(hub.status().length).toBeLessThanOrEqual(8);
    }
    await waitFor(() => hub.messages >= IDS, 5000, 'all datagrams');
    for (let k = 0; k < 20; k++) await new Promise<void>((res) => udp!.send(goodFrame(k), svc!.udpPort!, '127.0.0.1', () => res()));
    await waitFor(() => blocks.reduce((n, b) => n + b.frames, 0) >= 20 * N, 3000, 'the real stream');
    const st = await getStatus(svc);
    expect(st.streams.length).toBeLessThanOrEqual(8);
    expect(st.streams.find((s: any) => s.streamId === GOOD)).toMatchObject({ selected: true, framesAccepted: 20 });
    expect(st.ingest.rejected.too_many_streams).toBe(0);
    expect(sumCounts([st.ingest.rejected, ...st.streams.map((s: any) => s.rejected)])).toEqual(want);
    checkGoodTimeline(blocks, 20);
  });

  it('survives 20,000 malformed WebSocket messages, text messages and a final oversize one', { timeout: 90_000 }, async () => {
    svc = await startTestService({ input: { encodings: ENCODINGS } });
    const blocks = collectBlocks(svc);
    const hub = svc.hub!;
    const ws = new WebSocket(`${svc.url.replace('http', 'ws')}/ingest`);
    await new Promise((r, j) => ws.once('open', r).once('error', j));
    let sent = 0;
    const send = async (b: Uint8Array | string) => {
      sent++;
      ws.send(b);
    };
    const tracked = await prime(send, blocks, 8);
    const OPEN = 20;
    const fz = new Fuzzer(0xbadf00d, tracked);
    const BAD = 20_000;
    let text = 0;
    let goodK = OPEN;
    const base = hub.messages;
    let inRun = 0;
    const rss0 = memory().rss;
    const t0 = performance.now();
    const deadline = Date.now() + 40_000;
    for (let i = 0; i < BAD && Date.now() < deadline; i++) {
      if (i % 50 === 0) {
        send(goodFrame(goodK++));
        fz.lastFar = null;
        inRun++;
      }
      if (fz.rnd() < 0.05) {
        const r = fz.rnd();
        // Text frames: ASCII, or arbitrary bytes that are not valid UTF-8 (still just not_binary).
        if (r < 0.3) send('hello');
        else if (r < 0.6) send(String.fromCharCode(...fz.randomBytes(fz.int(100)).map((x) => 32 + (x % 90))));
        else (sent++, ws.send(Uint8Array.from([0xff, 0xfe, ...fz.randomBytes(fz.int(100))]), { binary: false }));
        text++;
        inRun++;
      }
      send(fz.next(START + goodK * N));
      inRun++;
      while (inRun - (hub.messages - base) > 256 && Date.now() < deadline) await tick();
    }
    await waitFor(() => hub.messages - base >= inRun, 10_000, 'all messages received');
    const goodFrames = goodK;
    await waitFor(() => blocks.reduce((n, b) => n + b.frames, 0) >= goodFrames * N, 5000, 'good stream');
    const closed = new Promise<number>((r) => ws.once('close', (code) => r(code)));
    ws.send(new Uint8Array(65508));
    expect(await closed).toBe(1009);
    await waitFor(() => hub.rejected.too_large === 1, 3000, 'too_large counted');
    const seconds = (performance.now() - t0) / 1000;
    const rss1 = memory().rss;
    const st = await getStatus(svc);
    console.log(`[fuzz ws] ${fz.bad} bad + ${text} text + ${goodFrames - OPEN} good messages in ${seconds.toFixed(1)} s; rss ${(rss0 / 2 ** 20).toFixed(0)} → ${(rss1 / 2 ** 20).toFixed(0)} MB`);
    expect(fz.bad).toBe(BAD);
    expect(nonZero(st.ingest.rejected)).toEqual({ ...fz.ingest, not_binary: text, too_large: 1 });
    expect(sumCounts(st.streams.map((s: any) => s.rejected))).toEqual(fz.stream);
    expect(st.ingest.messages).toBe(sent + 1);
    const good = st.streams.find((s: any) => s.streamId === GOOD);
    expect(good).toMatchObject({ selected: true, transport: 'websocket', framesAccepted: goodFrames, samplesAccepted: goodFrames * N, framesLost: 0, gapSamples: 0, resyncs: 0 });
    checkGoodTimeline(blocks, goodFrames);
    expect(st.streams.length).toBeLessThanOrEqual(8);
    expect(rss1 - rss0).toBeLessThan(100 * 2 ** 20);
  });
});
