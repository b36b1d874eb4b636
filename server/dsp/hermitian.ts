/**
 * Complex Hermitian positive-definite linear algebra for the MVDR stages: Cholesky factorisation
 * with optional diagonal loading, triangular and full solves, and the inverse quadratic forms
 * vᴴ(R + δI)⁻¹v whose reciprocals are the Capon spectrum P(θ) = 1 / (v(θ)ᴴ R⁻¹ v(θ))
 * (J. Capon, Proc. IEEE 57(8), 1969).
 *
 * Conventions:
 * - Complex data interleaved [re, im, re, im, …] in Float64Array.
 * - An M×M Hermitian matrix is stored FULL, row-major: element (i, j) at (i·M + j)·2 (+1 for the
 *   imaginary part). The factorisation reads only the lower triangle (i ≥ j) and the real part of
 *   the diagonal, so a caller may leave the upper triangle stale.
 * - The factor L (A + δI = L Lᴴ, L lower triangular with a real positive diagonal) is kept inside
 *   the solver, packed by rows (row i holds L_i0 … L_ii contiguously), so the forward substitution
 *   of the spectrum loop walks memory in order.
 */

/** Largest matrix order accepted (a 1024×1024 complex factor is 8 MiB of doubles). */
export const MAX_HERMITIAN_ORDER = 1024;

/**
 * A pivot d_i of the factorisation must exceed PIVOT_TOLERANCE · max(tr(A + δI)/M, A_ii + δ),
 * i.e. −120 dB relative to the average sensor power or to that channel's own power.
 * Measured here (seeded sample covariances, M = 2…256): an exactly duplicated channel or a rank-1
 * matrix leaves pivots ≤ 1e-15 relative (rounding level, cf. the Cholesky error analysis in
 * Golub & Van Loan, Matrix Computations, 4th ed., §4.2); K < M random snapshots usually give
 * 1e-16…1e-13, but occasionally up to 8e-12, because the leading K×K block is itself badly
 * conditioned, so no threshold can detect every rank deficiency: diagonal loading is the remedy.
 * 1e-12 still lets a 100 dB interferer-to-noise ratio (pivot ratio ≈ 1e-10) factor.
 */
export const PIVOT_TOLERANCE = 1e-12;

function requireOrder(m: number): void {
  if (!Number.isInteger(m) || m < 1 || m > MAX_HERMITIAN_ORDER) {
    throw new RangeError(`matrix order m must be an integer in 1…${MAX_HERMITIAN_ORDER}, got ${m}`);
  }
}

function requireSpan(name: string, array: ArrayLike<number>, offset: number, length: number): void {
  if (!Number.isInteger(offset) || offset < 0 || offset + length > array.length) {
    throw new RangeError(
      `${name} needs ${length} entries from offset ${offset}, but has length ${array.length}`,
    );
  }
}

/** Thrown by {@link HermitianSolver.factor} when A + δI is not (numerically) positive definite. */
export class NotPositiveDefiniteError extends Error {
  readonly code = 'ERR_DSP_NOT_POSITIVE_DEFINITE';
  /** Row k (0-based) whose pivot failed. */
  readonly pivotIndex: number;
  /** The failed pivot A_kk + δ − Σ_{j<k} |L_kj|² (may be ≤ 0, tiny, or NaN). */
  readonly pivotValue: number;

  constructor(pivotIndex: number, pivotValue: number) {
    super(
      `matrix is not positive definite: pivot ${pivotIndex} = ${pivotValue}; ` +
        'add diagonal loading or check for dead/duplicate channels',
    );
    this.name = 'NotPositiveDefiniteError';
    this.pivotIndex = pivotIndex;
    this.pivotValue = pivotValue;
  }
}

/**
 * Cholesky solver for one M×M Hermitian positive-definite matrix at a time. Plan once per order M,
 * then `factor` per matrix and run any number of solves against that factor.
 *
 * Not re-entrant across factors: each `factor` replaces the stored L. Use one solver per worker
 * (or per bin being processed); they are cheap (≈ 8·M² bytes).
 */
export class HermitianSolver {
  /** Matrix order M. */
  readonly m: number;
  /** L packed by rows: complex entry (i, j ≤ i) at 2·(i(i+1)/2 + j). */
  readonly #l: Float64Array;
  /** 1 / L_ii (real). */
  readonly #invDiag: Float64Array;
  /** Scratch for one vector (2·M) or two interleaved vectors (4·M: [y1re, y1im, y2re, y2im] per row). */
  readonly #y: Float64Array;
  #factored = false;

