/**
 * Diagonal loading R_L = R + δI for the MVDR solvers (B. D. Carlson, "Covariance matrix estimation
 * errors and diagonal loading in adaptive arrays", IEEE Trans. AES 24(4), 1988): it bounds the
 * eigenvalue spread of a sample covariance estimated from few snapshots and keeps the weights
 * robust to steering errors. A level around the noise floor to ~10 dB above it is common practice.
 *
 * Four ways to choose δ (all in the units of R, i.e. power per sensor):
 * - relative:    δ = ratio · tr(R)/M
 * - relative-db: δ = 10^(db/10) · tr(R)/M   ("dB relative to the average sensor power", e.g. −20)
 * - fixed:       δ = delta
 * - wng:         the smallest δ ≥ 0 whose MVDR weights toward the look direction have a white
 *                noise gain of at least floorDb (the robustness constraint of H. Cox,
 *                R. M. Zeskind & M. M. Owen, IEEE Trans. ASSP 35(10), 1987, from memory).
 *
 * WNG of the loaded MVDR weights w = R_L⁻¹v / (vᴴR_L⁻¹v): since wᴴv = 1,
 *   WNG = |wᴴv|² / (wᴴw) = (vᴴR_L⁻¹v)² / (vᴴR_L⁻²v) ≤ M,
 * with equality for w = v/M (Van Trees, Optimum Array Processing, Wiley 2002, ch. 2 and 6, from
 * memory). WNG is non-decreasing in δ (it tends to M as δ → ∞, where R_L ∝ I), so δ is found by
 * bisection on log δ.
 */
import { HermitianSolver, NotPositiveDefiniteError, hermitianTrace } from './hermitian.ts';
import { PROCESSING_LIMITS } from '../../shared/processing-fields.ts';

/** How to choose the loading level; see the module comment. */
export type LoadingSpec =
  | { mode: 'relative'; ratio: number }
  | { mode: 'relative-db'; db: number }
  | { mode: 'fixed'; delta: number }
  | { mode: 'wng'; floorDb: number; maxRatio?: number };

/** Largest `ratio` (and `maxRatio`) accepted: 60 dB above the average sensor power. */
export const MAX_LOADING_RATIO = PROCESSING_LIMITS.loadingRatio.max;
/** Range of `db` for mode 'relative-db'. */
export const MIN_LOADING_DB = PROCESSING_LIMITS.loadingDb.min;
export const MAX_LOADING_DB = PROCESSING_LIMITS.loadingDb.max;
/**
 * Largest fixed δ accepted: 10¹², in the engine's units one bin's power 120 dB above full scale,
 * 60 dB above the loudest input the server accepts (+60 dBFS). Bounded so that R + δI and the
 * spectra stay finite in float64 (δ = 1.7e308 made every MVDR value non-finite).
 */
export const MAX_FIXED_DELTA = PROCESSING_LIMITS.loadingDelta.max;
/** Range of a WNG floor, dB (WNG ≤ 10·log10 M, at most 30.1 dB for 1024 sensors). */
export const MIN_WNG_FLOOR_DB = PROCESSING_LIMITS.wngFloorDb.min;
export const MAX_WNG_FLOOR_DB = PROCESSING_LIMITS.wngFloorDb.max;
/** Default upper end of the WNG search, as a ratio to tr(R)/M (30 dB above the average sensor power). */
export const DEFAULT_WNG_MAX_RATIO = 1e3;
/** Lower end of the WNG search, as a ratio to tr(R)/M (−90 dB). */
export const WNG_MIN_RATIO = PROCESSING_LIMITS.wngMaxRatio.min;
/** The WNG search stops when the bracket [lo, hi] satisfies hi/lo ≤ 1 + this (δ to 0.01 %). */
export const WNG_DELTA_RELATIVE_TOLERANCE = 1e-4;

