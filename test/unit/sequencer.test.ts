import { describe, expect, it } from 'vitest';
import { DEFAULT_SEQUENCER_OPTIONS, Sequencer, type SequencedFrame } from '../../server/ingest/sequencer.ts';
import type { Block } from '../../shared/types.ts';
import { mulberry32 } from '../helpers/random.ts';

const M = 3;
const N = 64;

/** Known value of channel c at sample index s, never zero, so a zero means "filled". */
function value(s: number, c: number): number {
  return ((s * 7 + c * 13) % 997) / 1000 + 0.001;
}

function frame(seq: number, first: number, n = N): SequencedFrame {
  const data = new Float32Array(M * n);
  for (let c = 0; c < M; c++) for (let i = 0; i < n; i++) data[c * n + i] = value(first + i, c);
  return { sequence: seq >>> 0, firstSample: first, frames: n, data };
}

function collector() {
  const blocks: Block[] = [];
  return { blocks, sink: (b: Block) => blocks.push(b) };
}

/** Checks contiguity and returns the timeline as [channel][sample] plus which samples were gaps. */
function timeline(blocks: Block[]) {
  const start = blocks[0].sampleIndex;
  let next = start;
  const values: number[][] = Array.from({ length: M }, () => []);
  const gap: boolean[] = [];
  for (const b of blocks) {
    expect(b.sampleIndex).toBe(next);
    for (let i = 0; i < b.frames; i++) {
      for (let c = 0; c < M; c++) values[c].push(b.data[c * b.frames + i]);
      gap.push(b.gap);
    }
    next += b.frames;
  }
  return { start, end: next, values, gap };
}

