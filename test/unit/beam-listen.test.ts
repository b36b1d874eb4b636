/**
 * One beam out of the beam-audio stream (shared/beam-listen.ts). Frames are built with the ingest
 * codec (shared/frame.ts, itself checked against the byte example of docs/wire-format.md); the
 * expected channel values are the interleaved payload read by hand (sample-major: s0c0 s0c1 …).
 */
import { describe, expect, it } from 'vitest';
import { BeamTimeline, beamChannel, frameChannels, MAX_BEAM_FRAME_SAMPLES, readBeamChannel } from '../../shared/beam-listen.ts';
import { encodeFrame, encodeFrameRaw, MAX_FRAME_BYTES } from '../../shared/frame.ts';

const header = (channels: number, n: number, firstSample = 1000, encoding: 'float32' | 'int16' = 'float32') => ({ streamId: 9, sequence: 7, firstSample, sampleRateHz: 48000, channels, samplesPerChannel: n, encoding });

describe('readBeamChannel', () => {
  it('takes one channel of an interleaved float32 frame, with its clock', () => {
    // 3 beams × 4 samples, value = 10·sample + channel (exact in float32).
    const x = [0, 1, 2, 10, 11, 12, 20, 21, 22, 30, 31, 32];
    const bytes = encodeFrame(header(3, 4, 123456789012), x);
    const out = new Float32Array(MAX_BEAM_FRAME_SAMPLES);
    for (let c = 0; c < 3; c++) {
      const r = readBeamChannel(bytes, c, out);
      expect(r).toEqual({ ok: true, firstSample: 123456789012, sampleRateHz: 48000, channels: 3, frames: 4, sequence: 7 });
      expect(Array.from(out.subarray(0, 4))).toEqual([c, 10 + c, 20 + c, 30 + c]);
    }
  });

  it('reads a payload that is not 4-byte aligned in its buffer', () => {
    const bytes = encodeFrame(header(2, 2), [0.5, -0.25, 0.125, -1]);
    const shifted = new Uint8Array(bytes.length + 1);
    shifted.set(bytes, 1);
    const out = new Float32Array(MAX_BEAM_FRAME_SAMPLES);
    expect(readBeamChannel(shifted.subarray(1), 1, out).ok).toBe(true);
    expect(Array.from(out.subarray(0, 2))).toEqual([-0.25, -1]);
  });

  it('refuses what is not a beam frame, and leaves out untouched', () => {
    const out = new Float32Array(MAX_BEAM_FRAME_SAMPLES).fill(7);
    expect(readBeamChannel(new Uint8Array(10), 0, out)).toMatchObject({ ok: false, reason: 'short_header' });
    expect(readBeamChannel(encodeFrame(header(1, 2, 0, 'int16'), [0, 0]), 0, out)).toMatchObject({ ok: false, reason: 'not_float32' });
    expect(readBeamChannel(encodeFrame(header(2, 2), [0, 0, 0, 0]), 2, out)).toMatchObject({ ok: false, reason: 'no_such_channel' });
    // NaN in the channel asked for (IEEE 754 quiet NaN 0x7fc00000, little-endian).
    const payload = new Uint8Array(8);
    payload.set([0x00, 0x00, 0xc0, 0x7f], 4);
    expect(readBeamChannel(encodeFrameRaw(header(1, 2), payload), 0, out)).toMatchObject({ ok: false, reason: 'non_finite' });
    expect(out.every((v) => v === 7)).toBe(true);
  });

  it('sizes its buffer for the largest frame', () => {
    expect(MAX_BEAM_FRAME_SAMPLES).toBe((MAX_FRAME_BYTES - 32) / 4 - ((MAX_FRAME_BYTES - 32) % 4) / 4);
    expect(frameChannels(encodeFrame(header(5, 1), [0, 0, 0, 0, 0]))).toBe(5);
    expect(frameChannels(new Uint8Array(40))).toBeNull();
  });
});

describe('beamChannel', () => {
  it('is the beam’s position in the list when the list has the frame’s size', () => {
    expect(beamChannel([3, 5, 9], 5, 3)).toBe(1);
    expect(beamChannel(['3', '5'], 3, 2)).toBe(0);
    expect(beamChannel([3, 5, 9], 4, 3)).toBe(-1);
    // A stale list (a beam was added or removed since): no answer rather than the wrong beam.
    expect(beamChannel([3, 5], 5, 3)).toBe(-1);
  });
});

describe('BeamTimeline', () => {
  it('fills a jump with zeros of exactly its length and counts it', () => {
    const t = new BeamTimeline(48000);
    expect({ ...t.place(1000, 256) }).toEqual({ zeros: 0, skip: 0, restart: true });
    expect({ ...t.place(1256, 256) }).toEqual({ zeros: 0, skip: 0, restart: false });
    expect({ ...t.place(1512 + 768, 256) }).toEqual({ zeros: 768, skip: 0, restart: false });
    expect(t.next).toBe(1512 + 768 + 256);
    expect([t.gaps, t.gapSamples, t.restarts]).toEqual([1, 768, 0]);
  });

  it('skips what was written already: a repeated frame whole, an overlap in part', () => {
    const t = new BeamTimeline(48000);
    t.place(0, 100);
    expect({ ...t.place(0, 100) }).toEqual({ zeros: 0, skip: 100, restart: false });
    expect({ ...t.place(60, 100) }).toEqual({ zeros: 0, skip: 40, restart: false });
    expect(t.next).toBe(160);
    expect([t.lateFrames, t.overlapSamples]).toEqual([1, 140]);
  });

  it('restarts beyond maxGapSamples either way instead of writing zeros', () => {
    const t = new BeamTimeline(1000);
    t.place(5000, 10);
    expect({ ...t.place(5010 + 1000, 10) }).toMatchObject({ zeros: 1000, restart: false });
    expect({ ...t.place(6020 + 1001, 10) }).toEqual({ zeros: 0, skip: 0, restart: true });
    expect({ ...t.place(0, 10) }).toEqual({ zeros: 0, skip: 0, restart: true });
    expect(t.restarts).toBe(2);
    expect(t.start).toBe(0);
    expect(() => new BeamTimeline(-1)).toThrow(RangeError);
  });
});
