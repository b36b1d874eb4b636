import { describe, expect, it } from 'vitest';
import { DEFAULT_SEQUENCER_OPTIONS, Sequencer, type SequencedFrame } from '../../server/ingest/sequencer.ts';
import type { Block } from '../../shared/types.ts';

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

/** Seeded PRNG (mulberry32) so the loss pattern is the same on every run. */
function rng(seed: number) {
  let a = seed >>> 0;
  return () => {
    a = (a + 0x6d2b79f5) >>> 0;
    let t = a;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
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
    const r = rng(42);
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
