/**
 * Fractional-delay interpolation for the simulator: a Kaiser-windowed sinc, tabulated in a fine
 * polyphase table and linearly interpolated between neighbouring phases, plus a mirrored history
 * ring so that a filter window is always contiguous in memory.
 *
 * Windowed-sinc fractional delay: T. I. Laakso, V. Välimäki, M. Karjalainen, U. K. Laine,
 * "Splitting the unit delay", IEEE Signal Processing Magazine 13(1), 1996.
 * Kaiser window: J. F. Kaiser, "Nonrecursive digital filter design using the I0-sinh window
 * function", Proc. IEEE ISCAS 1974.
 *
 * Accuracy with the defaults (32 taps, β = 9.5, 512 phases): |H(ν) − e^{−j2πνd}| < −85 dB for every
 * delay d and every frequency ν ≤ 0.8 · Nyquist (design figure −89 dB; the phase interpolation adds
 * well under −100 dB). Checked in test/unit/simulator.test.ts against analytic delayed sinusoids.
 */

export interface FractionalDelayOptions {
  /** Filter length, even, 4…256. Default 32. */
  taps?: number;
  /** Table phases per sample, 1…8192. Default 512. */
  phases?: number;
  /** Kaiser β, 0…30. Default 9.5 (balances passband ripple against the transition at Nyquist). */
  kaiserBeta?: number;
}

/** Zeroth-order modified Bessel function of the first kind, by its power series. */
export function besselI0(x: number): number {
  // Σ ((x/2)^k / k!)²; terms fall off fast for the β used here (< 30).
  const q = (x * x) / 4;
  let term = 1;
  let sum = 1;
  for (let k = 1; k < 500; k++) {
    term *= q / (k * k);
    sum += term;
    if (term < sum * 1e-17) break;
  }
  return sum;
}

/**
 * A planned fractional-delay interpolator. Stateless after construction (re-entrant): callers keep
 * the coefficients returned by {@link design} and the history they filter.
 *
 * Convention: for a delay of d samples, design() returns the integer offset o and coefficients g,
 * stored oldest sample first, such that
 *   y[n] = Σ_{t=0}^{taps−1} g[t] · x[n − o − (taps − 1) + t] ≈ x(n − d),
 * the band-limited signal evaluated d samples in the past. o = floor(d) − taps/2 + 1, so the filter
 * reads only past and present samples (is causal) when d ≥ taps/2 − 1.
 */
export class FractionalDelay {
  readonly taps: number;
  readonly phases: number;
  readonly kaiserBeta: number;
  /** (phases + 1) rows × taps, oldest-first; row p is the filter for the fractional part p / phases. */
  readonly #table: Float64Array;