/** Where `level()` reports how it ended (caller-owned, reused; nothing is allocated per call). */
export interface LoadingResult {
  /** The δ returned. */
  delta: number;
  /** WNG of the MVDR weights at δ in dB (mode 'wng' only; NaN otherwise). */
  wngDb: number;
  /** Mode 'wng': false when even the largest δ searched misses the floor (δ is then that maximum). */
  floorMet: boolean;
  /** Factorisations spent (0 for the closed-form modes). */
  factorizations: number;
}

/** A fresh {@link LoadingResult} to pass to {@link LoadingSolver.level}. */
export function createLoadingResult(): LoadingResult {
  return { delta: 0, wngDb: Number.NaN, floorMet: true, factorizations: 0 };
}

function requireNumberIn(field: string, value: unknown, min: number, max: number): void {
  if (typeof value !== 'number') {
    throw new TypeError(`loading.${field} must be a number, got ${typeof value}`);
  }
  if (!(value >= min && value <= max)) {
    throw new RangeError(`loading.${field} must be in ${min}…${max}, got ${value}`);
  }
}

/** The fields each mode takes (a closed schema: anything else is refused). */
const LOADING_FIELDS: Record<LoadingSpec['mode'], readonly string[]> = {
  relative: ['mode', 'ratio'],
  'relative-db': ['mode', 'db'],
  fixed: ['mode', 'delta'],
  wng: ['mode', 'floorDb', 'maxRatio'],
};

/**
 * Checks a loading spec; messages name the field and its allowed range. The WNG floor's upper
 * bound 10·log10(M) depends on the array, so it is checked at use ({@link LoadingSolver.level}
 * reports an unreachable floor instead of throwing). Fields other than the mode's are refused.
 * @throws TypeError for a wrong shape, type or unknown field, RangeError for a value out of range
 */
export function validateLoading(spec: unknown): asserts spec is LoadingSpec {
  if (typeof spec !== 'object' || spec === null || Array.isArray(spec)) {
    throw new TypeError(`loading must be an object with a mode, got ${spec === null ? 'null' : Array.isArray(spec) ? 'a list' : typeof spec}`);
  }
  const s = spec as Record<string, unknown>;
  const known = Object.hasOwn(LOADING_FIELDS, String(s.mode)) ? LOADING_FIELDS[s.mode as LoadingSpec['mode']] : null;
  if (known) {
    for (const k of Object.keys(s)) if (!known.includes(k)) throw new TypeError(`loading.${k.slice(0, 40)}: unknown field for mode '${String(s.mode)}'; known: ${known.join(', ')}`);
  }
  switch (s.mode) {
    case 'relative':
      requireNumberIn('ratio', s.ratio, 0, MAX_LOADING_RATIO);
      return;
    case 'relative-db':
      requireNumberIn('db', s.db, MIN_LOADING_DB, MAX_LOADING_DB);
      return;
    case 'fixed':
      requireNumberIn('delta', s.delta, 0, MAX_FIXED_DELTA);
      return;
    case 'wng':
      requireNumberIn('floorDb', s.floorDb, MIN_WNG_FLOOR_DB, MAX_WNG_FLOOR_DB);
      if (s.maxRatio !== undefined) requireNumberIn('maxRatio', s.maxRatio, WNG_MIN_RATIO, MAX_LOADING_RATIO);
      return;
    default:
      throw new TypeError(
        `loading.mode must be one of 'relative', 'relative-db', 'fixed', 'wng', got ${JSON.stringify(s.mode)}`,
      );
  }
}

/** A copy of a validated spec with exactly its mode's fields (nothing else the input carried). */
export function cleanLoading(spec: LoadingSpec): LoadingSpec {
  switch (spec.mode) {
    case 'relative':
      return { mode: 'relative', ratio: spec.ratio };
    case 'relative-db':
      return { mode: 'relative-db', db: spec.db };
    case 'fixed':
      return { mode: 'fixed', delta: spec.delta };
    case 'wng':
      return spec.maxRatio === undefined ? { mode: 'wng', floorDb: spec.floorDb } : { mode: 'wng', floorDb: spec.floorDb, maxRatio: spec.maxRatio };
  }
}

