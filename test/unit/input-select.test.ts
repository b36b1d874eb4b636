/**
 * Which own-format stream is processed (input.select). Time is simulated: every frame and tick
 * carries its arrival time, so the choices are checked on the hub's own clock, never the test's.
 */
import { describe, expect, it } from 'vitest';
import { encodeFrame } from '../../shared/frame.ts';
import type { Block } from '../../shared/types.ts';
import { IngestHub, type SelectionOptions, type StreamSwitch } from '../../server/ingest/ingest-hub.ts';
import { DEFAULT_SEQUENCER_OPTIONS } from '../../server/ingest/sequencer.ts';

const FS = 48000;
const M = 2;
const N = 240; // 5 ms frames

function frame(streamId: number, seq: number, first: number): Uint8Array {
  const x = new Float32Array(M * N);
  for (let i = 0; i < N; i++) for (let c = 0; c < M; c++) x[i * M + c] = ((first + i) % 1000) / 1000 - 0.5 + c * 0.01;
  return encodeFrame({ streamId, sequence: seq, firstSample: first, sampleRateHz: FS, channels: M, samplesPerChannel: N, encoding: 'float32' }, x);
}

function hub(selection: SelectionOptions, streamId: number | null = null) {
  const blocks: Block[] = [];
  const switches: StreamSwitch[] = [];
  const h = new IngestHub(
    { sampleRateHz: FS, channels: M, encodings: ['float32'], maxFloatLevelDbfs: 60, streamId, maxStreams: 8, sequencer: DEFAULT_SEQUENCER_OPTIONS, selection, onSwitch: (s) => switches.push(s) },
    (b) => blocks.push(b),
    0,
  );
  return { h, blocks, switches };
}

/** A sender at real time: `count` frames of stream `id` from sample `first`, arriving from `t0Ms`, ticking between. */
function send(h: IngestHub, id: number, first: number, count: number, t0Ms: number, seq0 = 0): number {
  let t = t0Ms;
  for (let k = 0; k < count; k++) {
    t = t0Ms + (k * N * 1000) / FS;
    h.receive(frame(id, seq0 + k, first + k * N), 'udp', 'test', t);
    h.tick(t);
  }
  return t;
}

const LATEST: SelectionOptions = { mode: 'latest-active', eligibleAfterSamples: 4800, switchAfterMs: 2000 };

