/**
 * Beam weights for one look direction per bin, their white noise gain, and the beam response.
 *
 * MVDR: w = R_L⁻¹ v₀ / (v₀ᴴ R_L⁻¹ v₀) — unit gain toward v₀ (wᴴv₀ = 1), minimum output power
 * otherwise (J. Capon, Proc. IEEE 57(8), 1969). Delay-and-sum: w = v₀ / M.
 * White noise gain WNG = |wᴴv₀|² / (wᴴw) ≤ M (H. L. Van Trees, Optimum Array Processing, 2002,
 * ch. 2 and 6, from memory): how much the beam amplifies uncorrelated sensor noise relative to a
 * single sensor; low WNG means the weights are large and fragile to steering and gain errors.
 *
 * Weights are always full length M with zeros at masked channels, so the beam response can use
 * the full steering table.
 */
import type { CovarianceBank } from './covariance.ts';
import { HermitianSolver, hermitianTrace, NotPositiveDefiniteError } from './hermitian.ts';
import { createLoadingResult, LoadingSolver, whiteNoiseGain, type LoadingResult, type LoadingSpec } from './loading.ts';
import type { SteeringTable } from './steering.ts';

export type BeamMethod = 'mvdr' | 'delay-and-sum';

export interface WeightResult {
  /** WNG of the weights toward the look direction, dB. */
  wngDb: number;
  /** Loading δ used (MVDR), 0 for delay-and-sum. */
  delta: number;
  /** Mode 'wng': whether the floor was reached. */
  floorMet: boolean;
  /**
   * MVDR asked for, but R + δI could not be factored (no signal in the bin, or no loading on too
   * few snapshots): the weights are delay-and-sum, which MVDR tends to as δ grows.
   */
  singular: boolean;
}

export function createWeightResult(): WeightResult {
  return { wngDb: Number.NaN, delta: 0, floorMet: true, singular: false };
}

/** Computes weights for one bin at a time. Plan once; re-plans itself when the mask changes. */
export class BeamWeights {
  readonly table: SteeringTable;
  #m = -1;
  #solver!: HermitianSolver;
  #loader!: LoadingSolver;
  #sub!: Float64Array;
  #v!: Float64Array;
  #z!: Float64Array;
  readonly #lr: LoadingResult = createLoadingResult();

  constructor(table: SteeringTable) {
    this.table = table;
  }

  #plan(m: number): void {
    if (m === this.#m) return;
    this.#m = m;
    this.#solver = new HermitianSolver(m);
    this.#loader = new LoadingSolver(m);
    this.#sub = new Float64Array(2 * m * m);
    this.#v = new Float64Array(2 * m);
    this.#z = new Float64Array(2 * m);
  }

  /** Level and factor R + δI (gathered in #sub) toward v; false when it does not factor. */
  #tryFactor(loading: LoadingSpec, v: Float64Array, result: WeightResult): boolean {
    try {
      const delta = this.#loader.level(this.#sub, 0, loading, v, 0, this.#lr);
      this.#solver.factor(this.#sub, 0, delta);
      result.delta = delta;
      result.floorMet = this.#lr.floorMet;
      return true;
    } catch (e) {
      if (e instanceof NotPositiveDefiniteError) return false;
      throw e;
    }
  }

  /**
   * Weights for table bin `b` toward direction index `look`.
   * @param out length 2·M (all channels), interleaved complex; masked channels get 0
   * @param bank covariance (used by MVDR), same bins as the table
   */
  compute(out: Float64Array, method: BeamMethod, bank: CovarianceBank, b: number, look: number, loading: LoadingSpec, result: WeightResult): void {
    const t = this.table;
    const M = t.channels;
    if (out.length < 2 * M) throw new RangeError(`weights output holds ${out.length}, needs ${2 * M}`);
    if (!(look >= 0 && look < t.directions)) throw new RangeError(`look direction ${look} not in 0–${t.directions - 1}`);
    const active = bank.activeChannels;
    const m = active.length;
    this.#plan(m);
    const v = this.#v;
    const o = t.offset(b, look);
    for (let i = 0; i < m; i++) {
      v[2 * i] = t.data[o + 2 * active[i]];
      v[2 * i + 1] = t.data[o + 2 * active[i] + 1];
    }
    const z = this.#z;
    result.singular = false;
    if (method === 'mvdr') {
      bank.gather(b, this.#sub);
      const mean = hermitianTrace(this.#sub, 0, m) / m;
      result.singular = !(mean > 0 && mean < Infinity) || !this.#tryFactor(loading, v, result);
    }
    if (method === 'delay-and-sum' || result.singular) {
      for (let i = 0; i < 2 * m; i++) z[i] = v[i] / m;
      result.delta = 0;
      result.floorMet = true;
    } else {
      this.#solver.solve(z, v);
      // Normalise by v₀ᴴ z (real and positive for a positive definite R_L).
      let qr = 0;
      for (let i = 0; i < m; i++) qr += v[2 * i] * z[2 * i] + v[2 * i + 1] * z[2 * i + 1];
      for (let i = 0; i < 2 * m; i++) z[i] /= qr;
    }
    result.wngDb = 10 * Math.log10(whiteNoiseGain(z, v, m));
    out.fill(0, 0, 2 * M);
    for (let i = 0; i < m; i++) {
      out[2 * active[i]] = z[2 * i];
      out[2 * active[i] + 1] = z[2 * i + 1];
    }
  }
}

/**
 * Beam response |wᴴ v(θ)|² over every direction of table bin b (linear power gain; 1 toward the
 * look direction for distortionless weights).
 * @param out length D
 * @param w length 2·M, interleaved complex
 */
export function beamResponse(out: Float64Array, w: Float64Array, table: SteeringTable, b: number): void {
  const M = table.channels;
  const data = table.data;
  for (let d = 0; d < table.directions; d++) {
    const o = table.offset(b, d);
    let re = 0;
    let im = 0;
    for (let i = 0; i < M; i++) {
      const wr = w[2 * i];
      const wi = w[2 * i + 1];
      const vr = data[o + 2 * i];
      const vi = data[o + 2 * i + 1];
      re += wr * vr + wi * vi; // conj(w)·v
      im += wr * vi - wi * vr;
    }
    out[d] = re * re + im * im;
  }
}