/**
 * White noise gain |wᴴv|² / (wᴴw) of weights w for steering vector v (linear, ≤ ‖v‖² = M for
 * unit-modulus v; Van Trees 2002 ch. 2, from memory).
 * @param w 2·M values from `wOffset`, interleaved complex
 * @param v 2·M values from `vOffset`
 */
export function whiteNoiseGain(w: Float64Array, v: Float64Array, m: number, wOffset = 0, vOffset = 0): number {
  let dr = 0;
  let di = 0;
  let ww = 0;
  for (let i = 0; i < m; i++) {
    const wr = w[wOffset + 2 * i];
    const wi = w[wOffset + 2 * i + 1];
    const vr = v[vOffset + 2 * i];
    const vi = v[vOffset + 2 * i + 1];
    // conj(w_i) · v_i
    dr += wr * vr + wi * vi;
    di += wr * vi - wi * vr;
    ww += wr * wr + wi * wi;
  }
  return (dr * dr + di * di) / ww;
}

/**
 * Chooses δ for one M×M covariance. Plan once per M; owns a {@link HermitianSolver} and scratch.
 */
export class LoadingSolver {
  /** Matrix order M. */
  readonly m: number;
  readonly #solver: HermitianSolver;
  /** R_L⁻¹v (2·M). */
  readonly #z: Float64Array;

  /** @param m matrix order, integer 1…1024 */
  constructor(m: number) {
    this.#solver = new HermitianSolver(m);
    this.m = m;
    this.#z = new Float64Array(2 * m);
  }

  /**
   * The loading level δ for covariance R under `spec`.
   * @param a R, full row-major Hermitian M×M (2·M² values from `aOffset`), unchanged
   * @param look steering vector toward the look direction, 2·M values from `lookOffset`
   *   (required for mode 'wng', ignored otherwise)
   * @param result optional; receives δ, the achieved WNG and whether the floor was met
   * @returns δ ≥ 0 in the units of R. Mode 'wng': 0 when R itself factors and meets the floor;
   *   else the smallest δ in [1e-9, maxRatio]·tr(R)/M meeting it to a relative 1e-4 (the lower
   *   end when the floor is met in the limit δ → 0⁺ of a singular R); else maxRatio·tr(R)/M with
   *   `result.floorMet = false`
   * @throws RangeError for mode 'wng' when tr(R) is not > 0 and finite (no relative scale) or the
   *   look vector is missing/short; TypeError/RangeError from {@link validateLoading}
   */
  level(
    a: Float64Array,
    aOffset: number,
    spec: LoadingSpec,
    look?: Float64Array,
    lookOffset = 0,
    result?: LoadingResult,
  ): number {
    validateLoading(spec);
    const m = this.m;
    const meanPower = hermitianTrace(a, aOffset, m) / m;
    let delta: number;
    switch (spec.mode) {
      case 'relative':
        delta = spec.ratio * meanPower;
        break;
      case 'relative-db':
        delta = Math.pow(10, spec.db / 10) * meanPower;
        break;
      case 'fixed':
        delta = spec.delta;
        break;
      case 'wng':
        return this.#wngLevel(a, aOffset, spec.floorDb, spec.maxRatio ?? DEFAULT_WNG_MAX_RATIO, meanPower, look, lookOffset, result);
    }
    if (result !== undefined) {
      result.delta = delta;
      result.wngDb = Number.NaN;
      result.floorMet = true;
      result.factorizations = 0;
    }
    return delta;
  }