describe('Sequencer', () => {
  it('passes an in-order stream through unchanged', () => {
    const { blocks, sink } = collector();
    const s = new Sequencer(1, 48000, M, DEFAULT_SEQUENCER_OPTIONS, sink);
    for (let k = 0; k < 100; k++) s.push(frame(k, 1000 + k * N), k);
    s.flush();
    const t = timeline(blocks);
    expect(t.start).toBe(1000);
    expect(t.end).toBe(1000 + 100 * N);
    expect(t.gap.every((g) => !g)).toBe(true);
    expect(t.values[2][N + 5]).toBeCloseTo(value(1000 + N + 5, 2), 6);
    expect(s.counters).toMatchObject({ framesAccepted: 100, samplesAccepted: 100 * N, framesLost: 0, framesDuplicated: 0, framesReordered: 0 });
  });

  it('fills lost frames with zeros of the exact length and counts loss, duplicates and reordering', () => {
    const total = 2000;
    const r = mulberry32(42);
    const lost = new Set<number>();
    for (let k = 1; k < total - 1; k++) if (r() < 0.05) lost.add(k);
    const order: number[] = [];
    for (let k = 0; k < total; k++) if (!lost.has(k)) order.push(k);
    // Swap neighbours within distance ≤ 3 (well inside the window of 8).
    for (let i = 0; i + 3 < order.length; i += 4) {
      if (r() < 0.3) [order[i], order[i + 3]] = [order[i + 3], order[i]];
    }
    // Expected reorder count, by the definition of RFC 4737 §3: a packet is reordered when its
    // sequence number is below the highest one seen before it.
    let reordered = 0;
    let maxSeen = -1;
    for (const k of order) {
      if (k < maxSeen) reordered++;
      else maxSeen = k;
    }
    expect(reordered).toBeGreaterThan(100);
    const sent: number[] = [];
    let dups = 0;
    for (const k of order) {
      sent.push(k);
      if (r() < 0.02) {
        sent.push(k);
        dups++;
      }
    }
    const { blocks, sink } = collector();
    const s = new Sequencer(7, 48000, M, DEFAULT_SEQUENCER_OPTIONS, sink);
    sent.forEach((k, i) => s.push(frame(k, k * N), i * 0.1));
    s.flush();

    const t = timeline(blocks);
    expect(t.start).toBe(0);
    expect(t.end).toBe(total * N);
    for (let k = 0; k < total; k++) {
      const i = k * N + 17;
      if (lost.has(k)) {
        expect(t.values[1][i]).toBe(0);
        expect(t.gap[i]).toBe(true);
      } else {
        expect(t.values[1][i]).toBeCloseTo(value(i, 1), 6);
        expect(t.gap[i]).toBe(false);
      }
    }
    expect(s.counters.framesLost).toBe(lost.size);
    expect(s.counters.gapSamples).toBe(lost.size * N);
    expect(s.counters.framesDuplicated).toBe(dups);
    expect(s.counters.framesAccepted).toBe(total - lost.size);
    expect(s.counters.samplesAccepted).toBe((total - lost.size) * N);
    expect(s.counters.framesReordered).toBe(reordered);
    expect(s.counters.framesLate).toBe(0);
  });

  it('releases held frames after the hold time and counts a frame that comes later as late', () => {
    const { blocks, sink } = collector();
    const s = new Sequencer(1, 48000, M, { ...DEFAULT_SEQUENCER_OPTIONS, reorderHoldMs: 40 }, sink);
    s.push(frame(0, 0), 0);
    s.tick(50); // starts the stream
    s.push(frame(2, 2 * N), 51);
    s.tick(80);
    expect(s.heldFrames).toBe(1);
    s.tick(95);
    expect(s.heldFrames).toBe(0);
    s.push(frame(1, N), 100); // too late: its range is already zeros
    expect(s.counters.framesLate).toBe(1);
    expect(s.counters.framesLost).toBe(1);
    const t = timeline(blocks);
    expect(t.end).toBe(3 * N);
    expect(t.values[0][N]).toBe(0);
  });

  it('sorts a reordered opening instead of dropping the first frames', () => {
    const { blocks, sink } = collector();
    const s = new Sequencer(1, 48000, M, DEFAULT_SEQUENCER_OPTIONS, sink);
    for (const k of [1, 0, 2, 3]) s.push(frame(k, 500 + k * N), 0);
    s.flush();
    const t = timeline(blocks);
    expect(t.start).toBe(500);
    expect(t.end).toBe(500 + 4 * N);
    expect(s.counters.framesReordered).toBe(1);
    expect(s.counters.framesDuplicated).toBe(0);
  });

  it('fills when the window overflows, in bounded gap blocks', () => {
    const { blocks, sink } = collector();
    const opts = { ...DEFAULT_SEQUENCER_OPTIONS, reorderWindowFrames: 4, maxGapBlockFrames: 50 };
    const s = new Sequencer(1, 48000, M, opts, sink);
    s.push(frame(0, 0), 0);
    s.flush();
    for (let k = 3; k < 8; k++) s.push(frame(k, k * N), 1); // frames 1 and 2 never come
    expect(s.heldFrames).toBe(0);
    const gapBlocks = blocks.filter((b) => b.gap);
    expect(gapBlocks.map((b) => b.frames)).toEqual([50, 50, 28]);
    expect(s.counters.framesLost).toBe(2);
    expect(timeline(blocks).end).toBe(8 * N);
  });

  it('keeps the new tail of a frame that overlaps emitted samples', () => {
    const { blocks, sink } = collector();
    const s = new Sequencer(1, 48000, M, DEFAULT_SEQUENCER_OPTIONS, sink);
    s.push(frame(0, 0), 0);
    s.flush();
    s.push(frame(1, N - 10, N), 1);
    const t = timeline(blocks);
    expect(t.end).toBe(2 * N - 10);
    expect(t.values[2][N + 3]).toBeCloseTo(value(N + 3, 2), 6);
    expect(s.counters.framesTrimmed).toBe(1);
  });

  it('drops one far-off frame but resynchronises when two consecutive frames agree', () => {
    const { blocks, sink } = collector();
    const opts = { ...DEFAULT_SEQUENCER_OPTIONS, maxGapSamples: 10_000 };
    const s = new Sequencer(1, 48000, M, opts, sink);
    for (let k = 0; k < 3; k++) s.push(frame(k, 100_000 + k * N), 0);
    s.flush();
    s.push(frame(99, 5_000_000), 1); // a stray: dropped
    s.push(frame(3, 100_000 + 3 * N), 2); // stream goes on
    expect(s.counters.outOfRange).toBe(1);
    // The sender restarts at zero.
    s.push(frame(0, 0), 3);
    s.push(frame(1, N), 3);
    s.push(frame(2, 2 * N), 3);
    s.flush();
    expect(s.counters.resyncs).toBe(1);
    expect(s.counters.outOfRange).toBe(1);
    const after = blocks.filter((b) => b.sampleIndex < 100_000);
    expect(after[0].discontinuity).toBe(true);
    expect(after[0].sampleIndex).toBe(0);
    expect(after.reduce((n, b) => n + b.frames, 0)).toBe(3 * N);
    expect(blocks.filter((b) => b.discontinuity)).toHaveLength(1);
  });

  it('treats sequence numbers modulo 2^32', () => {
    const { blocks, sink } = collector();
    const s = new Sequencer(1, 48000, M, DEFAULT_SEQUENCER_OPTIONS, sink);
    const base = 0xffff_fffe;
    s.push(frame(base, 0), 0);
    s.push(frame(base + 1, N), 0);
    s.push(frame(base + 3, 3 * N), 0); // base+2 (= 0 after the wrap) lost
    s.push(frame(base + 4, 4 * N), 0);
    s.flush();
    expect(s.counters.framesLost).toBe(1);
    expect(s.counters.framesReordered).toBe(0);
    expect(timeline(blocks).end).toBe(5 * N);
  });
});

