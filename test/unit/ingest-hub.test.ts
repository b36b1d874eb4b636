/**
 * The hub's batch path (what the UDP receive queue uses): inside a batch the selected stream's
 * next frames are decoded straight into one block being assembled. The property checked: for the
 * same datagrams, batched or one by one, the published timeline (every sample, gap and flag) and
 * every counter are identical, and batched blocks stay within COALESCE_FRAMES.
 */
import { describe, expect, it } from 'vitest';
import { encodeFrame, type SampleEncoding } from '../../shared/frame.ts';
import type { Block } from '../../shared/types.ts';
import { COALESCE_FRAMES, IngestHub } from '../../server/ingest/ingest-hub.ts';
import { DEFAULT_SEQUENCER_OPTIONS } from '../../server/ingest/sequencer.ts';
import { mulberry32 } from '../helpers/random.ts';

const FS = 48000;

/** Datagrams of a stream with loss, local reordering, duplicates, a refused frame and a restart. */
function datagrams(m: number, n: number, encoding: SampleEncoding, seed: number): { bytes: Uint8Array; atMs: number }[] {
  const r = mulberry32(seed);
  const out: { bytes: Uint8Array; atMs: number }[] = [];
  const frame = (seq: number, first: number, bad = false) => {
    const x = new Float32Array(m * n);
    for (let i = 0; i < x.length; i++) x[i] = Math.fround(0.9 * Math.sin(0.001 * (first * m + i) + seed));
    if (bad) x[1] = 1e9; // beyond +60 dBFS
    return encodeFrame({ streamId: 5, sequence: seq, firstSample: first, sampleRateHz: FS, channels: m, samplesPerChannel: n, encoding }, x);
  };
  const order: number[] = [];
  const count = n > COALESCE_FRAMES ? 300 : 1500;
  for (let k = 0; k < count; k++) if (k < 3 || r() > 0.03) order.push(k);
  for (let i = 5; i + 2 < order.length; i += 7) if (r() < 0.5) [order[i], order[i + 2]] = [order[i + 2], order[i]];
  let t = 0;
  for (const k of order) {
    t += (n / FS) * 1000 * 0.5; // twice real time
    out.push({ bytes: frame(k, 1000 + k * n, encoding === 'float32' && k % 97 === 50), atMs: t });
    if (r() < 0.02) out.push({ bytes: frame(k, 1000 + k * n), atMs: t });
  }
  // The sender restarts its clock: two consecutive frames agree on a new position.
  for (let k = 0; k < 200; k++) out.push({ bytes: frame(5000 + k, 7_000_000 + k * n), atMs: (t += (n / FS) * 500) });
  return out;
}

function run(m: number, n: number, encoding: SampleEncoding, seed: number, batchSize: number) {
  const blocks: Block[] = [];
  const hub = new IngestHub({ sampleRateHz: FS, channels: m, encodings: [encoding], maxFloatLevelDbfs: 60, streamId: null, maxStreams: 4, sequencer: DEFAULT_SEQUENCER_OPTIONS }, (b) => blocks.push(b), 0);
  const d = datagrams(m, n, encoding, seed);
  for (let i = 0; i < d.length; i += batchSize) {
    const part = d.slice(i, i + batchSize);
    const feed = () => part.forEach((x) => hub.receive(x.bytes, 'udp', 'test', x.atMs));
    if (batchSize > 1) hub.batch(feed);
    else feed();
    hub.tick(part[part.length - 1].atMs);
  }
  hub.flush();
  // The timeline as samples per channel, gap flags per sample, discontinuity positions.
  const samples: number[][] = Array.from({ length: m }, () => []);
  const gaps: boolean[] = [];
  const breaks: number[] = [];
  for (const b of blocks) {
    if (b.discontinuity) breaks.push(b.sampleIndex);
    for (let c = 0; c < m; c++) for (let i = 0; i < b.frames; i++) samples[c].push(b.data[c * b.frames + i]);
    for (let i = 0; i < b.frames; i++) gaps.push(b.gap);
  }
  const { lastFrameAgoS, inputRateHz, ...status } = hub.status(1e9)[0];
  return { blocks, samples, gaps, breaks, status, ingest: { messages: hub.messages, rejected: hub.rejected } };
}

describe('IngestHub batches', () => {
  for (const [m, n, encoding] of [
    [24, 30, 'int16'],
    [256, 2, 'int16'],
    [4, 120, 'float32'],
    [2, 1200, 'int24'], // frames longer than COALESCE_FRAMES go through unjoined
  ] as const) {
    it(`publish the same timeline and counts batched as one by one (${m} channels × ${n} ${encoding})`, () => {
      const one = run(m, n, encoding, 7, 1);
      const batched = run(m, n, encoding, 7, 64);
      expect(batched.status).toEqual(one.status);
      expect(batched.ingest).toEqual(one.ingest);
      expect(batched.breaks).toEqual(one.breaks);
      expect(batched.gaps).toEqual(one.gaps);
      for (let c = 0; c < m; c++) expect(batched.samples[c]).toEqual(one.samples[c]);
      // Something happened: loss, duplicates, reordering and the restart are all in the counts.
      expect(one.status).toMatchObject({ resyncs: 1 });
      expect(one.status.framesLost).toBeGreaterThan(3);
      expect(one.status.framesDuplicated).toBeGreaterThan(2);
      expect(one.status.framesReordered).toBeGreaterThan(5);
      if (encoding === 'float32') expect(one.status.rejected.beyond_bound).toBeGreaterThan(10);
      // Batches join frames (fewer, longer blocks), never beyond COALESCE_FRAMES unless one frame is longer.
      if (n < COALESCE_FRAMES) expect(batched.blocks.length).toBeLessThan(one.blocks.length);
      else expect(batched.blocks.length).toBe(one.blocks.length);
      for (const b of batched.blocks) expect(b.frames).toBeLessThanOrEqual(Math.max(COALESCE_FRAMES, n, DEFAULT_SEQUENCER_OPTIONS.maxGapBlockFrames));
    });
  }
});
