/**
 * Ingest over real sockets on 127.0.0.1: UDP datagrams and WebSocket binary messages into a running
 * service, checked through the published block stream and GET /api/status.
 */
import { createSocket, type Socket } from 'node:dgram';
import { afterEach, describe, expect, it } from 'vitest';
import WebSocket from 'ws';
import { encodeFrame, type FrameHeader, type SampleEncoding } from '../../shared/frame.ts';
import type { Block } from '../../shared/types.ts';
import type { Service } from '../../server/service.ts';
import { collectBlocks, getStatus, sleep, startTestService, waitFor } from '../helpers/service.ts';

const M = 4;
const FS = 48000;
const N = 120;

let svc: Service | null = null;
let udp: Socket | null = null;
afterEach(async () => {
  udp?.close();
  udp = null;
  await svc?.close();
  svc = null;
});

function header(seq: number, firstSample: number, encoding: SampleEncoding = 'float32', extra: Partial<FrameHeader> = {}): FrameHeader {
  return { streamId: 11, sequence: seq, firstSample, sampleRateHz: FS, channels: M, samplesPerChannel: N, encoding, ...extra };
}

/** Deterministic test signal in (−1, 1): a different tone per channel plus a ramp. */
function signal(s: number, c: number): number {
  return 0.6 * Math.sin(2 * Math.PI * (0.01 + 0.003 * c) * s) + 0.3 * (((s * 37 + c * 11) % 101) / 101 - 0.5);
}

function interleaved(first: number, n = N, m = M): Float32Array {
  const x = new Float32Array(n * m);
  for (let i = 0; i < n; i++) for (let c = 0; c < m; c++) x[i * m + c] = signal(first + i, c);
  return x;
}

async function openUdp(): Promise<Socket> {
  const s = createSocket('udp4');
  await new Promise<void>((r) => s.bind(0, '127.0.0.1', () => r()));
  return s;
}

function sendUdp(s: Socket, port: number, bytes: Uint8Array): Promise<void> {
  return new Promise((resolve, reject) => s.send(bytes, port, '127.0.0.1', (e) => (e ? reject(e) : resolve())));
}

/** Flatten the block stream to [channel][sample] with contiguity checked. */
function timeline(blocks: Block[]) {
  const values: number[][] = Array.from({ length: M }, () => []);
  const gap: boolean[] = [];
  let next = blocks[0].sampleIndex;
  for (const b of blocks) {
    expect(b.sampleIndex).toBe(next);
    expect(b.channels).toBe(M);
    for (let i = 0; i < b.frames; i++) {
      for (let c = 0; c < M; c++) values[c].push(b.data[c * b.frames + i]);
      gap.push(b.gap);
    }
    next += b.frames;
  }
  return { start: blocks[0].sampleIndex, length: next - blocks[0].sampleIndex, values, gap };
}

/** Half a quantisation step of each encoding (full scale ±1), plus float32 rounding. */
const HALF_STEP: Record<SampleEncoding, number> = {
  int16: 0.5 / 32768 + 1e-7,
  int24: 0.5 / 8388608 + 1e-7,
  int32: 1e-7,
  float32: 1e-7,
};

