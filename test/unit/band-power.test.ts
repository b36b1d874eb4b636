/**
 * server/monitor/band-power.ts (a beam's |wᴴx|² per bin) with weighted-band-power.ts's scale,
 * through the engine's own STFT, against closed forms computed here from the samples:
 * - a sine of amplitude A at a bin centre reads A²/2 through a delay-and-sum beam of identical
 *   channels (its mean square; common practice: a full-scale sine is −3.01 dBFS);
 * - each bin's beam power equals the single channel's |X_k|² there (w = 1/M on identical channels).
 */
import { describe, expect, it } from 'vitest';
import { MultiChannelStft } from '../../server/dsp/stft.ts';
import { beamBinPowers } from '../../server/monitor/band-power.ts';
import { WeightedBandPower } from '../../server/monitor/weighted-band-power.ts';

const N = 512;
const FS = 48_000;
const M = 4;

describe('a beam\'s power per bin', () => {
  it('delay-and-sum on identical channels: each bin\'s power is the channel\'s; a sine at bin 40 of amplitude 0.5 reads A²/2 within 0.01 dB', () => {
    const A = 0.5, k0 = 40;
    const frames = FS;
    const block = new Float32Array(M * frames);
    for (let m = 0; m < M; m++) for (let i = 0; i < frames; i++) block[m * frames + i] = A * Math.sin((2 * Math.PI * k0 * i) / N);
    const band = { startBin: 1, count: N / 2 - 1 };
    const w = new Float64Array(band.count * 2 * M);
    for (let b = 0; b < band.count; b++) for (let m = 0; m < M; m++) w[b * 2 * M + 2 * m] = 1 / M;
    const z = new WeightedBandPower({ weighting: 'Z', fftSize: N, sampleRateHz: FS, startBin: band.startBin, count: band.count });
    const out = new Float64Array(band.count);
    let sum = 0, hops = 0, worst = 0;
    new MultiChannelStft(M, N).push(block, frames, 0, (snap, start) => {
      if (start < N) return;
      beamBinPowers(snap, 0, M, w, band.startBin, band.count, out);
      for (let b = 0; b < band.count; b++) {
        const o = (band.startBin + b) * 2 * M;
        const ch = snap[o] * snap[o] + snap[o + 1] * snap[o + 1];
        worst = Math.max(worst, Math.abs(out[b] - ch) / Math.max(ch, 1e-12));
      }
      sum += z.meanSquare(out, band.startBin);
      hops++;
    });
    expect(worst).toBeLessThan(1e-9);
    expect(10 * Math.log10(sum / hops / ((A * A) / 2))).toBeCloseTo(0, 2);
  });
});
