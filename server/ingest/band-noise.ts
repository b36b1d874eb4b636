/**
 * Band-limited Gaussian noise for the simulator's broadband sources: white Gaussian deviates through
 * a 2nd-order Butterworth high-pass and a 4th-order Butterworth low-pass, normalised to unit
 * variance. Biquad coefficients by the bilinear transform with prewarping at the corner, as in
 * R. Bristow-Johnson, "Cookbook formulae for audio EQ biquad filter coefficients" (from memory);
 * 4th-order Butterworth as two sections with Q = 1/(2 cos(π/8)) and 1/(2 cos(3π/8)).
 */

import type { DelayLine } from './fractional-delay.ts';
import { Prng } from './prng.ts';

export interface BandNoiseOptions {
  sampleRateHz: number;
  /** High-pass corner (−3 dB), Hz. */
  lowHz: number;
  /** Low-pass corner (−3 dB), Hz; clamped to 0.45 · fs so low sample rates still work. */
  highHz: number;
  /** uint32 seed and stream index of this process's own generator. */
  seed: number;
  stream: number;
}

const SECTIONS = 3;
/** Per section: b0, b1, b2, a1, a2 (a0 normalised to 1). */
const COEFFS_PER_SECTION = 5;
/** Length of the impulse response summed for the variance normalisation (decays to < 1e-9 by then
 *  for corners ≥ 20 Hz at fs ≤ 384 kHz). */
const NORMALISE_SAMPLES = 1 << 16;

export class BandNoise {
  readonly lowHz: number;
  readonly highHz: number;
  /** Output scale that makes the filtered noise unit-variance: 1 / sqrt(Σ h²). */
  readonly normalisation: number;
  readonly #prng: Prng;
  readonly #c = new Float64Array(SECTIONS * COEFFS_PER_SECTION);
  /** Transposed direct form II states, two per section. */
  readonly #z = new Float64Array(SECTIONS * 2);

  constructor(options: BandNoiseOptions) {
    const fs = options.sampleRateHz;
    const high = Math.min(options.highHz, 0.45 * fs);
    const low = options.lowHz;
    if (!(low >= 20 && low < high)) {
      throw new RangeError(`BandNoise: need 20 Hz ≤ lowHz < highHz (after clamping to ${0.45 * fs} Hz), got ${low}…${high}`);
    }
    this.lowHz = low;
    this.highHz = high;
    this.#prng = new Prng(options.seed, options.stream);
    setBiquad(this.#c, 0, 'highpass', low / fs, Math.SQRT1_2);
    setBiquad(this.#c, 1, 'lowpass', high / fs, 1 / (2 * Math.cos(Math.PI / 8)));
    setBiquad(this.#c, 2, 'lowpass', high / fs, 1 / (2 * Math.cos((3 * Math.PI) / 8)));
    // Output variance of unit white noise through h is Σ h²; measure it on the impulse response.
    let energy = 0;
    for (let k = 0; k < NORMALISE_SAMPLES; k++) {
      const y = this.#filter(k === 0 ? 1 : 0);
      energy += y * y;
    }
    this.#z.fill(0);
    this.normalisation = 1 / Math.sqrt(energy);
  }

  /** Appends n samples of unit-variance band noise, times `gain`, to `line`. */
  pushInto(line: DelayLine, n: number, gain: number): void {
    const g = gain * this.normalisation;
    for (let i = 0; i < n; i++) line.push(g * this.#filter(this.#prng.gaussian()));
  }

  /** One sample through the cascade (transposed direct form II per section). */
  #filter(input: number): number {
    const c = this.#c;
    const z = this.#z;
    let x = input;
    for (let s = 0; s < SECTIONS; s++) {
      const k = s * COEFFS_PER_SECTION;
      const y = c[k] * x + z[2 * s];
      z[2 * s] = c[k + 1] * x - c[k + 3] * y + z[2 * s + 1];
      z[2 * s + 1] = c[k + 2] * x - c[k + 4] * y;
      x = y;
    }
    return x;
  }
}

/** Writes b0, b1, b2, a1, a2 of a Butterworth-style biquad, corner at `f` cycles/sample. */
function setBiquad(c: Float64Array, section: number, type: 'lowpass' | 'highpass', f: number, q: number): void {
  const w0 = 2 * Math.PI * f;
  const cosW = Math.cos(w0);
  const alpha = Math.sin(w0) / (2 * q);
  const a0 = 1 + alpha;
  const k = section * COEFFS_PER_SECTION;
  if (type === 'lowpass') {
    c[k] = (1 - cosW) / 2 / a0;
    c[k + 1] = (1 - cosW) / a0;
    c[k + 2] = (1 - cosW) / 2 / a0;
  } else {
    c[k] = (1 + cosW) / 2 / a0;
    c[k + 1] = -(1 + cosW) / a0;
    c[k + 2] = (1 + cosW) / 2 / a0;
  }
  c[k + 3] = (-2 * cosW) / a0;
  c[k + 4] = (1 - alpha) / a0;
}
