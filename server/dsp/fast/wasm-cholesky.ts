/**
 * The Cholesky factor of R + δI for two bins at once in WebAssembly SIMD: one bin in each f64x2
 * lane, so every instruction is lane-parallel (no shuffles) and the arithmetic, operation for
 * operation, is that of InverseCholesky.factor (inverse-factor.ts: Cholesky–Banachiewicz row by
 * row, Golub & Van Loan, Matrix Computations, 4th ed., §4.2) — the same float64 roundings, so L
 * and 1/L_ii come out identical to it. Used by the single-precision MVDR path (mvdr-scan.ts), which
 * needs L alone; that path's O(M³) part, which is JavaScript otherwise.
 *
 * The pivot rule of InverseCholesky (hermitian.ts PIVOT_TOLERANCE, scaled by max(A_ii + δ,
 * tr A/M + δ)) is applied afterwards in JavaScript to the pivots the kernel leaves; a lane that
 * fails it is refactored by InverseCholesky by the caller (which throws or flags the bin as before).
 *
 * Memory (bytes): A and L packed by rows, entry e = i(i+1)/2 + j (j ≤ i) at 32e: re (2 lanes),
 * then im (2 lanes); 1/L_ii and the pivots at 16i; δ of both lanes (16 bytes).
 */
import { PIVOT_TOLERANCE } from '../hermitian.ts';
import { instantiateWat, type WasmMemory } from './wasm-assemble.ts';

interface CholeskyExports {
  memory: WasmMemory;
  chol2(a: number, l: number, d: number, piv: number, m: number, delta: number): void;
}

const get = (n: string) => `(local.get $${n})`;
const set = (n: string, e: string) => `(local.set $${n} ${e})`;

/** The WAT text of the two-lane Cholesky kernel. */
export function choleskyWat(): string {
  // Byte offset of packed row r: 32·r(r+1)/2 = 16·r(r+1).
  const rowOff = (r: string) => `(i32.shl (i32.mul ${get(r)} (i32.add ${get(r)} (i32.const 1))) (i32.const 4))`;
  return `(module
  (memory (export "memory") 1)
  (func (export "chol2") (param $a i32) (param $l i32) (param $d i32) (param $piv i32) (param $m i32) (param $dl i32)
    (local $i i32) (local $j i32) (local $ri i32) (local $rj i32) (local $p i32) (local $q i32) (local $pend i32) (local $e i32)
    (local $sr v128) (local $si v128) (local $pr v128) (local $pi v128) (local $qr v128) (local $qi v128)
    (local $delta v128) (local $x v128) (local $root v128)
    (if (i32.eqz ${get('m')}) (then (return)))
    ${set('delta', `(v128.load ${get('dl')})`)}
    ${set('i', '(i32.const 0)')}
    (loop $rowsI
      ${set('ri', rowOff('i'))}
      ${set('j', '(i32.const 0)')}
      (loop $colsJ
        ${set('rj', rowOff('j'))}
        ${set('e', `(i32.add ${get('ri')} (i32.shl ${get('j')} (i32.const 5)))`)}
        ${set('sr', `(v128.load (i32.add ${get('a')} ${get('e')}))`)}
        ${set('si', `(v128.load offset=16 (i32.add ${get('a')} ${get('e')}))`)}
        ;; s −= Σ_{k<j} L_ik · conj(L_jk)
        ${set('p', `(i32.add ${get('l')} ${get('ri')})`)}
        ${set('q', `(i32.add ${get('l')} ${get('rj')})`)}
        ${set('pend', `(i32.add ${get('p')} (i32.shl ${get('j')} (i32.const 5)))`)}
        (if (i32.lt_u ${get('p')} ${get('pend')}) (then
          (loop $k
            ${set('pr', `(v128.load ${get('p')})`)}
            ${set('pi', `(v128.load offset=16 ${get('p')})`)}
            ${set('qr', `(v128.load ${get('q')})`)}
            ${set('qi', `(v128.load offset=16 ${get('q')})`)}
            ${set('sr', `(f64x2.sub ${get('sr')} (f64x2.add (f64x2.mul ${get('pr')} ${get('qr')}) (f64x2.mul ${get('pi')} ${get('qi')})))`)}
            ${set('si', `(f64x2.sub ${get('si')} (f64x2.sub (f64x2.mul ${get('pi')} ${get('qr')}) (f64x2.mul ${get('pr')} ${get('qi')})))`)}
            ${set('p', `(i32.add ${get('p')} (i32.const 32))`)}
            ${set('q', `(i32.add ${get('q')} (i32.const 32))`)}
            (br_if $k (i32.lt_u ${get('p')} ${get('pend')})))))
        (if (i32.lt_u ${get('j')} ${get('i')})
          (then
            ${set('x', `(v128.load (i32.add ${get('d')} (i32.shl ${get('j')} (i32.const 4))))`)}
            (v128.store (i32.add ${get('l')} ${get('e')}) (f64x2.mul ${get('sr')} ${get('x')}))
            (v128.store offset=16 (i32.add ${get('l')} ${get('e')}) (f64x2.mul ${get('si')} ${get('x')})))
          (else
            ${set('x', `(f64x2.add ${get('sr')} ${get('delta')})`)}
            (v128.store (i32.add ${get('piv')} (i32.shl ${get('i')} (i32.const 4))) ${get('x')})
            ${set('root', `(f64x2.sqrt ${get('x')})`)}
            (v128.store (i32.add ${get('l')} ${get('e')}) ${get('root')})
            (v128.store offset=16 (i32.add ${get('l')} ${get('e')}) (v128.const f64x2 0 0))
            (v128.store (i32.add ${get('d')} (i32.shl ${get('i')} (i32.const 4))) (f64x2.div (v128.const f64x2 1 1) ${get('root')}))))
        ${set('j', `(i32.add ${get('j')} (i32.const 1))`)}
        (br_if $colsJ (i32.le_u ${get('j')} ${get('i')})))
      ${set('i', `(i32.add ${get('i')} (i32.const 1))`)}
      (br_if $rowsI (i32.lt_u ${get('i')} ${get('m')}))))
)`;
}