  /** @param m matrix order, integer 1…1024 */
  constructor(m: number) {
    requireOrder(m);
    this.m = m;
    this.#l = new Float64Array(m * (m + 1));
    this.#invDiag = new Float64Array(m);
    this.#y = new Float64Array(4 * m);
  }

  /**
   * Factors A + loading·I = L Lᴴ (Cholesky–Banachiewicz, row by row; Golub & Van Loan, Matrix
   * Computations, §4.2, complex form). A is not modified; only its lower triangle and the real
   * part of its diagonal are read.
   * @param a full row-major Hermitian M×M matrix, 2·M² doubles from `aOffset`
   * @param loading δ ≥ 0 added to the diagonal (Carlson, IEEE Trans. AES 24(4), 1988), same units as A
   * @throws NotPositiveDefiniteError on a pivot ≤ PIVOT_TOLERANCE · scale, or a non-finite pivot;
   *   the solver then holds no factor until the next successful call
   */
  factor(a: Float64Array, aOffset = 0, loading = 0): void {
    const m = this.m;
    requireSpan('a', a, aOffset, 2 * m * m);
    if (!(loading >= 0) || loading === Infinity) {
      throw new RangeError(`loading must be a finite number ≥ 0, got ${loading}`);
    }
    this.#factored = false;
    const l = this.#l;
    const invDiag = this.#invDiag;
    let traceSum = 0;
    for (let i = 0; i < m; i++) traceSum += a[aOffset + (i * m + i) * 2];
    const meanScale = traceSum / m + loading;

    for (let i = 0; i < m; i++) {
      const rowI = i * (i + 1);
      const aRow = aOffset + i * m * 2;
      for (let j = 0; j <= i; j++) {
        const rowJ = j * (j + 1);
        let sr = a[aRow + 2 * j];
        let si = a[aRow + 2 * j + 1];
        // s = A_ij − Σ_{k<j} L_ik · conj(L_jk)
        for (let k = 0; k < j; k++) {
          const pr = l[rowI + 2 * k];
          const pi = l[rowI + 2 * k + 1];
          const qr = l[rowJ + 2 * k];
          const qi = l[rowJ + 2 * k + 1];
          sr -= pr * qr + pi * qi;
          si -= pi * qr - pr * qi;
        }
        if (j < i) {
          const d = invDiag[j];
          l[rowI + 2 * j] = sr * d;
          l[rowI + 2 * j + 1] = si * d;
        } else {
          // Diagonal: the imaginary part of a Hermitian diagonal is zero by definition; ignore it.
          const diag = a[aRow + 2 * i] + loading;
          const pivot = sr + loading;
          const scale = diag > meanScale ? diag : meanScale;
          // Written so that NaN fails too.
          if (!(pivot > PIVOT_TOLERANCE * scale && pivot < Infinity)) {
            throw new NotPositiveDefiniteError(i, pivot);
          }
          const root = Math.sqrt(pivot);
          l[rowI + 2 * i] = root;
          l[rowI + 2 * i + 1] = 0;
          invDiag[i] = 1 / root;
        }
      }
    }
    this.#factored = true;
  }

  #requireFactor(): void {
    if (!this.#factored) throw new Error('HermitianSolver: call factor() successfully before solving');
  }

  /**
   * Forward substitution: solves L y = b.
   * @param out length ≥ 2·M, receives y (interleaved complex). May be the same array as `b` when
   *   bOffset = 0 (exact alias, solved in place); must not otherwise overlap `b`.
   * @param b 2·M doubles from `bOffset`
   */
  forward(out: Float64Array, b: Float64Array, bOffset = 0): void {
    this.#requireFactor();
    const m = this.m;
    requireSpan('b', b, bOffset, 2 * m);
    requireSpan('out', out, 0, 2 * m);
    const l = this.#l;
    const invDiag = this.#invDiag;
    for (let i = 0; i < m; i++) {
      const row = i * (i + 1);
      let sr = b[bOffset + 2 * i];
      let si = b[bOffset + 2 * i + 1];
      for (let j = 0; j < i; j++) {
        const lr = l[row + 2 * j];
        const li = l[row + 2 * j + 1];
        const yr = out[2 * j];
        const yi = out[2 * j + 1];
        sr -= lr * yr - li * yi;
        si -= lr * yi + li * yr;
      }
      const d = invDiag[i];
      out[2 * i] = sr * d;
      out[2 * i + 1] = si * d;
    }
  }

