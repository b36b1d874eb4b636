/**
 * A shared broadband reference as two units would record it: Gaussian noise, one copy delayed by a
 * (possibly time-varying) fractional number of samples through the simulator's windowed-sinc
 * interpolator (server/ingest/fractional-delay.ts, accurate to −85 dB up to 0.8·Nyquist), each
 * copy plus its own independent noise.
 */
import { accumulateDelayed, DelayLine, FractionalDelay } from '../../server/ingest/fractional-delay.ts';
import { TestRandom } from './random.ts';

/** Both copies pass through this much delay first, so the member's extra delay may be negative. */
const COMMON_DELAY_SAMPLES = 100;

/**
 * @param delaySamples the member copy's delay behind the base copy at sample i, samples, within ±80
 * @param snrDb level of the common signal over each copy's independent noise
 * @returns base (x) and member (y), float32, standard deviation about 0.1 full scale
 */
export function delayedNoisePair(seed: number, n: number, delaySamples: (i: number) => number, snrDb: number): { x: Float32Array; y: Float32Array } {
  const rng = new TestRandom(seed);
  const fd = new FractionalDelay();
  const line = new DelayLine(256);
  const g = new Float64Array(fd.taps);
  const acc = new Float64Array(1);
  const x = new Float32Array(n);
  const y = new Float32Array(n);
  const noise = 0.1 * 10 ** (-snrDb / 20);
  const baseOffset = fd.design(g, COMMON_DELAY_SAMPLES);
  const baseTaps = Float64Array.from(g);
  for (let i = 0; i < n; i++) {
    line.push(0.1 * rng.gaussian());
    acc[0] = 0;
    accumulateDelayed(acc, 0, 1, line, baseTaps, 0, fd.taps, baseOffset);
    x[i] = acc[0] + noise * rng.gaussian();
    const o = fd.design(g, COMMON_DELAY_SAMPLES + delaySamples(i));
    acc[0] = 0;
    accumulateDelayed(acc, 0, 1, line, g, 0, fd.taps, o);
    y[i] = acc[0] + noise * rng.gaussian();
  }
  return { x, y };
}
