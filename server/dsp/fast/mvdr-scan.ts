/**
 * Fast MVDR (Capon) spectrum P_mvdr(θ, f) = 1 / (vᴴ R_L⁻¹ v), R_L = R + δI (J. Capon, Proc. IEEE
 * 57(8), 1969) for a slice of bins — the same numbers as SpectrumScanner's MVDR output
 * (spectrum.ts), computed differently:
 *  - per bin, R_L = L Lᴴ is factored and inverted once, W = L⁻¹ (inverse-factor.ts), so every
 *    direction is the triangular product ‖W v‖² with no dependency chain between its rows;
 *  - the steering vectors of the slice are kept in a block-planar copy (planar-steering.ts), K
 *    directions side by side, made once at plan time (the table is constant between re-plans);
 *  - the batched product runs in WebAssembly SIMD (wasm-kernels.ts, f64x2, two directions per
 *    vector), or in plain JavaScript over the same layout when WebAssembly is not wanted.
 * All float64. Measured on W32 (bench/kernels.ts, Node 20, AMD EPYC, medians): the batched product
 * 62 µs per bin (23.8 GFLOP/s) for WebAssembly K = 4 against 266 µs for HermitianSolver.invQuadForms;
 * the JavaScript planar kernels were slower than the plain loop (323–343 µs); the full 61-bin update
 * 5.7 ms against 17.2 ms for SpectrumScanner (factor + L⁻¹ ≈ 25 µs of each bin's ≈ 93 µs).
 *
 * Single precision (option precision 'f32', BinProcessor's default on the fast path): a bin whose
 * derived relative error bound ({@link float32RelativeBound}) is at most
 * {@link FLOAT32_RELATIVE_LIMIT} skips L⁻¹ altogether: its Cholesky factor (two bins at once, one
 * per f64x2 lane, wasm-cholesky.ts, float64) is rounded to float32 and the forward substitution
 * L y = v runs blocked over 8 directions in f32x4 (wasm-kernels-f32.ts `solve`), |y_i|² summed in
 * float64. Other bins (no loading, or loading so small the bound exceeds the limit) run the
 * float64 path above. Measured on W64 (31 bins, bench/kernels.ts --workload W64): 12.9 ms float64,
 * 4.2 ms single precision; largest relative error against float64 about 1e-7 (bound 9e-4).
 *
 * Masked channels (CovarianceBank.setMask) are supported at no extra cost: the kernel reads its
 * rows through an index list, so the active sub-matrix is scanned against the matching channels
 * of each steering vector, exactly as SpectrumScanner does.
 */
import type { CovarianceBank } from '../covariance.ts';
import { hermitianTrace, NotPositiveDefiniteError } from '../hermitian.ts';
import { createLoadingResult, LoadingSolver, type LoadingResult, type LoadingSpec } from '../loading.ts';
import type { SteeringTable } from '../steering.ts';
import { InverseCholesky } from './inverse-factor.ts';
import { PairedCholesky } from './wasm-cholesky.ts';
import { mvdrBlocksK2, mvdrBlocksK4 } from './mvdr-kernels-js.ts';
import { fillPlanar, planarLayout, type PlanarLayout } from './planar-steering.ts';
import { instantiateKernels, WASM_BLOCK_SIZES, type WasmBlockSize, type WasmKernelExports } from './wasm-kernels.ts';
import { F32SolveKernel, FLOAT32_RELATIVE_LIMIT, float32RelativeBound } from './mvdr-f32.ts';
import { instantiateKernelsF32, WASM_F32_BLOCK_SIZES, type WasmF32BlockSize } from './wasm-kernels-f32.ts';

export { FLOAT32_RELATIVE_LIMIT, FLOAT32_UNIT_ROUNDOFF, float32RelativeBound } from './mvdr-f32.ts';

/** The bound of {@link FastMvdrScanner.conventional} in units of tr(R)/M' (unit-modulus steering vectors). */
export function conventionalRowBound(activeChannels: number): number {
  const u = 2 ** -24;
  const gamma = (n: number) => (n * u) / (1 - n * u);
  return Math.SQRT2 * gamma(activeChannels + 4) + gamma(2);
}

export type MvdrBackend = 'wasm' | 'js';

