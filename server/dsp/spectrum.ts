/**
 * Spatial spectra per frequency bin and direction, and their broadband combination.
 *
 * Conventional (delay-and-sum): P_conv(θ, f) = vᴴ R v / M²  — the output power of w = v/M, in the
 * units of one sensor's power (a unit-power plane wave from θ gives 1). H. L. Van Trees, Optimum
 * Array Processing, Wiley 2002, ch. 2 (from memory).
 * MVDR / Capon: P_mvdr(θ, f) = 1 / (vᴴ R_L⁻¹ v), R_L = R + δI  — the output power of the
 * distortionless minimum-variance weights, same units. J. Capon, Proc. IEEE 57(8), 1969.
 * The conventional scan uses R unloaded; loading (loading.ts) applies to MVDR only.
 *
 * Masked channels (CovarianceBank.setMask) are left out of both: the scan runs on the active
 * sub-matrix and the matching entries of each steering vector, with M the active count.
 */
import type { CovarianceBank } from './covariance.ts';
import { HermitianSolver, hermitianTrace, NotPositiveDefiniteError, quadForm } from './hermitian.ts';
import { createLoadingResult, LoadingSolver, type LoadingResult, type LoadingSpec } from './loading.ts';
import type { SteeringTable } from './steering.ts';

export type SpectrumMethod = 'conventional' | 'mvdr';

export interface ScanOptions {
  loading: LoadingSpec;
  /**
   * Mode 'wng' needs a look direction to hold the WNG floor for: this direction index, or, when
   * null, per bin the direction where that bin's conventional spectrum peaks.
   */
  wngLookDirection?: number | null;
}

export interface ScanOutputs {
  /** B·D conventional powers, bin-major (b·D + d), or null to skip. */
  conventional: Float64Array | null;
  /** B·D MVDR powers, or null to skip. */
  mvdr: Float64Array | null;
  /** B loading levels δ used per bin (MVDR only). */
  loadingDelta?: Float64Array;
  /**
   * When given (B flags), a bin whose R_L = R + δI cannot be factored (no signal in it at all:
   * tr R = 0; or no loading on too few snapshots) gets MVDR power 0 in every direction and flag 1,
   * instead of the scan throwing; other bins get 0. The live engine's workers scan this way: no
   * input may stop them.
   */
  singular?: Uint8Array;
}


/**
 * Scans a covariance bank over a steering table. Plan once per table; sizes its solvers for the
 * bank's active channel count, re-planning only when that count changes (a mask change).
 */
export class SpectrumScanner {
  readonly table: SteeringTable;
  readonly bins: number;
  readonly directions: number;
  #m = -1;
  #solver!: HermitianSolver;
  #loader!: LoadingSolver;
  #sub!: Float64Array;
  #vt!: Float64Array;
  #conv: Float64Array;
  #base = 0;
  readonly #loadResult: LoadingResult = createLoadingResult();

  constructor(table: SteeringTable) {
    this.table = table;
    this.bins = table.bins;
    this.directions = table.directions;
    this.#conv = new Float64Array(table.directions);
  }

  #plan(m: number): void {
    if (m === this.#m) return;
    this.#m = m;
    this.#solver = new HermitianSolver(m);
    this.#loader = new LoadingSolver(m);
    this.#sub = new Float64Array(2 * m * m);
    this.#vt = m === this.table.channels ? new Float64Array(0) : new Float64Array(2 * m * this.directions);
  }