  constructor(options: FractionalDelayOptions = {}) {
    const taps = options.taps ?? 32;
    const phases = options.phases ?? 512;
    const beta = options.kaiserBeta ?? 9.5;
    if (!Number.isInteger(taps) || taps < 4 || taps > 256 || taps % 2 !== 0) {
      throw new RangeError(`FractionalDelay: taps must be an even integer in [4, 256], got ${taps}`);
    }
    if (!Number.isInteger(phases) || phases < 1 || phases > 8192) {
      throw new RangeError(`FractionalDelay: phases must be an integer in [1, 8192], got ${phases}`);
    }
    if (!Number.isFinite(beta) || beta < 0 || beta > 30) {
      throw new RangeError(`FractionalDelay: kaiserBeta must be in [0, 30], got ${beta}`);
    }
    this.taps = taps;
    this.phases = phases;
    this.kaiserBeta = beta;
    this.#table = new Float64Array((phases + 1) * taps);
    for (let p = 0; p <= phases; p++) {
      windowedSinc(this.#table, p * taps, taps, beta, p / phases);
    }
  }

  /**
   * Writes the interpolator for a delay of `delaySamples` into `out`, scaled by `gain`.
   * @param out receives g[0..taps) at out[outOffset..], oldest-first
   * @param delaySamples delay d in samples, any finite value
   * @param gain linear factor folded into the coefficients
   * @returns the integer read offset o (see the class convention)
   */
  design(out: Float64Array, delaySamples: number, gain = 1, outOffset = 0): number {
    const taps = this.taps;
    const whole = Math.floor(delaySamples);
    const pos = (delaySamples - whole) * this.phases;
    let p = Math.floor(pos);
    let a = pos - p;
    if (p >= this.phases) {
      // Rounding pushed the fraction to exactly 1: row `phases` is the same filter.
      p = this.phases;
      a = 0;
    }
    const table = this.#table;
    const r0 = p * taps;
    const r1 = p < this.phases ? r0 + taps : r0;
    const g0 = gain * (1 - a);
    const g1 = gain * a;
    for (let t = 0; t < taps; t++) out[outOffset + t] = g0 * table[r0 + t] + g1 * table[r1 + t];
    return whole - taps / 2 + 1;
  }
}

/**
 * Fills out[offset .. offset+taps) with sinc(k − μ) · kaiser(k − μ) for the sample x[n − floor(d) − k],
 * k = taps/2 … −taps/2+1 (oldest first): the ideal band-limited interpolator for a fractional delay μ,
 * truncated by a Kaiser window centred on the interpolation point.
 */
function windowedSinc(out: Float64Array, offset: number, taps: number, beta: number, mu: number): void {
  const half = taps / 2;
  const i0Beta = besselI0(beta);
  for (let t = 0; t < taps; t++) {
    const x = half - t - mu;
    const r = x / half;
    const w = r * r < 1 ? besselI0(beta * Math.sqrt(1 - r * r)) / i0Beta : 0;
    // Exact zeros at the integers, so integer delays are exact impulses (sin(πk) is ~1e-16, not 0).
    const s = Number.isInteger(x) ? (x === 0 ? 1 : 0) : Math.sin(Math.PI * x) / (Math.PI * x);
    out[offset + t] = s * w;
  }
}

/**
 * Single-writer history of one signal, mirrored: sample k is stored at both k mod H and
 * (k mod H) + H, so any window of up to H samples that ends at or before the newest sample is one
 * contiguous run of `data`. H is a power of two.
 */
export class DelayLine {
  /** Length 2·capacity; read windows through {@link windowStart}. */
  readonly data: Float64Array;
  readonly capacity: number;
  /** Index (mod capacity) where the next sample goes. */
  #write = 0;

  /** @param minCapacity the longest window, in samples, that will ever be read */
  constructor(minCapacity: number) {
    if (!Number.isInteger(minCapacity) || minCapacity < 1 || minCapacity > 1 << 24) {
      throw new RangeError(`DelayLine: capacity must be an integer in [1, 2^24], got ${minCapacity}`);
    }
    let cap = 1;
    while (cap < minCapacity) cap <<= 1;
    this.capacity = cap;
    this.data = new Float64Array(2 * cap);
  }

  /** Appends one sample. */
  push(x: number): void {
    const w = this.#write;
    this.data[w] = x;
    this.data[w + this.capacity] = x;
    this.#write = (w + 1) & (this.capacity - 1);
  }