/**
 * Zero-fill against the wall clock (issue 12, item 4). The arrival times passed as `nowMs` are the
 * wall clock; a stream at real time delivers fs samples per 1000 ms. Options: fs 48 kHz, tolerance
 * 1 s (48 000 samples), maxGap 10 s (480 000 samples), at most 4 resyncs in 30 s.
 */
describe('Sequencer: zero-fill bounded by the wall clock', () => {
  const FS = 48000;
  const opts = { ...DEFAULT_SEQUENCER_OPTIONS, maxGapSamples: 10 * FS, jumpToleranceSamples: FS, resyncLimit: 4, resyncWindowMs: 30_000 };
  /** Arrival time of a frame starting at sample s of a stream sent at `speed` × real time from t0. */
  const due = (s: number, speed = 1, t0 = 0) => t0 + (s / FS / speed) * 1000;
  /** Frames [from, to) of a contiguous real-time stream (sequence k, first sample k·N). */
  function realTime(s: Sequencer, from: number, to: number, speed = 1) {
    for (let k = from; k < to; k++) s.push(frame(k, k * N), due(k * N, speed));
  }
  /** Every frame the sequencer was given is in exactly one counter (or still held). */
  function accounted(s: Sequencer): number {
    const c = s.counters;
    return c.framesAccepted + c.framesDuplicated + c.framesLate + c.outOfRange + c.aheadOfClock + c.resyncLimited + s.heldFrames;
  }

  it('refuses 20 frames each ~479 000 samples ahead that arrive within milliseconds (no zero-fill)', () => {
    // The case of the issue: each jump is under maxGap (480 000), yet together they were 200 s of zeros.
    const { blocks, sink } = collector();
    const s = new Sequencer(1, FS, M, opts, sink);
    realTime(s, 0, 100);
    const t = due(100 * N);
    // Each 479 000 samples beyond the one before (the first within maxGap of the stream, the others
    // beyond it), then 20 more each ~479 000 ahead of the stream itself (all within maxGap).
    for (let j = 1; j <= 20; j++) s.push(frame(100 + j, 100 * N + j * 479_000), t + j);
    for (let j = 1; j <= 20; j++) s.push(frame(200 + 2 * j, 100 * N + 479_000 - 997 * j), t + 20 + j);
    realTime(s, 100, 200);
    s.flush();
    expect(s.counters).toMatchObject({ aheadOfClock: 21, outOfRange: 19, gaps: 0, gapSamples: 0, resyncs: 0, framesAccepted: 200 });
    expect(timeline(blocks)).toMatchObject({ start: 0, end: 200 * N });
    expect(accounted(s)).toBe(240);
  });

  it('zero-fills an outage of 2 s exactly when 2 s of wall clock passed', () => {
    const { blocks, sink } = collector();
    const s = new Sequencer(1, FS, M, opts, sink);
    realTime(s, 0, 50);
    const missing = (2 * FS) / N; // 1500 frames of 64 samples
    realTime(s, 50 + missing, 100 + missing);
    s.flush();
    expect(s.counters).toMatchObject({ gaps: 1, gapSamples: missing * N, framesLost: missing, resyncs: 0, aheadOfClock: 0 });
    expect(timeline(blocks).end).toBe((100 + missing) * N);
  });

  it('zero-fills a 5 s outage (beyond the tolerance, under maxGap) when the wall clock justifies it', () => {
    const { sink } = collector();
    const s = new Sequencer(1, FS, M, opts, sink);
    realTime(s, 0, 10);
    const missing = (5 * FS) / N;
    realTime(s, 10 + missing, 20 + missing);
    s.flush();
    expect(s.counters).toMatchObject({ gaps: 1, gapSamples: missing * N, resyncs: 0, aheadOfClock: 0 });
  });

  it('turns a confirmed jump the wall clock does not justify into a resynchronisation, not zeros', () => {
    const { blocks, sink } = collector();
    const s = new Sequencer(1, FS, M, opts, sink);
    realTime(s, 0, 50);
    // The sender skips 5 s ahead (under maxGap) in no time: 2 consecutive frames agree on it.
    const t = due(50 * N);
    const far = 50 * N + 5 * FS;
    for (let j = 0; j < 10; j++) s.push(frame(50 + j, far + j * N), t + j * 0.1);
    s.flush();
    expect(s.counters).toMatchObject({ resyncs: 1, gaps: 0, gapSamples: 0, aheadOfClock: 0, framesAccepted: 60 });
    const d = blocks.filter((b) => b.discontinuity);
    expect(d.map((b) => b.sampleIndex)).toEqual([far]);
  });

  it('bounds zero-fill by the data received: frames walking 0.9 s ahead each are refused after the tolerance', () => {
    // Each step is within the tolerance on its own; together they would outrun the wall clock.
    const { sink } = collector();
    const s = new Sequencer(1, FS, M, opts, sink);
    realTime(s, 0, 20);
    const t = due(20 * N);
    const step = 0.9 * FS;
    for (let j = 1; j <= 50; j++) s.push(frame(20 + j * 1000, 20 * N + j * step), t + j * 0.5);
    s.flush();
    // Zeros at most: wall clock passed (25 ms) + the tolerance (1 s) + 9 samples per data sample received.
    const bound = (0.025 * 1.02 + 1) * FS + 9 * 70 * N;
    expect(s.counters.gapSamples).toBeLessThanOrEqual(bound);
    expect(s.counters.gapSamples).toBeGreaterThan(0); // the first step is within the tolerance
    expect(s.counters.aheadOfClock).toBeGreaterThanOrEqual(9); // steps 2–11, until beyond maxGap
    expect(s.counters.aheadOfClock + s.counters.outOfRange).toBe(49);
    expect(accounted(s)).toBe(70);
  });

  it('accepts a contiguous replay at 10× real time in full, and zero-fills its 5 % loss exactly', () => {
    const { blocks, sink } = collector();
    const s = new Sequencer(1, FS, M, opts, sink);
    const total = 3000; // 4 s of signal in 0.4 s of wall clock
    const r = mulberry32(7);
    let lost = 0;
    for (let k = 0; k < total; k++) {
      if (k > 0 && k < total - 1 && r() < 0.05) {
        lost++;
        continue;
      }
      s.push(frame(k, k * N), due(k * N, 10));
    }
    s.flush();
    expect(s.counters).toMatchObject({ framesAccepted: total - lost, framesLost: lost, gapSamples: lost * N, resyncs: 0, aheadOfClock: 0, outOfRange: 0 });
    expect(timeline(blocks).end).toBe(total * N);
  });

  it('counts frames skipped at a resynchronisation as lost (sequence distance)', () => {
    const { sink } = collector();
    const s = new Sequencer(1, FS, M, opts, sink);
    realTime(s, 0, 30);
    // Frames 30–49 never arrive; 50… continue 3 s further on the sender's clock but at once on ours
    // (ahead of the wall clock, within maxGap): a resync, and the 20 frames skipped are lost.
    const t = due(30 * N);
    for (let k = 50; k < 60; k++) s.push(frame(k, k * N + 3 * FS), t + (k - 50) * 0.1);
    s.flush();
    expect(s.counters).toMatchObject({ resyncs: 1, framesLost: 20, gapSamples: 0, framesAccepted: 40 });
  });

  it('rate-limits resyncs: 200 pairs of far-off frames among a live stream make at most 4, and a storm is reported', () => {
    const { blocks, sink } = collector();
    const s = new Sequencer(1, FS, M, opts, sink);
    let k = 0;
    let t = 0;
    const live = (n: number) => {
      for (let j = 0; j < n; j++, k++) s.push(frame(k, k * N), (t = due(k * N)));
    };
    live(50);
    for (let p = 0; p < 200; p++) {
      // A pair: two consecutive frames agreeing on a far position (behind, beyond maxGap).
      const at = 1_000_000_000 + p * 10_000_000;
      s.push(frame(7_000_000 + 2 * p, at), t + 0.01);
      s.push(frame(7_000_000 + 2 * p + 1, at + N), t + 0.02);
      live(2);
    }
    s.flush();
    const c = s.counters;
    expect(c.resyncs).toBeLessThanOrEqual(4);
    expect(blocks.filter((b) => b.discontinuity).length).toBe(c.resyncs);
    expect(c.resyncLimited).toBeGreaterThan(0);
    expect(s.resyncStorm).not.toBeNull();
    expect(s.resyncStorm!.framesDropped).toBeGreaterThan(0);
    expect(accounted(s)).toBe(50 + 200 * 4);
  });

  it('zero-fills a 10× replay losing 83 % of its frames; one losing 95 % stops at the credit (ahead_of_clock)', () => {
    // Credit: 9 zero samples per data sample (losses up to 9/10 of the frames), at most 1 s banked.
    for (const keepEvery of [6, 20]) {
      const { sink } = collector();
      const s = new Sequencer(1, FS, M, opts, sink);
      let kept = 0;
      let lastMs = 0;
      for (let k = 0; k < 6000; k += k < 50 ? 1 : keepEvery, kept++) s.push(frame(k, k * N), (lastMs = due(k * N, 10)));
      s.flush();
      const c = s.counters;
      expect(c.resyncs, `1 in ${keepEvery}`).toBe(0);
      if (keepEvery === 6) {
        expect(c).toMatchObject({ aheadOfClock: 0, framesAccepted: kept, gapSamples: c.framesLost * N });
      } else {
        // Zeros at most: the wall clock (with its slack) + the 1 s tolerance + 9 per data sample.
        expect(c.gapSamples).toBeLessThanOrEqual((lastMs / 1000) * 1.02 * FS + FS + 9 * c.samplesAccepted);
        expect(c.aheadOfClock).toBeGreaterThan(0);
        expect(c.framesAccepted + c.aheadOfClock).toBe(kept);
      }
    }
  });

  it('during a storm leaves a timeline that has had no frame for window/limit, not sooner', () => {
    const { blocks, sink } = collector();
    const s = new Sequencer(1, FS, M, opts, sink);
    const restart = (base: number, at: number) => {
      for (let j = 0; j < 3; j++) s.push(frame(j, base + j * N), at + j * 0.1);
    };
    s.push(frame(0, 0), 0);
    s.flush();
    for (let r = 1; r <= 4; r++) restart(r * 20 * FS, r); // the limit: 4 in 30 s
    // A sender that jumped for good streams on at real time from 10 ms: refused until the old
    // timeline has been silent for 30 s / 4 = 7.5 s, then taken (the 5th resync).
    const base = 200 * FS;
    const t0 = 10;
    for (let k = 0; k < (10 * FS) / N; k++) s.push(frame(100 + k, base + k * N), t0 + (k * N * 1000) / FS);
    s.flush();
    expect(s.counters.resyncs).toBe(5);
    const lastOld = 4 + 0.2; // arrival of the last frame placed on the old timeline
    const firstTaken = Math.ceil(((lastOld + 7500 - t0) * FS) / 1000 / N); // first frame due at or after 7.5 s
    expect(s.counters.resyncLimited).toBe(firstTaken - 1); // the frame before it is the candidate it confirms
    expect(blocks[blocks.length - 1].sampleIndex + blocks[blocks.length - 1].frames).toBe(base + ((10 * FS) / N) * N);
  });

  it('allows resyncs again once the window has passed', () => {
    const { sink } = collector();
    const s = new Sequencer(1, FS, M, opts, sink);
    const restart = (base: number, at: number) => {
      for (let j = 0; j < 3; j++) s.push(frame(j, base + j * N), at + j * 0.1);
    };
    s.push(frame(0, 0), 0);
    s.flush();
    for (let r = 1; r <= 5; r++) restart(r * 20 * FS, r); // the 5th within the window: refused
    expect(s.counters.resyncs).toBe(4);
    expect(s.resyncStorm).not.toBeNull();
    restart(200 * FS, 40_000); // 40 s later
    expect(s.counters.resyncs).toBe(5);
  });
});