export interface FastMvdrOptions {
  /**
   * 'f64' (default): float64 throughout. 'f32' (wasm only): bins whose error bound
   * ({@link float32RelativeBound}) is at most {@link FLOAT32_RELATIVE_LIMIT} run the f32x4
   * forward-substitution kernel (twice the directions per instruction, and no L⁻¹ to form), the
   * others the float64 kernel.
   */
  precision?: 'f64' | 'f32';
  /** Directions per block of the f32x4 kernel: 4, 8 or 12 (default 8). */
  blockSizeF32?: number;
  /**
   * With 'f32': factor two bins at once in WebAssembly (wasm-cholesky.ts, the same float64
   * arithmetic as InverseCholesky) — default true; false factors each bin in JavaScript.
   */
  pairedFactor?: boolean;
  /** 'wasm' (default): WebAssembly SIMD; 'js': plain JavaScript over the same layout. */
  backend?: MvdrBackend;
  /** Directions per block K: wasm 2, 4, 6 or 8 (default 4); js 2 or 4 (default 4). */
  blockSize?: number;
}

/** The per-bin batched product behind the scanner (one per backend). */
interface BatchKernel {
  readonly backend: MvdrBackend;
  readonly k: number;
  /** Loads W (packed, m(m+1) doubles) and the row list for the next runs. */
  setFactor(w: Float64Array, m: number): void;
  setRows(active: Int32Array): void;
  /** q for every (padded) direction of local bin lb, into `q` (blocks·K). */
  run(lb: number, m: number): void;
  /** Where run() leaves q. */
  readonly q: Float64Array;
}

class JsKernel implements BatchKernel {
  readonly backend = 'js' as const;
  readonly k: number;
  readonly q: Float64Array;
  readonly #layout: PlanarLayout;
  readonly #planar: Float64Array;
  readonly #rows: Int32Array;
  #w: Float64Array = new Float64Array(0);
  readonly #fn: typeof mvdrBlocksK2;

  constructor(table: SteeringTable, layout: PlanarLayout) {
    this.k = layout.k;
    this.#layout = layout;
    this.#planar = new Float64Array(layout.binsCount * layout.binStride);
    fillPlanar(this.#planar, 0, table, layout);
    this.#rows = new Int32Array(layout.channels);
    this.q = new Float64Array(layout.blocks * layout.k);
    this.#fn = layout.k === 2 ? mvdrBlocksK2 : mvdrBlocksK4;
  }

  setFactor(w: Float64Array): void {
    this.#w = w; // read in place: the caller keeps it unchanged until run()
  }

  setRows(active: Int32Array): void {
    for (let j = 0; j < active.length; j++) this.#rows[j] = active[j] * 2 * this.k;
  }

  run(lb: number, m: number): void {
    const L = this.#layout;
    this.#fn(this.q, this.#w, this.#rows, m, this.#planar, lb * L.binStride, L.blocks, L.blockStride);
  }
}

class WasmKernel implements BatchKernel {
  readonly backend = 'wasm' as const;
  readonly k: number;
  readonly q: Float64Array;
  readonly #layout: PlanarLayout;
  readonly #exp: WasmKernelExports;
  readonly #heapF64: Float64Array;
  readonly #heapI32: Int32Array;
  readonly #wPtr: number;
  readonly #rowsPtr: number;
  readonly #qPtr: number;
  readonly #vPtr: number;

  /** Memory map (bytes, 16-aligned): W (M(M+1) doubles) | rows (M i32) | q (blocks·K) | planar table. */
  static bytesFor(layout: PlanarLayout): { wPtr: number; rowsPtr: number; qPtr: number; vPtr: number; total: number } {
    const align = (x: number) => Math.ceil(x / 16) * 16;
    const m = layout.channels;
    const wPtr = 0;
    const rowsPtr = align(wPtr + 8 * m * (m + 1));
    const qPtr = align(rowsPtr + 4 * m);
    const vPtr = align(qPtr + 8 * layout.blocks * layout.k);
    return { wPtr, rowsPtr, qPtr, vPtr, total: vPtr + 8 * layout.binsCount * layout.binStride };
  }