  /**
   * WNG in dB of the MVDR weights toward `look` for R + δI (one factorisation).
   * @throws NotPositiveDefiniteError when R + δI does not factor
   */
  wngDb(a: Float64Array, aOffset: number, delta: number, look: Float64Array, lookOffset = 0): number {
    this.#requireLook(look, lookOffset);
    this.#solver.factor(a, aOffset, delta);
    return 10 * Math.log10(this.#factoredWng(look, lookOffset));
  }

  /** (vᴴR_L⁻¹v)² / ‖R_L⁻¹v‖² with the current factor. */
  #factoredWng(look: Float64Array, lookOffset: number): number {
    const q1 = this.#solver.invQuadForm(look, lookOffset);
    const z = this.#z;
    this.#solver.solve(z, look, lookOffset);
    let q2 = 0;
    for (let i = 0; i < z.length; i++) q2 += z[i] * z[i];
    return (q1 * q1) / q2;
  }

  /** WNG (linear) at δ, or −1 when R + δI does not factor (counts as missing any floor). */
  #tryWng(a: Float64Array, aOffset: number, delta: number, look: Float64Array, lookOffset: number): number {
    try {
      this.#solver.factor(a, aOffset, delta);
    } catch (error) {
      if (error instanceof NotPositiveDefiniteError) return -1;
      throw error;
    }
    return this.#factoredWng(look, lookOffset);
  }

  #requireLook(look: Float64Array | undefined, lookOffset: number): asserts look is Float64Array {
    if (look === undefined) throw new RangeError("loading mode 'wng' needs a look (steering) vector");
    if (!Number.isInteger(lookOffset) || lookOffset < 0 || lookOffset + 2 * this.m > look.length) {
      throw new RangeError(`look needs ${2 * this.m} values from offset ${lookOffset}, has ${look.length}`);
    }
  }

  #wngLevel(
    a: Float64Array,
    aOffset: number,
    floorDb: number,
    maxRatio: number,
    meanPower: number,
    look: Float64Array | undefined,
    lookOffset: number,
    result: LoadingResult | undefined,
  ): number {
    this.#requireLook(look, lookOffset);
    if (!(meanPower > 0 && meanPower < Infinity)) {
      throw new RangeError(`loading mode 'wng' needs tr(R)/M > 0 and finite, got ${meanPower}`);
    }
    const floor = Math.pow(10, floorDb / 10);
    let factorizations = 0;
    let delta: number;
    let wng: number;
    let met = true;

    // δ = 0 first: a well-conditioned R may already meet the floor.
    wng = this.#tryWng(a, aOffset, 0, look, lookOffset);
    factorizations++;
    if (wng >= floor) {
      delta = 0;
    } else {
      let hi = maxRatio * meanPower;
      let lo = WNG_MIN_RATIO * meanPower;
      let wngHi = this.#tryWng(a, aOffset, hi, look, lookOffset);
      factorizations++;
      if (!(wngHi >= floor)) {
        // Unreachable within the search range (always so for floorDb > 10·log10 M): clamp and flag.
        delta = hi;
        wng = wngHi;
        met = false;
      } else {
        const wngLo = this.#tryWng(a, aOffset, lo, look, lookOffset);
        factorizations++;
        if (wngLo >= floor) {
          // The answer lies in (0, lo]; lo is the smallest level searched.
          hi = lo;
          wngHi = wngLo;
        }
        // Invariant: WNG(lo) < floor ≤ WNG(hi) (or hi = lo). Bisect on log δ.
        while (hi > lo * (1 + WNG_DELTA_RELATIVE_TOLERANCE)) {
          const mid = Math.sqrt(lo * hi);
          const wngMid = this.#tryWng(a, aOffset, mid, look, lookOffset);
          factorizations++;
          if (wngMid >= floor) {
            hi = mid;
            wngHi = wngMid;
          } else {
            lo = mid;
          }
        }
        delta = hi;
        wng = wngHi;
      }
    }
    if (result !== undefined) {
      result.delta = delta;
      result.wngDb = wng > 0 ? 10 * Math.log10(wng) : Number.NaN;
      result.floorMet = met;
      result.factorizations = factorizations;
    }
    return delta;
  }
}