describe('processed stream selection', () => {
  it('a stray datagram of another id before the real sender never takes over; the sender is processed from its first sample', () => {
    const { h, blocks, switches } = hub(LATEST);
    h.receive(frame(99, 0, 123_456), 'udp', 'stray', 0);
    h.tick(1);
    expect(h.selectedStream).toBeNull();
    send(h, 5, 1000, 200, 10); // 1 s
    h.flush();
    expect(h.selectedStream).toBe(5);
    expect(switches).toEqual([{ from: null, to: 5, reason: 'first', atS: expect.any(Number) }]);
    // Every sample of stream 5, none of 99: the opening 100 ms waited and were processed first.
    expect(blocks.every((b) => b.streamId === 5)).toBe(true);
    expect(blocks[0].sampleIndex).toBe(1000);
    expect(blocks.reduce((n, b) => n + b.frames, 0)).toBe(200 * N);
    const st = h.status(2000);
    expect(st.find((s) => s.streamId === 99)).toMatchObject({ eligible: false, selected: false });
  });

  it('a stream is chosen only after eligibleAfterSamples of consecutive valid samples (100 ms = 4800 at 48 kHz)', () => {
    const { h } = hub(LATEST);
    send(h, 5, 0, 19, 0); // 19 × 240 = 4560 < 4800
    expect(h.selectedStream).toBeNull();
    send(h, 5, 19 * N, 1, 100, 19); // 4800
    expect(h.selectedStream).toBe(5);
  });

  it('a sender restarting under a new id is processed once the old one has been silent switchAfterMs; the switch is a discontinuity', () => {
    const { h, blocks, switches } = hub(LATEST);
    const end = send(h, 5, 0, 200, 0); // stream 5 for 1 s, then gone
    const restartMs = end + 50;
    // The sender comes back under id 6 with a new clock; frames every 5 ms.
    let t = restartMs;
    let k = 0;
    while (h.selectedStream !== 6 && k < 2000) {
      t = restartMs + (k * N * 1000) / FS;
      h.receive(frame(6, k, 7_000_000 + k * N), 'udp', 'test', t);
      h.tick(t);
      k++;
    }
    expect(h.selectedStream).toBe(6);
    const sw = switches.at(-1)!;
    expect(sw).toMatchObject({ from: 5, to: 6, reason: 'silent' });
    // Switched when stream 5 had been silent 2 s (its last frame arrived at `end`), well within 2.5 s of the restart.
    expect(sw.atS * 1000 - end).toBeGreaterThanOrEqual(2000);
    expect(sw.atS * 1000 - restartMs).toBeLessThanOrEqual(2500);
    h.flush();
    const firstOf6 = blocks.find((b) => b.streamId === 6)!;
    expect(firstOf6.discontinuity).toBe(true);
    // What waited is the latest ≥ 100 ms of stream 6, contiguous up to the switch.
    const six = blocks.filter((b) => b.streamId === 6);
    for (let i = 1; i < six.length; i++) expect(six[i].sampleIndex).toBe(six[i - 1].sampleIndex + six[i - 1].frames);
    expect(six.at(-1)!.sampleIndex + six.at(-1)!.frames).toBe(7_000_000 + k * N);
    expect(six.reduce((n, b) => n + b.frames, 0)).toBeGreaterThanOrEqual(4800);
  });

  it('no switch while the processed stream keeps sending, whatever another sends', () => {
    const { h, switches } = hub(LATEST);
    for (let k = 0; k < 1000; k++) {
      const t = (k * N * 1000) / FS;
      h.receive(frame(5, k, k * N), 'udp', 'a', t);
      if (k > 100) h.receive(frame(6, k, 5_000_000 + k * N), 'udp', 'b', t);
      h.tick(t);
    }
    expect(h.selectedStream).toBe(5);
    expect(switches.map((s) => s.to)).toEqual([5]);
  });

  it('a silent processed stream is not replaced by one that is not eligible', () => {
    const { h } = hub(LATEST);
    const end = send(h, 5, 0, 100, 0);
    // Stray single frames of id 7 every second for 5 s: never 100 ms in a row.
    for (let s = 1; s <= 5; s++) {
      h.receive(frame(7, s, s * 48000), 'udp', 'stray', end + s * 1000);
      h.tick(end + s * 1000 + 1);
    }
    expect(h.selectedStream).toBe(5);
  });

  it('pinned: only input.streamId is processed', () => {
    const { h, blocks } = hub({ mode: 'pinned', eligibleAfterSamples: 4800, switchAfterMs: 2000 }, 8);
    send(h, 5, 0, 400, 0);
    send(h, 8, 0, 10, 3000);
    h.flush();
    expect(h.selectedStream).toBe(8);
    expect(blocks.every((b) => b.streamId === 8)).toBe(true);
    expect(blocks.reduce((n, b) => n + b.frames, 0)).toBe(10 * N);
  });

  it('a manual choice switches at once and flags the discontinuity; unknown ids are refused', () => {
    const { h, blocks, switches } = hub(LATEST);
    let t = 0;
    for (let k = 0; k < 100; k++) {
      t = (k * N * 1000) / FS;
      h.receive(frame(5, k, k * N), 'udp', 'a', t);
      h.receive(frame(6, k, 9_000_000 + k * N), 'udp', 'b', t);
      h.tick(t);
    }
    expect(h.selectedStream).toBe(5);
    expect(h.select(42, t)).toBe(false);
    expect(h.select(6, t)).toBe(true);
    expect(switches.at(-1)).toMatchObject({ from: 5, to: 6, reason: 'manual' });
    h.receive(frame(6, 100, 9_000_000 + 100 * N), 'udp', 'b', t + 5);
    h.flush();
    const first6 = blocks.findIndex((b) => b.streamId === 6);
    expect(blocks[first6].discontinuity).toBe(true);
    expect(blocks.slice(first6).every((b) => b.streamId === 6)).toBe(true);
  });
});