  /**
   * Index into `data` of the sample `back` steps before the next write position, placed so that the
   * following (back) samples, oldest first, are contiguous: data[windowStart(back) + j] for
   * j = 0 … back−1 is the sample written (back − j) pushes ago.
   * @param back 1 … capacity
   */
  windowStart(back: number): number {
    // (w − back) mod H lies in [0, H) and the run ends before 2H because back ≤ H; the upper half
    // mirrors the lower, so the run reads the right samples across the wrap.
    return (this.#write - back) & (this.capacity - 1);
  }
}

/**
 * Fractional-delay FIR over the most recent pushes of a line, accumulated into `out`:
 * out[outStart + i] += Σ_t g[t] · x[k_i − o − (taps − 1) + t] for i = 0 … n−1, where k_i is the time
 * slot of the sample pushed (n − i) pushes ago, i.e. the last n pushes belong to the n outputs.
 * @param coeffs g at coeffs[coeffOffset .. coeffOffset + taps), from {@link FractionalDelay.design}
 * @param readOffset o from design(); must be ≥ 0 (causal) and n + o + taps − 1 ≤ line.capacity
 */
export function accumulateDelayed(
  out: Float64Array,
  outStart: number,
  n: number,
  line: DelayLine,
  coeffs: Float64Array,
  coeffOffset: number,
  taps: number,
  readOffset: number,
): void {
  const back = n + readOffset + taps - 1;
  if (readOffset < 0 || back > line.capacity) {
    throw new RangeError(`accumulateDelayed: read offset ${readOffset} outside [0, ${line.capacity - n - taps + 1}]`);
  }
  const x = line.data;
  // data[first + j] is the sample pushed (back − j) pushes ago; output i, tap t needs
  // n − i + o + taps − 1 − t pushes ago, i.e. j = i + t.
  const first = line.windowStart(back);
  accumulateWindow(out, outStart, n, x, first, coeffs, coeffOffset, taps);
}

/**
 * out[outStart + i] += Σ_t g[t] · x[xStart + i + t], i = 0 … n−1: the fractional-delay filter over a
 * window of emitted samples (g oldest first, as {@link FractionalDelay.design} gives it). Each output sums its
 * taps in order t = 0 … taps−1, so the result does not depend on where a run starts. Four outputs per
 * pass with the input sliding through registers: four independent accumulation chains hide the add
 * latency and each load serves four products (measured ~1.7× the plain loop).
 */
export function accumulateWindow(out: Float64Array, outStart: number, n: number, x: Float64Array, xStart: number, g: Float64Array, gStart: number, taps: number): void {
  let i = 0;
  for (; i + 4 <= n; i += 4) {
    const q = xStart + i;
    let a0 = 0;
    let a1 = 0;
    let a2 = 0;
    let a3 = 0;
    let x0 = x[q];
    let x1 = x[q + 1];
    let x2 = x[q + 2];
    for (let t = 0; t < taps; t++) {
      const h = g[gStart + t];
      const x3 = x[q + t + 3];
      a0 += h * x0;
      a1 += h * x1;
      a2 += h * x2;
      a3 += h * x3;
      x0 = x1;
      x1 = x2;
      x2 = x3;
    }
    const o = outStart + i;
    out[o] += a0;
    out[o + 1] += a1;
    out[o + 2] += a2;
    out[o + 3] += a3;
  }
  for (; i < n; i++) {
    const q = xStart + i;
    let acc = 0;
    for (let t = 0; t < taps; t++) acc += g[gStart + t] * x[q + t];
    out[outStart + i] += acc;
  }
}

/**
 * Integer delay of the most recent pushes, scaled and accumulated:
 * out[outStart + i] += gain · x[k_i − delay] with k_i as in {@link accumulateDelayed}.
 * @param delaySamples integer ≥ 0 with n + delaySamples ≤ line.capacity
 */
export function accumulateInteger(
  out: Float64Array,
  outStart: number,
  n: number,
  line: DelayLine,
  delaySamples: number,
  gain: number,
): void {
  const back = n + delaySamples;
  if (delaySamples < 0 || back > line.capacity) {
    throw new RangeError(`accumulateInteger: delay ${delaySamples} outside [0, ${line.capacity - n}]`);
  }
  const x = line.data;
  const base = line.windowStart(back);
  // Unrolled by four: measured about 1.8× faster than the plain loop on V8 (Node 20).
  let i = 0;
  for (; i + 4 <= n; i += 4) {
    const o = outStart + i;
    const k = base + i;
    out[o] += gain * x[k];
    out[o + 1] += gain * x[k + 1];
    out[o + 2] += gain * x[k + 2];
    out[o + 3] += gain * x[k + 3];
  }
  for (; i < n; i++) out[outStart + i] += gain * x[base + i];
}