describe('ingest over real sockets', () => {
  for (const transport of ['udp', 'websocket'] as const) {
    it(`round-trips all four encodings over ${transport} within their quantisation`, async () => {
      svc = await startTestService();
      const blocks = collectBlocks(svc);
      const encodings: SampleEncoding[] = ['int16', 'int24', 'int32', 'float32'];
      const frames = encodings.map((e, k) => encodeFrame(header(k, 1000 + k * N, e), interleaved(1000 + k * N)));
      if (transport === 'udp') {
        udp = await openUdp();
        for (const f of frames) await sendUdp(udp, svc.udpPort!, f);
      } else {
        const ws = new WebSocket(`${svc.url.replace('http', 'ws')}/ingest`);
        await new Promise((r, j) => ws.once('open', r).once('error', j));
        for (const f of frames) ws.send(f);
        await new Promise((r) => setTimeout(r, 50));
        ws.close();
      }
      await waitFor(() => blocks.reduce((n, b) => n + b.frames, 0) >= 4 * N, 3000, 'all frames');
      const t = timeline(blocks);
      expect(t.start).toBe(1000);
      expect(t.length).toBe(4 * N);
      encodings.forEach((e, k) => {
        let worst = 0;
        for (let i = 0; i < N; i++) {
          for (let c = 0; c < M; c++) worst = Math.max(worst, Math.abs(t.values[c][k * N + i] - signal(1000 + k * N + i, c)));
        }
        expect(worst, e).toBeLessThanOrEqual(HALF_STEP[e]);
      });
      const st = await getStatus(svc);
      expect(st.streams[0]).toMatchObject({ streamId: 11, transport, framesAccepted: 4, samplesAccepted: 4 * N, framesLost: 0 });
    });
  }

  it('turns 5 % loss, 2 % duplicates and reordering within the window into an exact-length stream', async () => {
    svc = await startTestService({ ingest: { reorderWindowFrames: 8, reorderHoldMs: 200 } });
    const blocks = collectBlocks(svc);
    udp = await openUdp();
    // Seeded pattern (mulberry32) so the counts are known in advance.
    let a = 20261202;
    const rnd = () => {
      a = (a + 0x6d2b79f5) >>> 0;
      let t = Math.imul(a ^ (a >>> 15), a | 1);
      t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
      return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
    };
    const total = 1200;
    const lost = new Set<number>();
    // The last frame is kept: a loss at the very end cannot be seen until a later frame arrives.
    while (lost.size < total * 0.05) lost.add(1 + Math.floor(rnd() * (total - 2)));
    const order = [...Array(total).keys()].filter((k) => !lost.has(k));
    for (let i = 1; i + 2 < order.length; i += 5) if (rnd() < 0.5) [order[i], order[i + 2]] = [order[i + 2], order[i]];
    const dupEvery = Math.round(1 / 0.02);
    const sent: number[] = [];
    order.forEach((k, i) => {
      sent.push(k);
      if (i % dupEvery === 7) sent.push(k);
    });
    const dups = sent.length - order.length;
    let reordered = 0;
    let maxSeen = -1;
    for (const k of order) {
      if (k < maxSeen) reordered++;
      else maxSeen = k;
    }
    const first = 480_000;
    for (let i = 0; i < sent.length; i++) {
      const k = sent[i];
      await sendUdp(udp, svc.udpPort!, encodeFrame(header(k, first + k * N, 'int24'), interleaved(first + k * N)));
      if (i % 40 === 39) await sleep(2); // stay well inside the socket buffer
    }
    await waitFor(() => blocks.reduce((n, b) => n + b.frames, 0) >= total * N, 5000, 'the whole timeline');
    await sleep(50);
    const t = timeline(blocks);
    expect(t.start).toBe(first);
    expect(t.length).toBe(total * N);
    for (let k = 0; k < total; k++) {
      const i = k * N + 33;
      if (lost.has(k)) {
        expect(t.values[2][i]).toBe(0);
        expect(t.gap[i]).toBe(true);
      } else {
        expect(Math.abs(t.values[2][i] - signal(first + i, 2))).toBeLessThanOrEqual(HALF_STEP.int24);
      }
    }
    const st = await getStatus(svc);
    expect(st.streams).toHaveLength(1);
    expect(st.streams[0]).toMatchObject({
      framesAccepted: total - lost.size,
      samplesAccepted: (total - lost.size) * N,
      framesLost: lost.size,
      gapSamples: lost.size * N,
      framesDuplicated: dups,
      framesReordered: reordered,
      framesLate: 0,
      nextSample: first + total * N,
    });
    expect(dups).toBeGreaterThanOrEqual(20);
    expect(reordered).toBeGreaterThan(50);
    expect(st.timeline).toMatchObject({ samples: total * N, gapSamples: lost.size * N, discontinuities: 0 });
  });

  it('rejects and counts bad datagrams by reason while every good frame around them is accepted', async () => {
    svc = await startTestService();
    const blocks = collectBlocks(svc);
    udp = await openUdp();
    const good = (k: number) => encodeFrame(header(k, k * N, 'int16'), interleaved(k * N));
    const badMagic = good(100);
    badMagic[0] ^= 0xff;
    const truncated = good(100).subarray(0, 32 + 50);
    const wrongChannels = encodeFrame(header(100, 0, 'int16', { channels: 6, streamId: 11 }), interleaved(0, N, 6));
    const wrongRate = encodeFrame(header(100, 0, 'int16', { sampleRateHz: 44100 }), interleaved(0));
    const random = new Uint8Array(200);
    let x = 12345;
    for (let i = 0; i < random.length; i++) random[i] = (x = (x * 1103515245 + 12345) >>> 0) >>> 24;
    const nanFrame = encodeFrame(header(100, 0, 'float32'), interleaved(0).fill(Number.NaN, 3, 4));
    const bad = [badMagic, truncated, wrongChannels, random, wrongRate, nanFrame];
    for (let k = 0; k < 12; k++) {
      await sendUdp(udp, svc.udpPort!, good(k));
      if (k < bad.length) await sendUdp(udp, svc.udpPort!, bad[k]);
    }
    await waitFor(() => blocks.reduce((n, b) => n + b.frames, 0) >= 12 * N, 3000, 'good frames');
    const st = await getStatus(svc);
    expect(st.ingest.rejected).toMatchObject({ bad_magic: 2, truncated: 1 }); // the random bytes fail the magic check too
    expect(st.ingest.messages).toBe(12 + bad.length);
    expect(st.streams).toHaveLength(1);
    expect(st.streams[0].rejected).toMatchObject({ channel_mismatch: 1, rate_mismatch: 1, non_finite: 1 });
    expect(st.streams[0]).toMatchObject({ framesAccepted: 12, samplesAccepted: 12 * N, framesLost: 0, gapSamples: 0 });
    expect(timeline(blocks).length).toBe(12 * N);
    expect(st.ingest.lastRejected).toMatchObject({ reason: 'non_finite', transport: 'udp', streamId: 11 });
  });

  it('refuses float32 frames beyond input.maxFloatLevelDbfs as beyond_bound; ±1000 (+60 dBFS) passes', async () => {
    // Default bound +60 dBFS = 10^(60/20) = 1000 full-scale units (dB of an amplitude; common practice).
    svc = await startTestService();
    const blocks = collectBlocks(svc);
    udp = await openUdp();
    const at = (k: number, v: number | null) => {
      const x = interleaved(k * N);
      if (v !== null) x[5] = v;
      return encodeFrame(header(k, k * N, 'float32'), x);
    };
    // Frame 1 carries the 3e38 samples of the issue; frame 3 −3e38; frames 2 and 4 the bound itself.
    const frames = [at(0, null), at(1, 3e38), at(2, 1000), at(3, -3e38), at(4, -1000), at(5, null)];
    for (const f of frames) await sendUdp(udp, svc.udpPort!, f);
    await waitFor(() => svc!.hub!.status()[0]?.framesAccepted === 4, 3000, 'the four acceptable frames');
    svc.hub!.flush();
    const st = await getStatus(svc);
    expect(st.streams[0].rejected).toMatchObject({ beyond_bound: 2, non_finite: 0 });
    // Refused frames leave a gap of their length (zeros), as any lost frame does.
    expect(st.streams[0]).toMatchObject({ framesAccepted: 4, framesLost: 2, gapSamples: 2 * N });
    expect(st.ingest.lastRejected).toMatchObject({ reason: 'beyond_bound', transport: 'udp', streamId: 11 });
    expect(st.ingest.lastRejected.detail).toMatch(/60 dBFS/);
    const t = timeline(blocks);
    expect(t.values[1][2 * N + 1]).toBe(1000); // sample 1, channel 1 of frame 2 (x[5], M = 4)
    expect(t.values[1][4 * N + 1]).toBe(-1000);
    expect(t.gap[N]).toBe(true);
  });

  it('counts text and oversize WebSocket messages, closing with 1009 on oversize', async () => {
    svc = await startTestService({ ingest: { websocket: { maxMessageBytes: 4096 } } });
    const blocks = collectBlocks(svc);
    const url = `${svc.url.replace('http', 'ws')}/ingest`;
    const ws = new WebSocket(url);
    await new Promise((r, j) => ws.once('open', r).once('error', j));
    ws.send('hello');
    ws.send(encodeFrame(header(0, 0, 'int16'), interleaved(0)));
    const closed = new Promise<number>((r) => ws.once('close', (code) => r(code)));
    ws.send(new Uint8Array(5000));
    expect(await closed).toBe(1009);
    await waitFor(() => blocks.length > 0, 2000, 'the good frame');
    const st = await getStatus(svc);
    expect(st.ingest.rejected).toMatchObject({ not_binary: 1, too_large: 1 });
    expect(st.streams[0]).toMatchObject({ framesAccepted: 1, transport: 'websocket' });
    // A wrong path is refused at the upgrade.
    const other = new WebSocket(`${svc.url.replace('http', 'ws')}/nowhere`);
    const err = await new Promise<Error>((r) => other.once('error', r));
    expect(err.message).toMatch(/404/);
  });

  it('only the selected stream feeds the block stream; others are counted', async () => {
    svc = await startTestService({ input: { streamId: 5 } });
    const blocks = collectBlocks(svc);
    udp = await openUdp();
    for (let k = 0; k < 3; k++) {
      await sendUdp(udp, svc.udpPort!, encodeFrame(header(k, k * N, 'int16', { streamId: 9 }), interleaved(k * N)));
      await sendUdp(udp, svc.udpPort!, encodeFrame(header(k, k * N, 'int16', { streamId: 5 }), interleaved(k * N)));
    }
    await waitFor(() => blocks.length >= 3, 2000, 'stream 5');
    await sleep(30);
    expect(blocks.every((b) => b.streamId === 5)).toBe(true);
    const st = await getStatus(svc);
    const byId = Object.fromEntries(st.streams.map((s: any) => [s.streamId, s]));
    expect(byId[9]).toMatchObject({ selected: false, framesAccepted: 3 });
    expect(byId[5]).toMatchObject({ selected: true, framesAccepted: 3 });
    expect(st.input.selectedStreamId).toBe(5);
  });
});