  constructor(table: SteeringTable, layout: PlanarLayout, exp: WasmKernelExports) {
    this.k = layout.k;
    this.#layout = layout;
    this.#exp = exp;
    const map = WasmKernel.bytesFor(layout);
    const buffer = exp.memory.buffer; // grown once by instantiateKernels, never again: views stay valid
    if (buffer.byteLength < map.total) throw new RangeError(`wasm memory holds ${buffer.byteLength} bytes, needs ${map.total}`);
    this.#heapF64 = new Float64Array(buffer);
    this.#heapI32 = new Int32Array(buffer);
    this.#wPtr = map.wPtr;
    this.#rowsPtr = map.rowsPtr;
    this.#qPtr = map.qPtr;
    this.#vPtr = map.vPtr;
    fillPlanar(this.#heapF64, map.vPtr / 8, table, layout);
    this.q = new Float64Array(buffer, map.qPtr, layout.blocks * layout.k);
  }

  setFactor(w: Float64Array, m: number): void {
    this.#heapF64.set(w.subarray(0, m * (m + 1)), this.#wPtr / 8);
  }

  setRows(active: Int32Array): void {
    const base = this.#rowsPtr / 4;
    for (let j = 0; j < active.length; j++) this.#heapI32[base + j] = active[j] * 16 * this.k;
  }

  run(lb: number, m: number): void {
    const L = this.#layout;
    this.#exp.mvdr(this.#wPtr, this.#rowsPtr, m, this.#vPtr + 8 * lb * L.binStride, L.blocks, 8 * L.blockStride, this.#qPtr);
  }
}

/**
 * MVDR spectra of bins binsStart … binsStart + binsCount − 1 of a steering table. Plan once per
 * table (the planar copy costs binsCount·D·M·16 bytes, as much as that part of the table); solvers
 * are re-planned only when the active channel count changes. Not re-entrant (one per worker).
 */
export class FastMvdrScanner {
  readonly table: SteeringTable;
  readonly binsStart: number;
  readonly binsCount: number;
  readonly directions: number;
  readonly channels: number;
  /** Which kernel runs, and its block size K. */
  readonly backend: MvdrBackend;
  readonly blockSize: number;
  /** 'f32' when the single-precision kernel may run (bins within the bound), else 'f64'. */
  readonly precision: 'f64' | 'f32';
  /** Bins scanned by the float32 kernel and by a float64 one, over every scan so far. */
  float32Bins = 0;
  float64Bins = 0;
  readonly #kernel: BatchKernel;
  readonly #kernel32: F32SolveKernel | null;
  /** With the f32 kernel: the Cholesky factors of two bins at once (wasm-cholesky.ts). */
  readonly #chol: PairedCholesky | null;
  #m = -1;
  #activeSeen: Int32Array | null = null;
  #sub = new Float64Array(0);
  #look = new Float64Array(0);
  #inv!: InverseCholesky;
  #loader!: LoadingSolver;
  readonly #loadResult: LoadingResult = createLoadingResult();

  private constructor(
    table: SteeringTable, layout: PlanarLayout, kernel: BatchKernel, kernel32: F32SolveKernel | null = null, chol: PairedCholesky | null = null,
  ) {
    this.#kernel32 = kernel32;
    this.#chol = chol;
    this.precision = kernel32 === null ? 'f64' : 'f32';
    this.table = table;
    this.binsStart = layout.binsStart;
    this.binsCount = layout.binsCount;
    this.directions = table.directions;
    this.channels = table.channels;
    this.#kernel = kernel;
    this.backend = kernel.backend;
    this.blockSize = kernel.k;
  }

