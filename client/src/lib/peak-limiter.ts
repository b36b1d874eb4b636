/**
 * The dashboard player's output stage: volume in dB and a peak limiter that is always on.
 *
 * The limiter has an instant attack and an exponential release: for each sample y = g·x (g the
 * volume gain), the limiter gain is the smaller of its released value and ceiling/|y|, so no output
 * sample's magnitude exceeds the ceiling, whatever the input level (a final clamp covers the last
 * float rounding). Without look-ahead the first sample of a sudden peak is cut in shape rather
 * than faded in; for listening safety that is the right trade.
 */

/** Amplitude ratio of a level in dB: 10^(dB/20) (the definition of the decibel for field quantities). */
export function dbToGain(db: number): number {
  return Math.pow(10, db / 20);
}

/** Level in dB of an amplitude ratio: 20·log10(g); −Infinity for 0. */
export function gainToDb(g: number): number {
  return 20 * Math.log10(g);
}

/** The largest float32 value ≤ v (v > 0): a ceiling that float32 output cannot round above. */
export function float32AtMost(v: number): number {
  const f = new Float32Array([v]);
  if (f[0] > v) new Uint32Array(f.buffer)[0] -= 1; // positive floats: one unit in the last place down
  return f[0];
}

export interface PeakLimiterOptions {
  /** Largest output magnitude, dBFS (≤ 0). */
  ceilingDbfs: number;
  /** Time constant of the gain's return towards 1 after a peak, seconds. */
  releaseS: number;
  sampleRateHz: number;
}

export class PeakLimiter {
  readonly ceiling: number;
  readonly #releaseCoef: number;
  #gain = 1;
  /** Largest output magnitude so far. */
  maxAbsOut = 0;
  /** Samples whose gain was cut below 1. */
  limitedSamples = 0;

  constructor(opts: PeakLimiterOptions) {
    if (!(opts.ceilingDbfs <= 0) || !Number.isFinite(opts.ceilingDbfs)) throw new RangeError(`ceilingDbfs ${opts.ceilingDbfs}: at most 0`);
    if (!(opts.releaseS > 0) || !(opts.sampleRateHz > 0)) throw new RangeError('releaseS and sampleRateHz must be positive');
    this.ceiling = float32AtMost(dbToGain(opts.ceilingDbfs));
    // One-pole release: the gap to 1 shrinks by e^(−1/(τ·fs)) per sample.
    this.#releaseCoef = Math.exp(-1 / (opts.releaseS * opts.sampleRateHz));
  }

  /** Gain now (1 = not limiting). */
  get gain(): number {
    return this.#gain;
  }

  /**
   * out[i] = limit(gain · x[i]) for i < n. `out` may be `x` (in place).
   * @param gain the volume as an amplitude ratio (dbToGain of the slider)
   */
  process(x: Float32Array, out: Float32Array, n: number, gain: number): void {
    const c = this.ceiling;
    const a = this.#releaseCoef;
    let g = this.#gain;
    let peak = this.maxAbsOut;
    let limited = 0;
    for (let i = 0; i < n; i++) {
      const y = gain * x[i];
      g = 1 - a * (1 - g); // release towards 1
      const m = y < 0 ? -y : y;
      if (m * g > c) g = c / m; // instant attack
      let o = y * g;
      if (o > c) o = c;
      else if (o < -c) o = -c;
      if (g < 1) limited++;
      out[i] = o; // c is a float32 value, so storing cannot round above it
      const mo = o < 0 ? -o : o;
      if (mo > peak) peak = mo;
    }
    this.#gain = g;
    this.maxAbsOut = peak;
    this.limitedSamples += limited;
  }
}
