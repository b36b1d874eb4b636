/**
 * server/monitor/band-power.ts through the engine's own STFT (MultiChannelStft): the scale 4/N²
 * turns one-sided |X_k|² sums into mean square, checked against closed forms computed here from the
 * samples themselves:
 * - a sine of amplitude A at a bin centre reads A²/2 (its mean square; common practice: a full-scale
 *   sine is −3.01 dBFS);
 * - white noise (seeded) reads its own sample mean square times the share of the bins kept;
 * - a beam with delay-and-sum weights on identical channels (a broadside plane wave, zero delays)
 *   reads the single channel's power; the omnidirectional mean of M equal channels does too.
 */
import { describe, expect, it } from 'vitest';
import { MultiChannelStft } from '../../server/dsp/stft.ts';
import { bandGains, beamMeanSquare, meanSquareScale, omniMeanSquare } from '../../server/monitor/band-power.ts';
import { TestRandom } from '../helpers/random.ts';

const N = 512;
const FS = 48_000;

/** Mean over hops (after the first full frame) of a per-snapshot measurement of M identical channels. */
function measure(signal: Float64Array, channels: number, f: (snap: Float64Array) => number): number {
  const stft = new MultiChannelStft(channels, N);
  const frames = signal.length;
  const block = new Float32Array(channels * frames);
  for (let c = 0; c < channels; c++) block.set(signal, c * frames);
  let sum = 0, n = 0;
  stft.push(block, frames, 0, (snap, start) => {
    if (start < N) return;
    sum += f(snap);
    n++;
  });
  return sum / n;
}

describe('band power: one-sided STFT sums to mean square (4/N²)', () => {
  it('the scale is 4/N²', () => {
    expect(meanSquareScale(512)).toBe(4 / 512 / 512);
  });

  it('a sine of amplitude 0.5 at bin 40 (3750 Hz) reads A²/2 = 0.125 (−9.03 dB) within 0.01 dB', () => {
    const A = 0.5, k0 = 40;
    const x = new Float64Array(FS);
    for (let i = 0; i < x.length; i++) x[i] = A * Math.sin((2 * Math.PI * k0 * i) / N);
    const ones = new Float64Array(N / 2 + 1).fill(1);
    const omni = measure(x, 4, (s) => omniMeanSquare(s, 0, 4, 1, N / 2 - 1, ones, N));
    expect(10 * Math.log10(omni / (A * A / 2))).toBeCloseTo(0, 2);
    // Delay-and-sum weights 1/M on every channel: the beam of identical channels is the channel.
    const M = 4;
    const w = new Float64Array((N / 2 - 1) * 2 * M);
    for (let b = 0; b < N / 2 - 1; b++) for (let m = 0; m < M; m++) w[b * 2 * M + 2 * m] = 1 / M;
    const beam = measure(x, M, (s) => beamMeanSquare(s, 0, M, w, 1, N / 2 - 1, ones, N));
    expect(10 * Math.log10(beam / (A * A / 2))).toBeCloseTo(0, 2);
  });

  it('seeded white noise: the full band reads the samples\' mean square within 0.1 dB; half the bins read half of it', () => {
    const rng = new TestRandom(3);
    const x = new Float64Array(4 * FS);
    let ms = 0;
    for (let i = 0; i < x.length; i++) {
      x[i] = 0.1 * rng.gaussian();
      ms += x[i] * x[i];
    }
    ms /= x.length;
    const ones = new Float64Array(N / 2 - 1).fill(1);
    const full = measure(x, 2, (s) => omniMeanSquare(s, 0, 2, 1, N / 2 - 1, ones, N));
    expect(Math.abs(10 * Math.log10(full / ms))).toBeLessThan(0.1);
    // bandGains: only bins 1…127 (up to 11 906 Hz) of the 255 kept: 127/255 of the power.
    const half = bandGains(ones, 1, N / 2 - 1, N, FS, 0, (127 * FS) / N);
    expect(half.reduce((p, g) => p + g, 0)).toBe(127);
    const part = measure(x, 2, (s) => omniMeanSquare(s, 0, 2, 1, N / 2 - 1, half, N));
    expect(Math.abs(10 * Math.log10(part / (ms * 127 / 255)))).toBeLessThan(0.1);
  });
});
