/**
 * The single-precision part of the fast MVDR scan (mvdr-scan.ts): its error bound, the limit above
 * which a bin runs in float64 instead, and the f32x4 forward-substitution kernel over a float32
 * block-planar copy of the steering vectors (wasm-kernels-f32.ts `solve`).
 */
import type { SteeringTable } from '../steering.ts';
import { fillPlanar, type PlanarLayout } from './planar-steering.ts';
import type { WasmF32KernelExports } from './wasm-kernels-f32.ts';

/** Unit roundoff of float32, 2⁻²⁴. */
export const FLOAT32_UNIT_ROUNDOFF = 2 ** -24;

/**
 * Largest relative error bound (see {@link float32RelativeBound}) at which a bin is scanned by the
 * single-precision kernel; a bin whose bound is larger is scanned in float64. 1e-2 is 0.043 dB.
 */
export const FLOAT32_RELATIVE_LIMIT = 1e-2;

/**
 * A bound on the relative error of q = vᴴ(R + δI)⁻¹v = ‖y‖², L y = v, computed by the
 * single-precision kernel (L = the Cholesky factor of R + δI and v rounded to float32, the forward
 * substitution blocked over K directions in float32, |y_i|² widened to float64 and summed there),
 * for every direction of one bin:
 *
 *   |q̂ − q| / q ≤ (1 + θ)²(1 + γ₂) − 1,   θ = ερ/(1 − ερ),   ε = √2·γ_{m+4},
 *   ρ = √(tr(R + δI) / δ),   γ_n = nu/(1 − nu),   u = 2⁻²⁴.
 *
 * Derivation (N. J. Higham, Accuracy and Stability of Numerical Algorithms, 2nd ed., Thm 8.5:
 * substitution gives (L + ΔL)ŷ = v with |ΔL| ≤ γ_m|L|; §3.6: complex arithmetic costs a factor √2
 * and two more units): rounding L and v to float32 and the substitution are all covered by
 * ŷ − y = W(Δv − ΔL ŷ), |ΔL| ≤ ε|L|, |Δv| ≤ u|v|, W = L⁻¹; with ‖v‖ ≤ ‖L‖₂‖y‖,
 * ‖|L|‖₂ ≤ ‖L‖_F = √tr(R + δI) and ‖W‖₂ = λ_min(R + δI)^(−1/2) ≤ δ^(−1/2), this gives
 * ‖ŷ − y‖ ≤ θ‖y‖, so |‖ŷ‖² − ‖y‖²| ≤ (2θ + θ²)q; γ₂ covers |ŷ_i|² formed in float32. With relative
 * loading δ = r·tr R/m, ρ = √(m(1 + r)/r): ≈ 10√m for r = 0.01, bound ≈ 1.7·10⁻⁶·m^1.5 (1.1·10⁻³ at
 * m = 64, 1.6·10⁻³ at m = 96). No loading (δ = 0): no bound (Infinity), the bin runs in float64.
 */
export function float32RelativeBound(m: number, traceR: number, delta: number): number {
  if (!(delta > 0)) return Infinity;
  const u = FLOAT32_UNIT_ROUNDOFF;
  const gamma = (n: number) => (n * u) / (1 - n * u);
  const eps = Math.SQRT2 * gamma(m + 4);
  const rho = Math.sqrt((traceR + m * delta) / delta);
  if (!(eps * rho < 1)) return Infinity;
  const theta = (eps * rho) / (1 - eps * rho);
  return (1 + theta) ** 2 * (1 + gamma(2)) - 1;
}

/**
 * The f32x4 MVDR kernel (wasm-kernels-f32.ts `solve`: forward substitution blocked over K
 * directions) over a float32 block-planar copy of the slice. Needs only L, not W = L⁻¹.
 */
export class F32SolveKernel {
  readonly k: number;
  readonly q: Float64Array;
  readonly #layout: PlanarLayout;
  readonly #exp: WasmF32KernelExports;
  readonly #heapF32: Float32Array;
  readonly #heapI32: Int32Array;
  readonly #lPtr: number;
  readonly #rowsPtr: number;
  readonly #qPtr: number;
  readonly #yPtr: number;
  readonly #vPtr: number;

