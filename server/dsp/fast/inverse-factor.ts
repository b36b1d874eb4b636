/**
 * The inverse Cholesky factor W = L⁻¹ of A + δI = L Lᴴ, for the fast MVDR scan:
 *   vᴴ(A + δI)⁻¹v = vᴴ L⁻ᴴ L⁻¹ v = ‖W v‖²,
 * so each direction costs one lower-triangular matrix–vector product (M(M+1)/2 complex
 * multiply–adds) with no dependency chain between rows, which is what lets the batched kernels of
 * mvdr-scan.ts keep several directions (and SIMD lanes) in flight. Golub & Van Loan, Matrix
 * Computations, 4th ed., §4.2 (Cholesky) and §3.1 (triangular systems; inverting a triangular
 * matrix column by column).
 *
 * Why not HermitianSolver: its factor L is private; recovering W through M forward solves of
 * unit vectors costs M³/2 complex multiply–adds per bin, three times the M³/6 of the triangular
 * inversion here (≈ 9 % of the whole W32 scan). The factorisation below follows
 * HermitianSolver.factor (same operation order, same pivot rule and error), and
 * test/unit/fast-mvdr.test.ts checks W against HermitianSolver.forward column by column.
 *
 * Storage: W packed by rows like HermitianSolver's L — complex entry (i, j ≤ i) at 2·(i(i+1)/2 + j).
 */
import { MAX_HERMITIAN_ORDER, NotPositiveDefiniteError, PIVOT_TOLERANCE } from '../hermitian.ts';

/** Cholesky factor and its inverse for one M×M Hermitian positive-definite matrix at a time. */
export class InverseCholesky {
  /** Matrix order M. */
  readonly m: number;
  /** L packed by rows. */
  readonly #l: Float64Array;
  /** 1 / L_ii (real). */
  readonly #invDiag: Float64Array;
  /** W = L⁻¹ packed by rows, length M(M+1); valid after a successful `factor`. Treat as read-only. */
  readonly inverse: Float64Array;

  /** @param m matrix order, integer 1…1024 */
  constructor(m: number) {
    if (!Number.isInteger(m) || m < 1 || m > MAX_HERMITIAN_ORDER) {
      throw new RangeError(`matrix order m must be an integer in 1…${MAX_HERMITIAN_ORDER}, got ${m}`);
    }
    this.m = m;
    this.#l = new Float64Array(m * (m + 1));
    this.#invDiag = new Float64Array(m);
    this.inverse = new Float64Array(m * (m + 1));
  }

  /**
   * Factors A + loading·I = L Lᴴ and writes W = L⁻¹ into {@link inverse}. Reads only the lower
   * triangle and the real diagonal of A (2·M² doubles from aOffset, full row-major).
   * @param loading δ ≥ 0, finite
   * @param invert false: only the factor L ({@link lower}, {@link invDiag}); call {@link invert}
   *   later when W is wanted after all
   * @throws NotPositiveDefiniteError exactly when HermitianSolver.factor would (same pivot rule)
   */
  factor(a: Float64Array, aOffset = 0, loading = 0, invert = true): void {
    const m = this.m;
    if (!Number.isInteger(aOffset) || aOffset < 0 || aOffset + 2 * m * m > a.length) {
      throw new RangeError(`a needs ${2 * m * m} entries from offset ${aOffset}, but has length ${a.length}`);
    }
    if (!(loading >= 0) || loading === Infinity) {
      throw new RangeError(`loading must be a finite number ≥ 0, got ${loading}`);
    }
    const l = this.#l;
    const invDiag = this.#invDiag;
    let traceSum = 0;
    for (let i = 0; i < m; i++) traceSum += a[aOffset + (i * m + i) * 2];
    const meanScale = traceSum / m + loading;
    // Cholesky–Banachiewicz, row by row (as HermitianSolver.factor).
    for (let i = 0; i < m; i++) {
      const rowI = i * (i + 1);
      const aRow = aOffset + i * m * 2;
      for (let j = 0; j <= i; j++) {
        const rowJ = j * (j + 1);
        let sr = a[aRow + 2 * j];
        let si = a[aRow + 2 * j + 1];
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
          const diag = a[aRow + 2 * i] + loading;
          const pivot = sr + loading;
          const scale = diag > meanScale ? diag : meanScale;
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
    if (invert) this.invert();
  }

  /** L of the last successful {@link factor}, packed by rows (as {@link inverse}). Treat as read-only. */
  get lower(): Float64Array {
    return this.#l;
  }

  /** 1 / L_ii of the last successful {@link factor}. Treat as read-only. */
  get invDiag(): Float64Array {
    return this.#invDiag;
  }

  /** W = L⁻¹ of the last successful {@link factor} into {@link inverse} (done by factor unless told not to). */
  invert(): void {
    const m = this.m;
    const l = this.#l;
    const invDiag = this.#invDiag;
    // W = L⁻¹, row by row: W_ii = 1/L_ii and, for j < i, W_ij = −(Σ_{k=j}^{i−1} L_ik W_kj) / L_ii,
    // accumulated as row axpys (row i += L_ik · row k of W, j ≤ k) so both rows are walked in order.
    const w = this.inverse;
    for (let i = 0; i < m; i++) {
      const rowI = i * (i + 1);
      w.fill(0, rowI, rowI + 2 * i);
      for (let k = 0; k < i; k++) {
        const lr = l[rowI + 2 * k];
        const li = l[rowI + 2 * k + 1];
        const rowK = k * (k + 1);
        for (let j = 0; j <= k; j++) {
          const wr = w[rowK + 2 * j];
          const wi = w[rowK + 2 * j + 1];
          w[rowI + 2 * j] += lr * wr - li * wi;
          w[rowI + 2 * j + 1] += lr * wi + li * wr;
        }
      }
      const d = invDiag[i];
      for (let j = 0; j < 2 * i; j++) w[rowI + j] *= -d;
      w[rowI + 2 * i] = d;
      w[rowI + 2 * i + 1] = 0;
    }
  }
}