/**
 * Cholesky factors of two M×M Hermitian matrices at a time (orders up to `maxOrder`). Fill both
 * lanes with {@link load}, {@link run}, check each lane with {@link ok}, read it with
 * {@link lowerRe}/{@link lowerIm}/{@link invDiag}. Not re-entrant.
 */
export class PairedCholesky {
  readonly maxOrder: number;
  readonly #exp: CholeskyExports;
  readonly #f64: Float64Array;
  /** Offsets in doubles. */
  readonly #a: number;
  readonly #l: number;
  readonly #d: number;
  readonly #piv: number;
  readonly #delta: number;
  /** Per lane: the loaded A's diagonal (for the pivot rule) and tr A/M + δ. */
  readonly #diag: [Float64Array, Float64Array];
  readonly #meanScale = [0, 0];
  readonly #loading = [0, 0];

  private constructor(maxOrder: number, exp: CholeskyExports) {
    this.maxOrder = maxOrder;
    this.#exp = exp;
    this.#f64 = new Float64Array(exp.memory.buffer); // memory never grows after instantiation
    const packed = 2 * maxOrder * (maxOrder + 1); // doubles: M(M+1)/2 entries × 4
    this.#a = 0;
    this.#l = packed;
    this.#d = 2 * packed;
    this.#piv = this.#d + 2 * maxOrder;
    this.#delta = this.#piv + 2 * maxOrder;
    this.#diag = [new Float64Array(maxOrder), new Float64Array(maxOrder)];
  }

  /** @throws (rejects) when WebAssembly SIMD is unavailable */
  static async create(maxOrder: number): Promise<PairedCholesky> {
    if (!Number.isInteger(maxOrder) || maxOrder < 1) throw new RangeError(`maxOrder must be an integer ≥ 1, got ${maxOrder}`);
    const bytes = 8 * (2 * 2 * maxOrder * (maxOrder + 1) + 4 * maxOrder + 2);
    const exp = await instantiateWat<CholeskyExports>('nullsteer-cholesky2', choleskyWat, bytes);
    return new PairedCholesky(maxOrder, exp);
  }

  /**
   * Loads A (lower triangle and real diagonal of 2·m² doubles, full row-major, interleaved) and δ
   * into `lane` (0 or 1).
   */
  load(lane: number, a: Float64Array, m: number, loading: number): void {
    const f = this.#f64;
    const base = this.#a + lane;
    const diag = this.#diag[lane];
    let trace = 0;
    for (let i = 0, e = 0; i < m; i++) {
      const row = 2 * i * m;
      for (let j = 0; j <= i; j++, e++) {
        f[base + 4 * e] = a[row + 2 * j];
        f[base + 4 * e + 2] = a[row + 2 * j + 1];
      }
      diag[i] = a[row + 2 * i];
      trace += diag[i];
    }
    this.#meanScale[lane] = trace / m + loading;
    this.#loading[lane] = loading;
    f[this.#delta + lane] = loading;
  }

  /** Factors both lanes (order m ≤ maxOrder). */
  run(m: number): void {
    if (!(m >= 1 && m <= this.maxOrder)) throw new RangeError(`order must be in 1…${this.maxOrder}, got ${m}`);
    this.#exp.chol2(8 * this.#a, 8 * this.#l, 8 * this.#d, 8 * this.#piv, m, 8 * this.#delta);
  }

  /** Whether lane's factor passed InverseCholesky's pivot rule (else: refactor it there). */
  ok(lane: number, m: number): boolean {
    const f = this.#f64;
    const diag = this.#diag[lane];
    const loading = this.#loading[lane];
    const mean = this.#meanScale[lane];
    for (let i = 0; i < m; i++) {
      const pivot = f[this.#piv + 2 * i + lane];
      const d = diag[i] + loading;
      const scale = d > mean ? d : mean;
      if (!(pivot > PIVOT_TOLERANCE * scale && pivot < Infinity)) return false;
    }
    return true;
  }

  /** The factor's memory and where lane's entries are: L_ij (packed e) re at base + 4e, im at base + 4e + 2; 1/L_ii at dBase + 2i. */
  view(lane: number): { f64: Float64Array; base: number; dBase: number } {
    return { f64: this.#f64, base: this.#l + lane, dBase: this.#d + lane };
  }
}
