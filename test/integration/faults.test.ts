/**
 * Network faults through UDP on 127.0.0.1 into a running service. Each case checks the timeline rule
 * on the published block stream — contiguous on the selected stream's sample clock, gaps are zero
 * blocks of exactly the missing length, a clock jump beyond ingest.maxGapSeconds is a block flagged
 * `discontinuity` — and that GET /api/status reports what happened.
 */
import { createSocket, type Socket } from 'node:dgram';
import { afterEach, describe, expect, it } from 'vitest';
import { encodeFrame } from '../../shared/frame.ts';
import type { Block } from '../../shared/types.ts';
import type { Service } from '../../server/service.ts';
import { collectBlocks, getStatus, sleep, startTestService, waitFor } from '../helpers/service.ts';

const M = 4;
const FS = 48000;
const N = 120;
const START = 10_000_000; // far (> maxGap = 10 s × 48 kHz) from 0

let svc: Service | null = null;
let udp: Socket | null = null;
afterEach(async () => {
  udp?.close();
  udp = null;
  await svc?.close();
  svc = null;
});

/** Exactly representable float32 test signal. */
function value(s: number, c: number): number {
  return Math.fround(0.5 * Math.sin(0.0123 * s + c) + 0.01 * c);
}

interface F {
  seq: number;
  first: number;
  id?: number;
  rate?: number;
}

function frame(f: F): Uint8Array {
  const x = new Float32Array(N * M);
  for (let i = 0; i < N; i++) for (let c = 0; c < M; c++) x[i * M + c] = value(f.first + i, c);
  return encodeFrame({ streamId: f.id ?? 1, sequence: f.seq, firstSample: f.first, sampleRateHz: f.rate ?? FS, channels: M, samplesPerChannel: N, encoding: 'float32' }, x);
}

/** Frames k ∈ [from, to) of a stream: sequence k, first sample start + k·N. */
function run(from: number, to: number, start = START, extra: Partial<F> = {}): F[] {
  return Array.from({ length: to - from }, (_, j) => ({ seq: from + j, first: start + (from + j) * N, ...extra }));
}

async function send(frames: F[]): Promise<void> {
  if (!udp) {
    udp = createSocket('udp4');
    await new Promise<void>((r) => udp!.bind(0, '127.0.0.1', () => r()));
  }
  for (let i = 0; i < frames.length; i++) {
    await new Promise<void>((resolve, reject) => udp!.send(frame(frames[i]), svc!.udpPort!, '127.0.0.1', (e) => (e ? reject(e) : resolve())));
    if (i % 40 === 39) await sleep(2); // stay well inside the socket buffer
  }
}

const total = (blocks: Block[]) => blocks.reduce((n, b) => n + b.frames, 0);

interface Segment {
  start: number;
  end: number;
  /** Gap ranges [start, end) in this segment. */
  gaps: [number, number][];
}

/**
 * Check the timeline rule and return its segments (a new one at each discontinuity). Data blocks
 * must carry the exact test signal; gap blocks must be all zeros.
 */
function timeline(blocks: Block[]): Segment[] {
  const segs: Segment[] = [];
  let cur: Segment | null = null;
  for (const b of blocks) {
    expect(b.channels).toBe(M);
    expect(b.data.length).toBe(b.frames * M);
    if (cur === null || b.discontinuity) {
      if (cur) expect(b.sampleIndex).not.toBe(cur.end);
      cur = { start: b.sampleIndex, end: b.sampleIndex, gaps: [] };
      segs.push(cur);
    }
    expect(b.sampleIndex, 'contiguous').toBe(cur.end);
    if (b.gap) {
      expect(b.data.every((v) => v === 0)).toBe(true);
      const last = cur.gaps[cur.gaps.length - 1];
      if (last && last[1] === b.sampleIndex) last[1] += b.frames;
      else cur.gaps.push([b.sampleIndex, b.sampleIndex + b.frames]);
    } else {
      for (let i = 0; i < b.frames; i++) {
        for (let c = 0; c < M; c++) {
          const v = b.data[c * b.frames + i];
          if (v !== value(b.sampleIndex + i, c)) expect(v, `sample ${b.sampleIndex + i} ch ${c}`).toBe(value(b.sampleIndex + i, c));
        }
      }
    }
    cur.end += b.frames;
  }
  return segs;
}

