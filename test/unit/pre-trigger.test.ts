/**
 * server/monitor/pre-trigger.ts: the raw ring keeps the last samples on the stream's clock, and the
 * beam synthesised from it is aligned sample for sample with the input. Checked against the
 * perfect-reconstruction property of square-root Hann analysis and synthesis at hop N/2 (weighted
 * overlap-add; J. B. Allen & L. R. Rabiner, Proc. IEEE 65(11), 1977): with weights selecting one
 * channel on every bin of the band, a signal made of bin-centred sines inside the band comes back
 * equal to that channel at the same sample indices (up to the little of the window's leakage that
 * falls into the two bins the band leaves out).
 */
import { describe, expect, it } from 'vitest';
import { RawRing, synthesizeFromRing } from '../../server/monitor/pre-trigger.ts';

const FS = 48_000, N = 512, M = 3;

describe('pre-trigger ring', () => {
  it('keeps the last capacity samples of each channel; a jump in the clock empties it (counted)', () => {
    const r = new RawRing(2, 10);
    const block = (start: number, frames: number) => {
      const d = new Float32Array(2 * frames);
      for (let i = 0; i < frames; i++) {
        d[i] = start + i;
        d[frames + i] = -(start + i);
      }
      return d;
    };
    r.push(block(100, 7), 7, 100);
    r.push(block(107, 6), 6, 107);
    expect(r.span).toEqual([103, 113]);
    const out = new Float32Array(2 * 4);
    r.read(105, 109, out);
    expect([...out]).toEqual([105, 106, 107, 108, -105, -106, -107, -108]);
    expect(() => r.read(100, 104, out)).toThrow(RangeError);
    r.push(block(500, 3), 3, 500);
    expect(r.resets).toBe(1);
    expect(r.span).toEqual([500, 503]);
    expect(r.bytes).toBe(2 * 10 * 4);
  });

  it('the beam of one channel\'s weights over a span the ring holds equals that channel at the same sample indices', () => {
    const total = FS;
    const ring = new RawRing(M, total);
    const data = new Float32Array(M * total);
    const band = { startBin: 1, count: N / 2 - 1 }; // all but DC and Nyquist: the sines' window leakage stays inside
    for (let m = 0; m < M; m++) {
      for (let i = 0; i < total; i++) {
        // Bin-centred sines inside the band, a different mix per channel.
        data[m * total + i] = 0.3 * Math.sin((2 * Math.PI * (20 + 7 * m) * i) / N) + 0.2 * Math.cos((2 * Math.PI * (60 + m) * i) / N + m);
      }
    }
    const first = 1_000_003;
    ring.push(data, total, first);
    const w = new Float64Array(band.count * 2 * M);
    for (let b = 0; b < band.count; b++) w[b * 2 * M + 2 * 1] = 1; // channel 1, real 1
    const from = first + 20_000, to = from + 5_000;
    const y = synthesizeFromRing(ring, from, to, w, { fftSize: N, band, sampleRateHz: FS })!;
    expect(y).not.toBeNull();
    let worst = 0;
    for (let i = 0; i < y.length; i++) worst = Math.max(worst, Math.abs(y[i] - data[1 * total + (from - first) + i]));
    // Within 2e-4 of peaks of 0.5 (−68 dB): what the window's leakage puts into the DC and Nyquist
    // bins, which the band leaves out (measured 5.3e-5).
    expect(worst).toBeLessThan(2e-4);
    // Not held: before the ring's first sample (one frame of history needed) or past its end (a hop ahead needed).
    expect(synthesizeFromRing(ring, first + 10, first + 100, w, { fftSize: N, band, sampleRateHz: FS })).toBeNull();
    expect(synthesizeFromRing(ring, first + total - 300, first + total - 100, w, { fftSize: N, band, sampleRateHz: FS })).toBeNull();
  });
});