  /**
   * Plans a scanner (async: the WebAssembly kernels are assembled on first use in a thread).
   * @param binsStart first table bin; bin lb of the bank given to `scan` is table bin binsStart + lb
   * @param binsCount bins in the slice (the bank's bin count)
   * @throws (rejects) RangeError for a bin range outside the table or an unsupported block size;
   *   an Error when backend 'wasm' is unavailable (no WebAssembly SIMD)
   */
  static async create(
    table: SteeringTable, binsStart = 0, binsCount = table.bins - binsStart, options: FastMvdrOptions = {},
  ): Promise<FastMvdrScanner> {
    const backend = options.backend ?? 'wasm';
    if (backend === 'js') return FastMvdrScanner.createJs(table, binsStart, binsCount, options.blockSize ?? 4);
    if (backend !== 'wasm') throw new TypeError(`backend must be 'wasm' or 'js', got ${JSON.stringify(backend)}`);
    const k = options.blockSize ?? 4;
    if (!(WASM_BLOCK_SIZES as readonly number[]).includes(k)) {
      throw new RangeError(`wasm blockSize must be one of ${WASM_BLOCK_SIZES.join(', ')}, got ${k}`);
    }
    const precision = options.precision ?? 'f64';
    if (precision !== 'f64' && precision !== 'f32') throw new TypeError(`precision must be 'f64' or 'f32', got ${JSON.stringify(precision)}`);
    const layout = planarLayout(table, binsStart, binsCount, k);
    const exp = await instantiateKernels(k as WasmBlockSize, WasmKernel.bytesFor(layout).total);
    let kernel32: F32SolveKernel | null = null;
    let chol: PairedCholesky | null = null;
    if (precision === 'f32') {
      if (options.pairedFactor !== false) chol = await PairedCholesky.create(table.channels);
      const k32 = options.blockSizeF32 ?? 8;
      if (!(WASM_F32_BLOCK_SIZES as readonly number[]).includes(k32)) {
        throw new RangeError(`wasm blockSizeF32 must be one of ${WASM_F32_BLOCK_SIZES.join(', ')}, got ${k32}`);
      }
      const layout32 = planarLayout(table, binsStart, binsCount, k32);
      const exp32 = await instantiateKernelsF32(k32 as WasmF32BlockSize, F32SolveKernel.bytesFor(layout32).total);
      kernel32 = new F32SolveKernel(table, layout32, exp32);
    }
    return new FastMvdrScanner(table, layout, new WasmKernel(table, layout, exp), kernel32, chol);
  }

  /** Synchronous plan of the plain-JavaScript backend (block size 2 or 4). */
  static createJs(table: SteeringTable, binsStart = 0, binsCount = table.bins - binsStart, blockSize = 4): FastMvdrScanner {
    if (blockSize !== 2 && blockSize !== 4) throw new RangeError(`js blockSize must be 2 or 4, got ${blockSize}`);
    const layout = planarLayout(table, binsStart, binsCount, blockSize);
    return new FastMvdrScanner(table, layout, new JsKernel(table, layout));
  }

  #plan(active: Int32Array): void {
    const m = active.length;
    if (m !== this.#m) {
      this.#m = m;
      this.#sub = new Float64Array(2 * m * m);
      this.#look = new Float64Array(2 * m);
      this.#inv = new InverseCholesky(m);
      this.#loader = new LoadingSolver(m);
    }
    if (active !== this.#activeSeen) {
      this.#kernel.setRows(active);
      this.#kernel32?.setRows(active);
      this.#activeSeen = active;
    }
  }

  /** Factor R + δI (and invert it unless told not to); false when it does not factor. */
  #tryFactor(sub: Float64Array, delta: number, invert: boolean): boolean {
    try {
      this.#inv.factor(sub, 0, delta, invert);
      return true;
    } catch (e) {
      if (e instanceof NotPositiveDefiniteError) return false;
      throw e;
    }
  }

