/**
 * The dashboard player's pure parts: the jitter buffer (client/src/lib/jitter-buffer.ts) and the
 * output stage (client/src/lib/peak-limiter.ts). Counts are exact (samples, not time); the decibel
 * is the field-quantity definition 20·log10 (IEC 60027-3, from memory); float32 rounding from
 * IEEE 754 binary32 (24-bit significand).
 */
import { describe, expect, it } from 'vitest';
import { JitterBuffer } from '../../client/src/lib/jitter-buffer.ts';
import { dbToGain, float32AtMost, gainToDb, PeakLimiter } from '../../client/src/lib/peak-limiter.ts';
import { LISTEN_CEILING_DBFS, JITTER_CAPACITY_MS, JITTER_TARGET_MS, START_VOLUME_DB } from '../../client/src/lib/beam-player-constants.ts';
import { mulberry32 } from '../helpers/random.ts';

const ramp = (from: number, n: number) => Float32Array.from({ length: n }, (_, i) => from + i);

describe('JitterBuffer', () => {
  it('plays nothing until the target is buffered, then the samples in order with their index', () => {
    const b = new JitterBuffer({ capacitySamples: 1000, targetSamples: 300 });
    const out = new Float32Array(128);
    b.push(ramp(0, 200), 0, 200, 5000);
    expect(b.pull(out)).toBe(0);
    expect(out.every((v) => v === 0)).toBe(true);
    expect(b.underruns).toBe(0); // filling is not an underrun
    b.push(ramp(200, 200), 0, 200, 5200);
    expect(b.readIndex).toBe(5000);
    expect(b.pull(out)).toBe(128);
    expect(Array.from(out)).toEqual(Array.from(ramp(0, 128)));
    expect(b.readIndex).toBe(5128);
    expect(b.size).toBe(400 - 128);
  });

  it('counts an underrun, plays zeros for what is missing, and waits for the target again', () => {
    const b = new JitterBuffer({ capacitySamples: 1000, targetSamples: 100 });
    const out = new Float32Array(128);
    b.push(ramp(1, 100), 0, 100, 0);
    expect(b.pull(out)).toBe(100);
    expect(Array.from(out.subarray(100))).toEqual(new Array(28).fill(0));
    expect([b.underruns, b.underrunSamples, b.playing]).toEqual([1, 28, false]);
    b.push(ramp(1, 50), 0, 50, 100);
    expect(b.pull(out)).toBe(0); // 50 < target: still filling
    expect(b.underruns).toBe(1);
    b.push(ramp(51, 50), 0, 50, 150);
    expect(b.pull(out, 100)).toBe(100);
    expect(out[0]).toBe(1);
  });

  it('never holds more than its capacity: the oldest are dropped down to the target and counted, the index follows', () => {
    const b = new JitterBuffer({ capacitySamples: 256, targetSamples: 128 });
    // Pushes of 100 (worked by hand): sizes 100, 200, then 300 > 256 drops 172 so that 128 are
    // left, 228, then 328 drops 200 (→ 128), …: the pushes k = 2, 4, 6, 8 drop 172, 200, 200, 200.
    let maxSize = 0;
    for (let k = 0; k < 10; k++) {
      b.push(ramp(k * 100, 100), 0, 100, k * 100);
      maxSize = Math.max(maxSize, b.size);
    }
    expect(maxSize).toBeLessThanOrEqual(256);
    expect(b.droppedSamples).toBe(172 + 3 * 200);
    expect(b.size).toBe(228);
    expect(b.readIndex).toBe(772);
    const out = new Float32Array(256);
    expect(b.pull(out)).toBe(228);
    expect(out[0]).toBe(772);
    expect(out[227]).toBe(999);
    // One push larger than the whole ring keeps its newest part (the stream continues at 1000).
    b.push(ramp(0, 600), 0, 600, 1000);
    expect(b.size).toBe(256);
    expect(b.readIndex).toBe(1000 + 600 - 256);
    expect(b.pull(out)).toBe(256);
    expect(out[0]).toBe(344);
    expect(b.pushedSamples).toBe(1600);
    expect(b.pushedSamples - b.playedSamples - b.droppedSamples).toBe(b.size);
  });

  it('takes a gap as zeros (x = null) and refuses impossible sizes', () => {
    const b = new JitterBuffer({ capacitySamples: 64, targetSamples: 8 });
    b.push(Float32Array.of(1, 2), 0, 2, 0);
    b.push(null, 0, 6, 2);
    const out = new Float32Array(8);
    expect(b.pull(out)).toBe(8);
    expect(Array.from(out)).toEqual([1, 2, 0, 0, 0, 0, 0, 0]);
    expect(() => new JitterBuffer({ capacitySamples: 10, targetSamples: 11 })).toThrow(RangeError);
    expect(() => new JitterBuffer({ capacitySamples: 0, targetSamples: 0 })).toThrow(RangeError);
  });

  it('the dashboard’s settings: target 100–300 ms, bounded by a capacity above it', () => {
    expect(JITTER_TARGET_MS).toBeGreaterThanOrEqual(100);
    expect(JITTER_TARGET_MS).toBeLessThanOrEqual(300);
    expect(JITTER_CAPACITY_MS).toBeGreaterThan(JITTER_TARGET_MS);
    expect(START_VOLUME_DB).toBeLessThanOrEqual(-20);
  });
});