  /** Back substitution in place: y ← L⁻ᴴ y, column-oriented so row j of L is read contiguously. */
  #backward(y: Float64Array): void {
    const l = this.#l;
    const invDiag = this.#invDiag;
    for (let j = this.m - 1; j >= 0; j--) {
      const row = j * (j + 1);
      const d = invDiag[j];
      const xr = y[2 * j] * d;
      const xi = y[2 * j + 1] * d;
      y[2 * j] = xr;
      y[2 * j + 1] = xi;
      // y_i −= conj(L_ji) · x_j for i < j
      for (let i = 0; i < j; i++) {
        const lr = l[row + 2 * i];
        const li = l[row + 2 * i + 1];
        y[2 * i] -= lr * xr + li * xi;
        y[2 * i + 1] -= lr * xi - li * xr;
      }
    }
  }

  /**
   * Solves (A + δI) x = b with the stored factor.
   * @param out length ≥ 2·M, receives x. Same aliasing rule as {@link forward}: out === b with
   *   bOffset = 0 is allowed; any other overlap is not.
   * @param b 2·M doubles from `bOffset`, unchanged unless aliased by `out`
   */
  solve(out: Float64Array, b: Float64Array, bOffset = 0): void {
    this.forward(out, b, bOffset);
    this.#backward(out);
  }

  /**
   * vᴴ(A + δI)⁻¹v = ‖L⁻¹v‖², real and > 0 for v ≠ 0. Allocates nothing.
   * @param v 2·M doubles from `vOffset`, unchanged
   */
  invQuadForm(v: Float64Array, vOffset = 0): number {
    this.forward(this.#y, v, vOffset);
    const y = this.#y;
    let q = 0;
    for (let i = 0; i < 2 * this.m; i++) q += y[i] * y[i];
    return q;
  }

  /**
   * vₖᴴ(A + δI)⁻¹vₖ for `count` vectors stored consecutively, vector k at
   * tableOffset + k·2·M. This is the inner loop of the Capon spectrum, so the vectors go through
   * the forward substitution two at a time: each load of L_ij serves both, and the four running
   * sums are independent chains the CPU can overlap.
   * @param out length ≥ count; out[k] receives the k-th form. Must not overlap `table`.
   * @param table steering vectors, count·2·M doubles from `tableOffset`, unchanged
   */
  invQuadForms(out: Float64Array, table: Float64Array, tableOffset: number, count: number): void {
    this.#requireFactor();
    const m = this.m;
    const stride = 2 * m;
    if (!Number.isInteger(count) || count < 0) {
      throw new RangeError(`count must be an integer ≥ 0, got ${count}`);
    }
    requireSpan('table', table, tableOffset, count * stride);
    requireSpan('out', out, 0, count);
    const l = this.#l;
    const invDiag = this.#invDiag;
    const y = this.#y;
    let k = 0;
    for (; k + 1 < count; k += 2) {
      const b1 = tableOffset + k * stride;
      const b2 = b1 + stride;
      let q1 = 0;
      let q2 = 0;
      for (let i = 0; i < m; i++) {
        const row = i * (i + 1);
        let s1r = table[b1 + 2 * i];
        let s1i = table[b1 + 2 * i + 1];
        let s2r = table[b2 + 2 * i];
        let s2i = table[b2 + 2 * i + 1];
        for (let j = 0, p = row, t = 0; j < i; j++, p += 2, t += 4) {
          const lr = l[p];
          const li = l[p + 1];
          const y1r = y[t];
          const y1i = y[t + 1];
          const y2r = y[t + 2];
          const y2i = y[t + 3];
          s1r -= lr * y1r - li * y1i;
          s1i -= lr * y1i + li * y1r;
          s2r -= lr * y2r - li * y2i;
          s2i -= lr * y2i + li * y2r;
        }
        const d = invDiag[i];
        s1r *= d;
        s1i *= d;
        s2r *= d;
        s2i *= d;
        const t = 4 * i;
        y[t] = s1r;
        y[t + 1] = s1i;
        y[t + 2] = s2r;
        y[t + 3] = s2i;
        q1 += s1r * s1r + s1i * s1i;
        q2 += s2r * s2r + s2i * s2i;
      }
      out[k] = q1;
      out[k + 1] = q2;
    }
    if (k < count) out[k] = this.invQuadForm(table, tableOffset + k * stride);
  }

  /**
   * The full inverse (A + δI)⁻¹, column by column (for tests and diagnostics; O(M³)).
   * @param out length ≥ 2·M², receives the full row-major Hermitian inverse
   */
  inverse(out: Float64Array): void {
    this.#requireFactor();
    const m = this.m;
    requireSpan('out', out, 0, 2 * m * m);
    const y = this.#y;
    for (let c = 0; c < m; c++) {
      y.fill(0, 0, 2 * m);
      y[2 * c] = 1;
      this.forward(y, y, 0);
      this.#backward(y);
      for (let i = 0; i < m; i++) {
        out[(i * m + c) * 2] = y[2 * i];
        out[(i * m + c) * 2 + 1] = y[2 * i + 1];
      }
    }
  }

  /** ln det(A + δI) = 2 Σ ln L_ii (natural log; real because A + δI is Hermitian positive definite). */
  logDet(): number {
    this.#requireFactor();
    let s = 0;
    for (let i = 0; i < this.m; i++) s -= Math.log(this.#invDiag[i]);
    return 2 * s;
  }
}

/**
 * vᴴAv for Hermitian A (real part; the imaginary part is zero for Hermitian A). Reads only the
 * lower triangle and the real diagonal: vᴴAv = Σ_i A_ii |v_i|² + 2 Re Σ_{i>j} conj(v_i) A_ij v_j.
 * @param a full row-major M×M, 2·M² doubles from `aOffset`
 * @param v 2·M doubles from `vOffset`
 */
export function quadForm(a: Float64Array, aOffset: number, v: Float64Array, vOffset: number, m: number): number {
  requireOrder(m);
  requireSpan('a', a, aOffset, 2 * m * m);
  requireSpan('v', v, vOffset, 2 * m);
  let diag = 0;
  let off = 0;
  for (let i = 0; i < m; i++) {
    const vr = v[vOffset + 2 * i];
    const vi = v[vOffset + 2 * i + 1];
    const row = aOffset + i * m * 2;
    // t = Σ_{j<i} A_ij v_j
    let tr = 0;
    let ti = 0;
    for (let j = 0; j < i; j++) {
      const ar = a[row + 2 * j];
      const ai = a[row + 2 * j + 1];
      const wr = v[vOffset + 2 * j];
      const wi = v[vOffset + 2 * j + 1];
      tr += ar * wr - ai * wi;
      ti += ar * wi + ai * wr;
    }
    off += vr * tr + vi * ti; // Re(conj(v_i) · t)
    diag += a[row + 2 * i] * (vr * vr + vi * vi);
  }
  return diag + 2 * off;
}

/** tr(A) = Σ Re A_ii of a full row-major M×M complex matrix. */
export function hermitianTrace(a: Float64Array, aOffset: number, m: number): number {
  requireOrder(m);
  requireSpan('a', a, aOffset, 2 * m * m);
  let s = 0;
  for (let i = 0; i < m; i++) s += a[aOffset + (i * m + i) * 2];
  return s;
}

/**
 * out = A v for a full row-major M×M complex matrix (all entries read; A need not be Hermitian).
 * @param out length ≥ 2·M; must not overlap `v` or `a`
 */
export function matVec(
  out: Float64Array,
  a: Float64Array,
  aOffset: number,
  v: Float64Array,
  vOffset: number,
  m: number,
): void {
  requireOrder(m);
  requireSpan('a', a, aOffset, 2 * m * m);
  requireSpan('v', v, vOffset, 2 * m);
  requireSpan('out', out, 0, 2 * m);
  for (let i = 0; i < m; i++) {
    const row = aOffset + i * m * 2;
    let sr = 0;
    let si = 0;
    for (let j = 0; j < m; j++) {
      const ar = a[row + 2 * j];
      const ai = a[row + 2 * j + 1];
      const wr = v[vOffset + 2 * j];
      const wi = v[vOffset + 2 * j + 1];
      sr += ar * wr - ai * wi;
      si += ar * wi + ai * wr;
    }
    out[2 * i] = sr;
    out[2 * i + 1] = si;
  }
}