describe('network faults', () => {
  it('a burst of 50 lost frames becomes one zero gap of exactly 50 × n samples', async () => {
    svc = await startTestService();
    const blocks = collectBlocks(svc);
    await send([...run(0, 30), ...run(80, 120)]);
    await waitFor(() => total(blocks) >= 120 * N, 3000, 'the timeline');
    expect(timeline(blocks)).toEqual([{ start: START, end: START + 120 * N, gaps: [[START + 30 * N, START + 80 * N]] }]);
    const st = await getStatus(svc);
    expect(st.streams).toHaveLength(1);
    expect(st.streams[0]).toMatchObject({ framesAccepted: 70, samplesAccepted: 70 * N, framesLost: 50, gaps: 1, gapSamples: 50 * N, framesLate: 0, resyncs: 0, nextSample: START + 120 * N });
    expect(st.timeline).toMatchObject({ samples: 120 * N, gapSamples: 50 * N, discontinuities: 0 });
  });

  it('a 2 s gap (below maxGapSeconds) is zero-filled to the exact length', async () => {
    svc = await startTestService();
    const blocks = collectBlocks(svc);
    const missing = (2 * FS) / N; // 800 frames = 96 000 samples
    // A real outage: the sender is silent for the 2 s its frames would have taken.
    await send(run(0, 50));
    await sleep(2000);
    await send(run(50 + missing, 100 + missing));
    await waitFor(() => total(blocks) >= (100 + missing) * N, 3000, 'the timeline');
    const segs = timeline(blocks);
    expect(segs).toEqual([{ start: START, end: START + (100 + missing) * N, gaps: [[START + 50 * N, START + 50 * N + 2 * FS]] }]);
    // Split into blocks of at most 4096 samples per channel.
    expect(blocks.filter((b) => b.gap).every((b) => b.frames <= 4096)).toBe(true);
    const st = await getStatus(svc);
    expect(st.streams[0]).toMatchObject({ framesAccepted: 100, framesLost: missing, gaps: 1, gapSamples: 2 * FS, resyncs: 0 });
    expect(st.streams[0].rejected.out_of_range).toBe(0);
    expect(st.timeline).toMatchObject({ gapSamples: 2 * FS, discontinuities: 0 });
  });

  it('a sender restarting with a new stream id is tracked separately; the first stream stays selected', async () => {
    // input.streamId is null (default): the first stream with an accepted frame feeds processing and
    // keeps doing so; the new id is sequenced and counted, not processed.
    svc = await startTestService();
    const blocks = collectBlocks(svc);
    await send(run(0, 40, START, { id: 1 }));
    await waitFor(() => total(blocks) >= 40 * N, 3000, 'stream 1');
    await send(run(0, 40, 0, { id: 2 }));
    await waitFor(() => svc!.hub!.status().find((s) => s.streamId === 2)?.framesAccepted === 40, 3000, 'stream 2 counted');
    await sleep(60);
    expect(blocks.every((b) => b.streamId === 1)).toBe(true);
    expect(timeline(blocks)).toEqual([{ start: START, end: START + 40 * N, gaps: [] }]);
    const st = await getStatus(svc);
    expect(st.input.selectedStreamId).toBe(1);
    const byId = Object.fromEntries(st.streams.map((s: any) => [s.streamId, s]));
    expect(Object.keys(byId).sort()).toEqual(['1', '2']);
    expect(byId[1]).toMatchObject({ selected: true, framesAccepted: 40, nextSample: START + 40 * N });
    expect(byId[2]).toMatchObject({ selected: false, framesAccepted: 40, firstSample: 0, nextSample: 40 * N, framesLost: 0 });
    expect(st.timeline).toMatchObject({ samples: 40 * N, discontinuities: 0 });
  });

  it('a sequence reset with the sample index continuing is accepted without loss', async () => {
    svc = await startTestService();
    const blocks = collectBlocks(svc);
    // Sequence 0..49, then 0..49 again, while the sample index continues 0..99 frames.
    await send([...run(0, 50), ...run(0, 50).map((f) => ({ seq: f.seq, first: f.first + 50 * N }))]);
    await waitFor(() => total(blocks) >= 100 * N, 3000, 'the timeline');
    expect(timeline(blocks)).toEqual([{ start: START, end: START + 100 * N, gaps: [] }]);
    const st = await getStatus(svc);
    expect(st.streams[0]).toMatchObject({ framesAccepted: 100, samplesAccepted: 100 * N, framesLost: 0, gaps: 0, framesDuplicated: 0, framesLate: 0, framesReordered: 0, resyncs: 0 });
    expect(st.streams[0].rejected.out_of_range).toBe(0);
  });

  it('frames at another sample rate are rejected as rate_mismatch; the good frames around them continue', async () => {
    svc = await startTestService();
    const blocks = collectBlocks(svc);
    // The sender switches to 44.1 kHz for 10 frames, then back: those positions become a gap.
    await send([...run(0, 30), ...run(30, 40, START, { rate: 44100 }), ...run(40, 80)]);
    await waitFor(() => total(blocks) >= 80 * N, 3000, 'the timeline');
    expect(timeline(blocks)).toEqual([{ start: START, end: START + 80 * N, gaps: [[START + 30 * N, START + 40 * N]] }]);
    const st = await getStatus(svc);
    expect(st.streams[0].rejected).toMatchObject({ rate_mismatch: 10, channel_mismatch: 0, encoding_mismatch: 0, non_finite: 0, out_of_range: 0 });
    expect(st.streams[0]).toMatchObject({ framesAccepted: 70, framesLost: 10, gapSamples: 10 * N });
    expect(st.ingest.lastRejected).toMatchObject({ reason: 'rate_mismatch', transport: 'udp', streamId: 1 });
    expect(st.ingest.lastRejected.detail).toMatch(/44100/);
    expect(st.ingest.lastRejected.detail).toMatch(/48000/);
  });

  it('a single stray frame far ahead is dropped as out_of_range; the timeline is unaffected', async () => {
    svc = await startTestService();
    const blocks = collectBlocks(svc);
    await send([...run(0, 30), { seq: 30, first: START + 30 * N + 100 * FS }, ...run(30, 60)]);
    await waitFor(() => total(blocks) >= 60 * N, 3000, 'the timeline');
    await sleep(60);
    expect(timeline(blocks)).toEqual([{ start: START, end: START + 60 * N, gaps: [] }]);
    const st = await getStatus(svc);
    expect(st.streams[0].rejected.out_of_range).toBe(1);
    expect(st.streams[0]).toMatchObject({ framesAccepted: 60, framesLost: 0, gaps: 0, resyncs: 0, nextSample: START + 60 * N });
    expect(st.ingest.lastRejected).toMatchObject({ reason: 'out_of_range', streamId: 1 });
    expect(st.timeline).toMatchObject({ samples: 60 * N, gapSamples: 0, discontinuities: 0 });
  });

  it('a stray far-off frame among the opening frames is dropped, not zero-filled up to', async () => {
    // Before the stream has a clock the first frames wait together; one of them near 2^53 must not
    // become the target of a zero fill of ~9·10^15 samples.
    svc = await startTestService();
    const blocks = collectBlocks(svc);
    await send([...run(0, 2), { seq: 2, first: 2 ** 53 - 10_000 }, ...run(2, 30)]);
    await waitFor(() => total(blocks) >= 30 * N, 3000, 'the timeline');
    await sleep(60);
    expect(timeline(blocks)).toEqual([{ start: START, end: START + 30 * N, gaps: [] }]);
    const st = await getStatus(svc);
    expect(st.streams[0].rejected.out_of_range).toBe(1);
    expect(st.streams[0]).toMatchObject({ framesAccepted: 30, gaps: 0, gapSamples: 0, resyncs: 0, nextSample: START + 30 * N });
    expect(st.timeline).toMatchObject({ samples: 30 * N, gapSamples: 0, discontinuities: 0 });
  });

  it('20 frames each ~479 000 samples ahead (under maxGapSeconds) in no time are refused, not zero-filled', async () => {
    // Issue 12, item 4: these made 200 s of zeros (a 308 MB recording). The wall clock has not
    // passed, so none may be filled up to (tolerance ingest.jumpToleranceSeconds = 1 s).
    svc = await startTestService();
    const blocks = collectBlocks(svc);
    // Between live frames: each ~479 000 samples ahead of the stream, none continuing another.
    const ahead = (j: number): F => ({ seq: 5000 + 2 * j, first: START + 30 * N + 479_000 - 101 * j });
    await send([...run(0, 30), ...Array.from({ length: 20 }, (_, j) => [ahead(j), ...run(30 + j, 31 + j)]).flat(), ...run(50, 80)]);
    await waitFor(() => total(blocks) >= 80 * N, 3000, 'the timeline');
    await sleep(60);
    expect(timeline(blocks)).toEqual([{ start: START, end: START + 80 * N, gaps: [] }]);
    const st = await getStatus(svc);
    expect(st.streams[0].rejected).toMatchObject({ ahead_of_clock: 20, out_of_range: 0, resync_limited: 0 });
    expect(st.streams[0]).toMatchObject({ framesAccepted: 80, gaps: 0, gapSamples: 0, resyncs: 0, nextSample: START + 80 * N });
    expect(st.ingest.lastRejected).toMatchObject({ reason: 'ahead_of_clock', streamId: 1 });
    expect(st.timeline).toMatchObject({ samples: 80 * N, gapSamples: 0, discontinuities: 0 });
  });

  it('200 pairs of far-off frames make at most ingest.resyncLimit resyncs; the rest are dropped and a storm reported', async () => {
    // Issue 12, item 4: these made 380 resyncs (783 recording files). Each pair agrees on a new
    // position, and the live stream answers by agreeing on its own again.
    svc = await startTestService({ ingest: { resyncLimit: 4, resyncWindowSeconds: 30 } });
    const blocks = collectBlocks(svc);
    const frames: F[] = [...run(0, 50)];
    for (let p = 0; p < 200; p++) {
      const at = START + 1_000_000_000 + p * 10_000_000;
      frames.push({ seq: 7_000_000 + 2 * p, first: at }, { seq: 7_000_001 + 2 * p, first: at + N }, ...run(50 + 2 * p, 52 + 2 * p));
    }
    await send(frames);
    await waitFor(async () => (await getStatus(svc!)).ingest.messages >= frames.length, 5000, 'every datagram');
    svc.hub!.flush();
    const st = await getStatus(svc);
    const s0 = st.streams[0];
    // Pair 0 and pair 1 each take the stream away and the live stream takes it back: 4 resyncs;
    // the 198 later pairs (396 frames) are dropped; every live frame is accepted.
    expect(s0).toMatchObject({ resyncs: 4, framesAccepted: 50 + 400 + 4, framesLost: 0, gapSamples: 0 });
    expect(s0.rejected).toMatchObject({ resync_limited: 396, out_of_range: 0, ahead_of_clock: 0 });
    expect(s0.resyncStorm).toMatchObject({ framesDropped: 396 });
    expect(s0.resyncStorm.sinceS).toBeLessThanOrEqual(s0.resyncStorm.lastS);
    expect(blocks.filter((b) => b.discontinuity)).toHaveLength(4);
    expect(st.timeline.discontinuities).toBe(4);
    expect(st.ingest.lastRejected).toMatchObject({ reason: 'resync_limited', streamId: 1 });
    // Every frame sent is in exactly one counter.
    expect(s0.framesAccepted + s0.rejected.resync_limited).toBe(frames.length);
  });

  it('a sender restarting its clock at 0 resynchronises: a discontinuity block, counted in resyncs', async () => {
    svc = await startTestService();
    const blocks = collectBlocks(svc);
    await send(run(0, 30));
    await waitFor(() => total(blocks) >= 30 * N, 3000, 'before the restart');
    await send(run(0, 30, 0));
    await waitFor(() => total(blocks) >= 60 * N, 3000, 'after the restart');
    await sleep(60);
    expect(timeline(blocks)).toEqual([
      { start: START, end: START + 30 * N, gaps: [] },
      { start: 0, end: 30 * N, gaps: [] },
    ]);
    expect(blocks.filter((b) => b.discontinuity).map((b) => b.sampleIndex)).toEqual([0]);
    const st = await getStatus(svc);
    expect(st.streams).toHaveLength(1);
    expect(st.streams[0]).toMatchObject({ framesAccepted: 60, samplesAccepted: 60 * N, framesLost: 0, gaps: 0, resyncs: 1, nextSample: 30 * N });
    expect(st.streams[0].rejected.out_of_range).toBe(0); // the first frame of the new clock was kept
    expect(st.timeline).toMatchObject({ samples: 60 * N, gapSamples: 0, discontinuities: 1 });
  });
});
