/**
 * The live array check's capture (engine/array-check-runner.ts) with a hand-made block source: the
 * next N seconds are taken contiguous, a gap or a clock jump restarts the capture, the buffer bound
 * shortens the capture, and a second check while one runs is refused. The analysis runs inline
 * here (its numbers are tested in array-check.test.ts); the worker thread in the REST test.
 */
import { describe, expect, it } from 'vitest';
import { ArrayCheckError, ArrayCheckRunner } from '../../server/engine/array-check-runner.ts';
import type { Block, BlockSink } from '../../shared/types.ts';
import { faultyRing, RING, RING_FS, RING_M } from '../helpers/faulty-ring.ts';

function source() {
  const sinks = new Set<BlockSink>();
  return {
    subscribe: (s: BlockSink) => {
      sinks.add(s);
      return () => void sinks.delete(s);
    },
    get subscribers() {
      return sinks.size;
    },
    push: (b: Block) => sinks.forEach((s) => s(b)),
  };
}

const x = faultyRing(1 << 17);
/** Planar block of the ring's frames [from, from + n) at stream sample index `at`. */
function block(from: number, n: number, at = from, extra: Partial<Block> = {}): Block {
  const data = new Float32Array(RING_M * n);
  for (let c = 0; c < RING_M; c++) for (let i = 0; i < n; i++) data[c * n + i] = x[(from + i) * RING_M + c];
  return { streamId: 1, sampleIndex: at, sampleRateHz: RING_FS, channels: RING_M, frames: n, data, gap: false, discontinuity: false, ...extra };
}

const runner = (src: ReturnType<typeof source>, maxBytes?: number) =>
  new ArrayCheckRunner({ subscribe: src.subscribe, channels: RING_M, sampleRateHz: RING_FS, positions: () => RING, speedOfSoundMps: 343.2, bandHz: () => [300, 6000], inline: true, ...(maxBytes ? { maxBytes } : {}) });

describe('array-check runner', () => {
  it('takes the next contiguous seconds, restarting after a gap and after a clock jump', async () => {
    const src = source();
    const r = runner(src);
    const p = r.run({ azimuthDeg: 30, seconds: 0.5 });
    expect(r.running).toBe(true);
    await expect(r.run({})).rejects.toMatchObject({ failure: { kind: 'running' } });
    src.push(block(0, 4800));
    src.push({ ...block(4800, 480), gap: true, data: new Float32Array(RING_M * 480) }); // zeros standing for lost samples
    src.push(block(5280, 4800, 5280));
    src.push(block(10080, 4800, 90_000, { discontinuity: true })); // the sender restarted
    for (let k = 1; k <= 6; k++) src.push(block(10080 + 4800 * k, 4800, 90_000 + 4800 * k));
    const a = await p;
    expect(a.restarts).toBe(2);
    expect(a.sampleIndex).toBe(90_000);
    expect(a.seconds).toBe(0.5);
    expect(src.subscribers).toBe(0);
    expect(a.faults.map((f) => f.kind).sort()).toEqual(['inverted', 'misplaced', 'swapped']);
    expect(r.running).toBe(false);
    expect(r.checks).toBe(1);
  });

  it('shortens the capture to the buffer bound and says so', async () => {
    const src = source();
    // 8 channels × 4 bytes × 16384 frames = 512 KiB.
    const r = runner(src, 8 * 4 * 16384);
    const p = r.run({ azimuthDeg: 30, seconds: 2 });
    for (let k = 0; k < 5; k++) src.push(block(4800 * k, 4800));
    const a = await p;
    expect(a.seconds).toBeCloseTo(16384 / RING_FS, 9);
    expect(a.secondsRequested).toBe(2);
  });

  it('gives up after too many interruptions', async () => {
    const src = source();
    const r = runner(src);
    const p = r.run({ seconds: 1 });
    for (let k = 0; k < 7; k++) src.push(block(4800 * k, 4800, 100_000 * k, { discontinuity: k > 0 }));
    const e = await p.catch((err: unknown) => err);
    expect(e).toBeInstanceOf(ArrayCheckError);
    expect((e as ArrayCheckError).failure).toMatchObject({ kind: 'no-input', detail: 'the input had 6 gaps or clock jumps during the capture' });
    expect(src.subscribers).toBe(0);
    expect(r.failures).toBe(1);
  });
});