  /** Memory map (bytes, 16-aligned): L (M(M+1) floats) | rows (M i32) | q (blocks·K doubles) | y (M·2K floats) | planar table (float32). */
  static bytesFor(layout: PlanarLayout): { lPtr: number; rowsPtr: number; qPtr: number; yPtr: number; vPtr: number; total: number } {
    const align = (x: number) => Math.ceil(x / 16) * 16;
    const m = layout.channels;
    const lPtr = 0;
    const rowsPtr = align(lPtr + 4 * m * (m + 1));
    const qPtr = align(rowsPtr + 4 * m);
    const yPtr = align(qPtr + 8 * layout.blocks * layout.k);
    const vPtr = align(yPtr + 8 * m * layout.k);
    return { lPtr, rowsPtr, qPtr, yPtr, vPtr, total: vPtr + 4 * layout.binsCount * layout.binStride };
  }

  constructor(table: SteeringTable, layout: PlanarLayout, exp: WasmF32KernelExports) {
    this.k = layout.k;
    this.#layout = layout;
    this.#exp = exp;
    const map = F32SolveKernel.bytesFor(layout);
    const buffer = exp.memory.buffer;
    if (buffer.byteLength < map.total) throw new RangeError(`wasm memory holds ${buffer.byteLength} bytes, needs ${map.total}`);
    this.#heapF32 = new Float32Array(buffer);
    this.#heapI32 = new Int32Array(buffer);
    this.#lPtr = map.lPtr;
    this.#rowsPtr = map.rowsPtr;
    this.#qPtr = map.qPtr;
    this.#yPtr = map.yPtr;
    this.#vPtr = map.vPtr;
    fillPlanar(this.#heapF32, map.vPtr / 4, table, layout);
    this.q = new Float64Array(buffer, map.qPtr, layout.blocks * layout.k);
  }

  /** Loads L rounded to float32, its diagonal slots replaced by 1/L_ii. */
  setFactor(l: Float64Array, invDiag: Float64Array, m: number): void {
    const h = this.#heapF32;
    const base = this.#lPtr / 4;
    for (let i = 0, o = 0; i < m; i++) {
      const end = o + 2 * i;
      for (; o < end; o++) h[base + o] = l[o];
      h[base + o] = invDiag[i];
      h[base + o + 1] = 0;
      o += 2;
    }
  }

  /** As setFactor, from one lane of a PairedCholesky (wasm-cholesky.ts). */
  setFactorFrom(src: { f64: Float64Array; base: number; dBase: number }, m: number): void {
    const h = this.#heapF32;
    const base = this.#lPtr / 4;
    const f = src.f64;
    for (let i = 0, e = 0; i < m; i++, e++) {
      for (let j = 0; j < i; j++, e++) {
        h[base + 2 * e] = f[src.base + 4 * e];
        h[base + 2 * e + 1] = f[src.base + 4 * e + 2];
      }
      h[base + 2 * e] = f[src.dBase + 2 * i];
      h[base + 2 * e + 1] = 0;
    }
  }

  /**
   * Loads the lower triangle of R (full row-major, interleaved, 2·m² doubles) rounded to float32,
   * packed like L, for {@link runQuad}. Replaces the factor (use after the bin's {@link run}).
   */
  setMatrix(a: Float64Array, m: number): void {
    const h = this.#heapF32;
    const base = this.#lPtr / 4;
    for (let i = 0, e = 0; i < m; i++) {
      const row = 2 * i * m;
      for (let j = 0; j <= i; j++, e++) {
        h[base + 2 * e] = a[row + 2 * j];
        h[base + 2 * e + 1] = j < i ? a[row + 2 * j + 1] : 0;
      }
    }
  }

  /** q[d] = v_dᴴ R v_d for every direction of local bin lb, R from {@link setMatrix}. */
  runQuad(lb: number, m: number): void {
    const L = this.#layout;
    this.#exp.quad(this.#lPtr, this.#rowsPtr, m, this.#vPtr + 4 * lb * L.binStride, L.blocks, 4 * L.blockStride, this.#qPtr);
  }

  setRows(active: Int32Array): void {
    const base = this.#rowsPtr / 4;
    for (let j = 0; j < active.length; j++) this.#heapI32[base + j] = active[j] * 8 * this.k;
  }

  run(lb: number, m: number): void {
    const L = this.#layout;
    this.#exp.solve(this.#lPtr, this.#rowsPtr, m, this.#vPtr + 4 * lb * L.binStride, L.blocks, 4 * L.blockStride, this.#qPtr, this.#yPtr);
  }
}