  /**
   * Steering vectors of bin b restricted to the active channels, consecutive per direction:
   * the table itself when every channel is active (no copy), else a gathered copy in scratch.
   * Returns the array; the vectors start at `#base` in it.
   */
  #gatherSteering(b: number, active: Int32Array): Float64Array {
    const t = this.table;
    const M = t.channels;
    const m = active.length;
    if (m === M) {
      this.#base = t.offset(b, 0);
      return t.data;
    }
    const D = this.directions;
    const src = t.data;
    const vt = this.#vt;
    this.#base = 0;
    for (let d = 0; d < D; d++) {
      const o = t.offset(b, d);
      const w = 2 * m * d;
      for (let i = 0; i < m; i++) {
        const c = active[i];
        vt[w + 2 * i] = src[o + 2 * c];
        vt[w + 2 * i + 1] = src[o + 2 * c + 1];
      }
    }
    return vt;
  }

  /** Level and factor R + δI; false when it does not factor (the bin is then singular). */
  #tryFactor(sub: Float64Array, loading: LoadingSpec, vt: Float64Array, lookOffset: number, deltaOut: Float64Array | undefined, b: number): boolean {
    try {
      const delta = this.#loader.level(sub, 0, loading, vt, lookOffset, this.#loadResult);
      if (deltaOut) deltaOut[b] = delta;
      this.#solver.factor(sub, 0, delta);
      return true;
    } catch (e) {
      if (e instanceof NotPositiveDefiniteError) return false;
      throw e;
    }
  }

  /**
   * Compute the requested spectra for every bin of the table.
   * @param bank covariance per bin; bank.bins must equal the table's bins (the same frequencies)
   * @throws NotPositiveDefiniteError from MVDR when R + δI is singular (e.g. no loading on too few snapshots)
   */
  scan(bank: CovarianceBank, opts: ScanOptions, out: ScanOutputs): void {
    const B = this.bins;
    const D = this.directions;
    if (bank.bins !== B) throw new RangeError(`covariance has ${bank.bins} bins, steering table ${B}`);
    if (bank.channels !== this.table.channels) throw new RangeError(`covariance has ${bank.channels} channels, steering table ${this.table.channels}`);
    for (const [name, a] of [['conventional', out.conventional], ['mvdr', out.mvdr]] as const) {
      if (a !== null && a.length < B * D) throw new RangeError(`${name} output holds ${a.length}, needs ${B * D}`);
    }
    const active = bank.activeChannels;
    const m = active.length;
    this.#plan(m);
    const sub = this.#sub;
    const conv = this.#conv;
    const invM2 = 1 / (m * m);
    const wng = opts.loading.mode === 'wng';
    for (let b = 0; b < B; b++) {
      bank.gather(b, sub);
      const vt = this.#gatherSteering(b, active);
      const base = this.#base;
      const needConv = out.conventional !== null || (wng && (opts.wngLookDirection ?? null) === null);
      if (needConv) {
        for (let d = 0; d < D; d++) conv[d] = quadForm(sub, 0, vt, base + 2 * m * d, m) * invM2;
        if (out.conventional !== null) out.conventional.set(conv, b * D);
      }
      if (out.mvdr === null) continue;
      let look = 0;
      if (wng) {
        look = opts.wngLookDirection ?? argMax(conv, D);
      }
      const p = out.mvdr.subarray(b * D, (b + 1) * D);
      if (out.singular) {
        out.singular[b] = 0;
        // tr(R)/M = 0 (or not finite): the bin carries no usable signal; nothing to factor.
        const mean = hermitianTrace(sub, 0, m) / m;
        if (!(mean > 0 && mean < Infinity) || !this.#tryFactor(sub, opts.loading, vt, base + 2 * m * look, out.loadingDelta, b)) {
          out.singular[b] = 1;
          p.fill(0);
          continue;
        }
      } else {
        const delta = this.#loader.level(sub, 0, opts.loading, vt, base + 2 * m * look, this.#loadResult);
        if (out.loadingDelta) out.loadingDelta[b] = delta;
        this.#solver.factor(sub, 0, delta);
      }
      this.#solver.invQuadForms(p, vt, base, D);
      for (let d = 0; d < D; d++) p[d] = 1 / p[d];
    }
  }
}

function argMax(x: Float64Array, n: number): number {
  let k = 0;
  for (let i = 1; i < n; i++) if (x[i] > x[k]) k = i;
  return k;
}

/**
 * Broadband combination over bins: the incoherent average P̄(θ) = mean_b P(θ, b) (linear), or with
 * `normalise` each bin first divided by its maximum over θ, so every bin weighs the same whatever
 * its level (useful when a few loud low bins would dominate). Common practice.
 * @param out length D
 * @param perBin B·D, bin-major
 */
export function combineBroadband(out: Float64Array, perBin: Float64Array, bins: number, directions: number, normalise = false): void {
  const D = directions;
  out.fill(0, 0, D);
  for (let b = 0; b < bins; b++) {
    const o = b * D;
    let scale = 1 / bins;
    if (normalise) {
      let mx = 0;
      for (let d = 0; d < D; d++) if (perBin[o + d] > mx) mx = perBin[o + d];
      scale = mx > 0 ? 1 / (mx * bins) : 0;
    }
    for (let d = 0; d < D; d++) out[d] += perBin[o + d] * scale;
  }
}

/** 10·log10 of each element (linear power → dB), with −300 dB for zero. `out` may alias `x`. */
export function powerToDb(out: Float64Array, x: Float64Array): void {
  for (let i = 0; i < x.length; i++) out[i] = x[i] > 0 ? 10 * Math.log10(x[i]) : -300;
}