  /**
   * MVDR spectrum of every bin of the slice.
   * @param bank covariance of the slice's bins (bank.bins = binsCount, bank.channels = M); its mask
   *   selects the channels scanned
   * @param loading diagonal loading rule (loading.ts)
   * @param out length ≥ binsCount·D, bin-major (lb·D + d); receives P_mvdr = 1/(vᴴR_L⁻¹v)
   * @param deltaOut optional, length ≥ binsCount: the loading δ used per bin
   * @param look per bin, the look direction index for loading mode 'wng' (required for it; the
   *   conventional spectrum's peak, SpectrumScanner's default, is not computed here)
   * @param singular optional, length ≥ binsCount: when given, a bin whose R + δI cannot be
   *   factored (tr R = 0, or no loading on too few snapshots) gets power 0 in every direction and
   *   flag 1 instead of the scan throwing (as SpectrumScanner's `singular` output)
   * @throws NotPositiveDefiniteError when some R + δI is singular and `singular` is not given
   *   (bins before it are written)
   */
  scan(
    bank: CovarianceBank, loading: LoadingSpec, out: Float64Array,
    deltaOut: Float64Array | null = null, look: Int32Array | null = null, singular: Uint8Array | null = null,
    conv: Float64Array | null = null,
  ): void {
    if (conv !== null) this.#requireConv(conv);
    const B = this.binsCount;
    const D = this.directions;
    if (bank.bins !== B) throw new RangeError(`covariance has ${bank.bins} bins, scanner slice ${B}`);
    if (bank.channels !== this.channels) throw new RangeError(`covariance has ${bank.channels} channels, steering table ${this.channels}`);
    if (out.length < B * D) throw new RangeError(`mvdr output holds ${out.length}, needs ${B * D}`);
    if (deltaOut !== null && deltaOut.length < B) throw new RangeError(`deltaOut holds ${deltaOut.length}, needs ${B}`);
    if (loading.mode === 'wng') {
      if (look === null || look.length < B) throw new RangeError(`loading mode 'wng' needs look directions for all ${B} bins`);
      for (let lb = 0; lb < B; lb++) {
        if (!(look[lb] >= 0 && look[lb] < D)) throw new RangeError(`look[${lb}] must be a direction index in 0…${D - 1}, got ${look[lb]}`);
      }
    }
    const active = bank.activeChannels;
    this.#plan(active);
    const m = active.length;
    const sub = this.#sub;
    const kernel = this.#kernel;
    const kernel32 = this.#kernel32;
    const chol = this.#chol;
    let pending = -1;
    let pendingDelta = 0;
    for (let lb = 0; lb < B; lb++) {
      bank.gather(lb, sub);
      if (conv !== null) this.#conventionalBin(sub, lb, m, conv);
      const traceR = hermitianTrace(sub, 0, m);
      if (singular !== null) {
        // tr(R)/M = 0 (or not finite): the bin carries no usable signal; nothing to level or factor.
        const mean = traceR / m;
        if (!(mean > 0 && mean < Infinity)) {
          singular[lb] = 1;
          out.fill(0, lb * D, (lb + 1) * D);
          if (deltaOut !== null) deltaOut[lb] = 0;
          continue;
        }
      }
      let delta: number;
      if (loading.mode === 'wng') {
        const lookVec = this.#look;
        const o = this.table.offset(this.binsStart + lb, (look as Int32Array)[lb]);
        const t = this.table.data;
        for (let i = 0; i < m; i++) {
          lookVec[2 * i] = t[o + 2 * active[i]];
          lookVec[2 * i + 1] = t[o + 2 * active[i] + 1];
        }
        delta = this.#loader.level(sub, 0, loading, lookVec, 0, this.#loadResult);
      } else {
        delta = this.#loader.level(sub, 0, loading);
      }
      if (deltaOut !== null) deltaOut[lb] = delta;
      // Single precision needs only L; W = L⁻¹ is formed for the float64 kernel alone.
      const single = kernel32 !== null && float32RelativeBound(m, traceR, delta) <= FLOAT32_RELATIVE_LIMIT;
      if (single && chol !== null) {
        // L of two bins at once (one per SIMD lane): this bin waits for a partner.
        chol.load(pending < 0 ? 0 : 1, sub, m, delta);
        if (pending < 0) {
          pending = lb;
          pendingDelta = delta;
          continue;
        }
        chol.run(m);
        this.#finishPaired(bank, pending, 0, pendingDelta, out, singular);
        this.#finishPaired(bank, lb, 1, delta, out, singular);
        pending = -1;
        continue;
      }
      if (singular !== null) {
        singular[lb] = 0;
        if (!this.#tryFactor(sub, delta, !single)) {
          singular[lb] = 1;
          out.fill(0, lb * D, (lb + 1) * D);
          continue;
        }
      } else this.#inv.factor(sub, 0, delta, !single);
      let q: Float64Array;
      if (single) {
        (kernel32 as F32SolveKernel).setFactor(this.#inv.lower, this.#inv.invDiag, m);
        (kernel32 as F32SolveKernel).run(lb, m);
        q = (kernel32 as F32SolveKernel).q;
        this.float32Bins++;
      } else {
        kernel.setFactor(this.#inv.inverse, m);
        kernel.run(lb, m);
        q = kernel.q;
        this.float64Bins++;
      }
      const o = lb * D;
      for (let d = 0; d < D; d++) out[o + d] = 1 / q[d];
    }
    if (pending >= 0) {
      // The last bin without a partner: lane 1 still holds an earlier bin, computed and ignored.
      (chol as PairedCholesky).run(m);
      this.#finishPaired(bank, pending, 0, pendingDelta, out, singular);
    }
  }

  /**
   * The conventional spectrum P_conv = vᴴRv/M'² of every bin, per row from the covariance (the
   * f32x4 `quad` kernel over the same float32 steering copy as the MVDR scan; the alternative to
   * tracking it per snapshot, ConventionalTracker, when rows are rare against hops). Error: each
   * term of vᴴRv = Σ_ij conj(v_i) R_ij v_j is formed from float32-rounded R and v in float32, so
   * |error| ≤ ε Σ_ij |R_ij||v_i||v_j| ≤ ε·tr(R)·‖v‖² (|R_ij| ≤ √(R_ii R_jj) for R ⪰ 0, then
   * Cauchy–Schwarz), ε = √2·γ_{m+4} + γ₂ (Higham, Accuracy and Stability of Numerical Algorithms,
   * 2nd ed., §3.1, §3.6) — for unit-modulus steering vectors ε·tr(R)/M', the form of the
   * tracker's bound ({@link conventionalRowBound}). Needs precision 'f32'.
   * @param out length ≥ binsCount·D, bin-major
   */
  conventional(bank: CovarianceBank, out: Float64Array): void {
    if (bank.bins !== this.binsCount) throw new RangeError(`covariance has ${bank.bins} bins, scanner slice ${this.binsCount}`);
    if (bank.channels !== this.channels) throw new RangeError(`covariance has ${bank.channels} channels, steering table ${this.channels}`);
    this.#requireConv(out);
    const active = bank.activeChannels;
    this.#plan(active);
    const m = active.length;
    for (let lb = 0; lb < this.binsCount; lb++) {
      bank.gather(lb, this.#sub);
      this.#conventionalBin(this.#sub, lb, m, out);
    }
  }

  #requireConv(conv: Float64Array): void {
    if (this.#kernel32 === null) throw new Error("the conventional spectrum per row needs precision 'f32'");
    if (conv.length < this.binsCount * this.directions) throw new RangeError(`conventional output holds ${conv.length}, needs ${this.binsCount * this.directions}`);
  }

  #conventionalBin(sub: Float64Array, lb: number, m: number, conv: Float64Array): void {
    const k32 = this.#kernel32 as F32SolveKernel;
    k32.setMatrix(sub, m);
    k32.runQuad(lb, m);
    const q = k32.q;
    const D = this.directions;
    const o = lb * D;
    const scale = 1 / (m * m);
    for (let d = 0; d < D; d++) conv[o + d] = q[d] * scale;
  }

  /**
   * Scans bin lb from lane `lane` of the paired factor; a lane that failed the pivot rule is
   * factored again by InverseCholesky, which flags the bin singular or throws exactly as the
   * unpaired path does.
   */
  #finishPaired(bank: CovarianceBank, lb: number, lane: number, delta: number, out: Float64Array, singular: Uint8Array | null): void {
    const chol = this.#chol as PairedCholesky;
    const kernel32 = this.#kernel32 as F32SolveKernel;
    const m = this.#m;
    const D = this.directions;
    if (chol.ok(lane, m)) {
      kernel32.setFactorFrom(chol.view(lane), m);
    } else {
      const sub = this.#sub;
      bank.gather(lb, sub);
      if (singular !== null) {
        singular[lb] = 0;
        if (!this.#tryFactor(sub, delta, false)) {
          singular[lb] = 1;
          out.fill(0, lb * D, (lb + 1) * D);
          return;
        }
      } else this.#inv.factor(sub, 0, delta, false);
      kernel32.setFactor(this.#inv.lower, this.#inv.invDiag, m);
    }
    kernel32.run(lb, m);
    this.float32Bins++;
    const q = kernel32.q;
    const o = lb * D;
    for (let d = 0; d < D; d++) out[o + d] = 1 / q[d];
  }
}