describe('gain in dB', () => {
  it('follows 20·log10', () => {
    expect(dbToGain(0)).toBe(1);
    expect(dbToGain(20)).toBeCloseTo(10, 12);
    expect(dbToGain(-6)).toBeCloseTo(0.501187233627272, 12); // 10^(−0.3)
    expect(gainToDb(dbToGain(-24))).toBeCloseTo(-24, 12);
  });

  it('float32AtMost gives the largest float32 not above the value', () => {
    const v = dbToGain(-6);
    const c = float32AtMost(v);
    expect(c).toBeLessThanOrEqual(v);
    expect(Math.fround(c)).toBe(c);
    // The next float32 up (one unit in the last place: 2^−24 for values in [0.5, 1)) is above v.
    expect(c + 2 ** -24).toBeGreaterThan(v);
  });
});

describe('PeakLimiter', () => {
  const fs = 48000;

  it('no output sample above the ceiling for a +20 dB input at 0 dB volume (and at +20 dB volume)', () => {
    const rnd = mulberry32(14);
    for (const volumeDb of [0, 20]) {
      const lim = new PeakLimiter({ ceilingDbfs: LISTEN_CEILING_DBFS, releaseS: 0.05, sampleRateHz: fs });
      const n = fs;
      // A full-scale 1 kHz tone plus noise, raised by 20 dB: peaks near 10× full scale.
      const x = new Float32Array(n);
      for (let i = 0; i < n; i++) x[i] = dbToGain(20) * (0.8 * Math.sin((2 * Math.PI * 1000 * i) / fs) + 0.2 * (2 * rnd() - 1));
      const out = new Float32Array(n);
      for (let i = 0; i < n; i += 128) lim.process(x.subarray(i, i + 128), out.subarray(i, i + 128), Math.min(128, n - i), dbToGain(volumeDb));
      let peak = 0;
      for (const v of out) peak = Math.max(peak, Math.abs(v));
      expect(peak).toBeLessThanOrEqual(lim.ceiling);
      expect(lim.maxAbsOut).toBe(peak);
      expect(peak).toBeGreaterThan(lim.ceiling * 0.99); // it limits, it does not mute
      expect(lim.limitedSamples).toBeGreaterThan(n / 2);
    }
  });

  it('passes quiet input unchanged (gain × x) and recovers after a peak with its release time constant', () => {
    const lim = new PeakLimiter({ ceilingDbfs: -6, releaseS: 0.01, sampleRateHz: fs });
    const quiet = Float32Array.from({ length: 256 }, (_, i) => 0.1 * Math.sin(i / 5));
    const out = new Float32Array(256);
    lim.process(quiet, out, 256, 1);
    for (let i = 0; i < 256; i++) expect(out[i]).toBe(quiet[i]);
    expect(lim.limitedSamples).toBe(0);
    // One sample at 4 (full scale × 4): gain to ceiling/4, then back towards 1 as 1 − (1 − g)·e^(−t/τ).
    lim.process(Float32Array.of(4), out, 1, 1);
    const g0 = lim.ceiling / 4;
    expect(lim.gain).toBeCloseTo(g0, 12);
    const tau = 0.01 * fs;
    const zeros = new Float32Array(480);
    lim.process(zeros, out, 480, 1);
    expect(lim.gain).toBeCloseTo(1 - (1 - g0) * Math.exp(-480 / tau), 9);
  });

  it('refuses a ceiling above full scale', () => {
    expect(() => new PeakLimiter({ ceilingDbfs: 1, releaseS: 0.05, sampleRateHz: fs })).toThrow(RangeError);
  });
});
