/**
 * The conventional (delay-and-sum) spectrum P_conv(d, b) = v_dᴴ R_b v_d / M² (spectrum.ts) tracked
 * snapshot by snapshot instead of scanned from the covariance.
 *
 * CovarianceBank (covariance.ts) updates R_k = (1 − g_k) R_{k−1} + g_k x xᴴ with the bias-corrected
 * weight g_k = (1 − λ)/c_k, c_k = λ c_{k−1} + (1 − λ), c_0 = 0. The quadratic form is linear in R, so
 *   P_k(d) = (1 − g_k) P_{k−1}(d) + g_k |v_dᴴ x|² / M²
 * holds exactly (up to rounding): O(M·D) per bin per snapshot instead of the scan's O(M²·D) per
 * spectrum update. Which is cheaper depends on the ratio of hop rate to spectrum rate; bench/
 * kernels.ts prints both per second of signal; on W32 (61 bins, 360 directions, M = 32, 187.5
 * snapshots/s, spectrum at 20 Hz): plain scan 22 ms × 20 = 446 ms/s, this tracker in JavaScript
 * 1.4 ms × 187.5 = 260 ms/s, in WebAssembly 0.28 ms × 187.5 = 52 ms/s.
 *
 * Masks: masked channels are left out of vᴴx and M becomes the active count M'. A mask change
 * makes the tracked values inconsistent (their history was summed over other channels): call
 * {@link ConventionalTracker.seedFrom} with the covariance bank, which recomputes vᴴRv/M'² on the
 * active sub-matrix (one plain scan) and takes over the bank's weight state c_k. Until then
 * `consistent` is false and `power` mixes the two masks.
 */
import type { CovarianceBank } from '../covariance.ts';
import { quadForm } from '../hermitian.ts';
import type { SteeringTable } from '../steering.ts';
import { fillPlanar, planarLayout, type PlanarLayout } from './planar-steering.ts';
import { instantiateKernels, type WasmKernelExports } from './wasm-kernels.ts';
import { instantiateKernelsF32 } from './wasm-kernels-f32.ts';

/** Directions per block of the WebAssembly backend (measured best for M = 32, bench/kernels.ts). */
const WASM_TRACKER_BLOCK = 4;
/** Directions per block of the single-precision backend (f32x4, two vectors per part). */
const WASM_F32_TRACKER_BLOCK = 8;

/**
 * Precision of the WebAssembly tracker. 'f32': x and the steering copy rounded to float32 and
 * y = vᴴx formed in float32 (f32x4, twice the directions per instruction); |y|², the recursion
 * and the powers stay float64. Error (Higham, Accuracy and Stability of Numerical Algorithms, 2nd
 * ed., §3.1, §3.6): |ŷ − y| ≤ ε Σ_j |v_j||x_j| ≤ ε‖v‖‖x‖ with ε = √2·γ_{M+4}, γ_n = nu/(1 − nu),
 * u = 2⁻²⁴, so each term |y|²/M'² is off by at most (2ε + ε²)(1 + γ₂)‖v‖²‖x‖²/M'² plus γ₂ of itself; the
 * recursion is a convex combination of those terms, so for unit-modulus steering vectors
 *   |P̂(d) − P(d)| ≤ ((2ε + ε²)(1 + γ₂) + γ₂) · tr(R)/M'   (tr R/M' = the mean active sensor power),
 * an absolute bound: 6.2·10⁻⁶ of the mean sensor power for M' = 32, 1.2·10⁻⁵ for M' = 64 (about
 * −50 dB). Near a deep null of the conventional pattern the relative error can be larger than
 * that; test/unit/fast-f32.test.ts checks the bound (measured: under a tenth of it).
 */
export type TrackerPrecision = 'f64' | 'f32';

/** The absolute error bound of the 'f32' tracker in units of tr(R)/M' (see {@link TrackerPrecision}). */
export function trackerF32Bound(activeChannels: number): number {
  const u = 2 ** -24;
  const gamma = (n: number) => (n * u) / (1 - n * u);
  const eps = Math.SQRT2 * gamma(activeChannels + 4);
  return (2 * eps + eps * eps) * (1 + gamma(2)) + gamma(2);
}

/** The WebAssembly state of a tracker: kernels, its memory map, and views on that memory. */
interface WasmTrackerState {
  exp: Pick<WasmKernelExports, 'conv' | 'memory'>;
  layout: PlanarLayout;
  /** The f32x4 kernels read conj(x) and the steering copy as float32. */
  single: boolean;
  f32: Float32Array;
  f64: Float64Array;
  i32: Int32Array;
  /** Byte offsets: conj(x) (2·M doubles), row list (M i32), padded powers (B·blocks·K), planar table. */
  wPtr: number;
  rowsPtr: number;
  pPtr: number;
  vPtr: number;
}

/**
 * c_n = 1 − λⁿ: the bank's weight state after n updates at a constant λ (covariance.ts), for
 * {@link ConventionalTracker.seedFrom} when the tracker did not see the bank's whole history.
 */
export function recursionWeightSum(lambda: number, updates: number): number {
  if (!(lambda > 0 && lambda < 1)) throw new RangeError(`lambda must be in (0, 1), got ${lambda}`);
  if (!Number.isInteger(updates) || updates < 0) throw new RangeError(`updates must be an integer ≥ 0, got ${updates}`);
  return 1 - Math.pow(lambda, updates);
}

/**
 * Conventional spectrum of table bins binsStart … binsStart + binsCount − 1, tracked per snapshot.
 * `new ConventionalTracker(…)`: plain JavaScript, reads the steering table in place (no copy).
 * `await ConventionalTracker.create(…)`: the same recursion through the WebAssembly SIMD kernel
 * (wasm-kernels.ts `conv`), with a block-planar copy of the slice's steering vectors in its memory
 * (binsCount·D·M·16 bytes). Not re-entrant.
 */
export class ConventionalTracker {
  readonly table: SteeringTable;
  readonly binsStart: number;
  readonly binsCount: number;
  readonly directions: number;
  readonly channels: number;
  /** binsCount·D powers, bin-major (lb·D + d), in the units of one sensor's power. Read-only outside. */
  readonly power: Float64Array;
  #active: Int32Array;
  /** x of one bin, active channels, interleaved (2·M'). */
  readonly #x: Float64Array;
  /** Scratch for seeding: active sub-matrix and one gathered steering vector. */
  #sub = new Float64Array(0);
  readonly #v: Float64Array;
  #weightSum = 0;
  #updates = 0;
  #consistent = true;
  #wasm: WasmTrackerState | null = null;

  /**
   * @param binsStart first table bin tracked; snapshot bin lb is table bin binsStart + lb
   * @param binsCount bins tracked
   */
  constructor(table: SteeringTable, binsStart = 0, binsCount = table.bins - binsStart) {
    if (!Number.isInteger(binsStart) || binsStart < 0 || binsStart >= table.bins) {
      throw new RangeError(`binsStart must be an integer in 0…${table.bins - 1}, got ${binsStart}`);
    }
    if (!Number.isInteger(binsCount) || binsCount < 1 || binsStart + binsCount > table.bins) {
      throw new RangeError(`binsCount must be an integer in 1…${table.bins - binsStart} (binsStart ${binsStart}), got ${binsCount}`);
    }
    this.table = table;
    this.binsStart = binsStart;
    this.binsCount = binsCount;
    this.directions = table.directions;
    this.channels = table.channels;
    this.power = new Float64Array(binsCount * table.directions);
    this.#active = Int32Array.from({ length: table.channels }, (_, m) => m);
    this.#x = new Float64Array(2 * table.channels);
    this.#v = new Float64Array(2 * table.channels);
  }

  /**
   * A tracker running on the WebAssembly SIMD kernel (same results to rounding; see the class
   * comment). Rejects like the constructor throws, or when WebAssembly SIMD is unavailable.
   */
  static async create(
    table: SteeringTable, binsStart = 0, binsCount = table.bins - binsStart, precision: TrackerPrecision = 'f64',
  ): Promise<ConventionalTracker> {
    if (precision !== 'f64' && precision !== 'f32') throw new TypeError(`precision must be 'f64' or 'f32', got ${JSON.stringify(precision)}`);
    const tracker = new ConventionalTracker(table, binsStart, binsCount);
    const single = precision === 'f32';
    const layout = planarLayout(table, binsStart, binsCount, single ? WASM_F32_TRACKER_BLOCK : WASM_TRACKER_BLOCK);
    const M = table.channels;
    const bytes = single ? 4 : 8;
    const align = (x: number) => Math.ceil(x / 16) * 16;
    const wPtr = 0;
    const rowsPtr = align(2 * bytes * M);
    const pPtr = align(rowsPtr + 4 * M);
    const vPtr = align(pPtr + 8 * binsCount * layout.blocks * layout.k);
    const total = vPtr + bytes * binsCount * layout.binStride;
    const exp = single ? await instantiateKernelsF32(WASM_F32_TRACKER_BLOCK, total) : await instantiateKernels(WASM_TRACKER_BLOCK, total);
    const f64 = new Float64Array(exp.memory.buffer); // memory is never grown again: views stay valid
    const f32 = new Float32Array(exp.memory.buffer);
    const i32 = new Int32Array(exp.memory.buffer);
    if (single) fillPlanar(f32, vPtr / 4, table, layout);
    else fillPlanar(f64, vPtr / 8, table, layout);
    tracker.#wasm = { exp, layout, single, f32, f64, i32, wPtr, rowsPtr, pPtr, vPtr };
    tracker.#wasmRows();
    return tracker;
  }

  /** 'wasm' or 'js'. */
  get backend(): 'wasm' | 'js' {
    return this.#wasm === null ? 'js' : 'wasm';
  }

  /** 'f32' for the single-precision WebAssembly kernel, else 'f64'. */
  get precision(): TrackerPrecision {
    return this.#wasm?.single ? 'f32' : 'f64';
  }

  #wasmRows(): void {
    const w = this.#wasm;
    if (w === null) return;
    const a = this.#active;
    const slab = (w.single ? 8 : 16) * w.layout.k; // bytes of one channel's K re + K im parts
    for (let j = 0; j < a.length; j++) w.i32[w.rowsPtr / 4 + j] = a[j] * slab;
  }

  /** Copies `power` into the wasm-side padded powers (after reset / seed). */
  #wasmPush(): void {
    const w = this.#wasm;
    if (w === null) return;
    const D = this.directions;
    const padded = w.layout.blocks * w.layout.k;
    for (let lb = 0; lb < this.binsCount; lb++) {
      w.f64.set(this.power.subarray(lb * D, (lb + 1) * D), w.pPtr / 8 + lb * padded);
    }
  }

  /** Snapshots folded in since construction, reset() or (as the bank's count) seedFrom(). */
  get updates(): number {
    return this.#updates;
  }

  /** The weight state c_k (mirrors CovarianceBank's). */
  get weightSum(): number {
    return this.#weightSum;
  }

  /** False after a mask change until seedFrom(): `power` is then not vᴴRv/M'² of any one mask. */
  get consistent(): boolean {
    return this.#consistent;
  }

  /** Indices of the active channels, ascending. */
  get activeChannels(): Int32Array {
    return this.#active;
  }

  /** Zeroes the powers and the weight state; the mask is kept (as CovarianceBank.reset). */
  reset(): void {
    this.power.fill(0);
    this.#wasmPush();
    this.#weightSum = 0;
    this.#updates = 0;
    this.#consistent = true;
  }

  /**
   * Selects the channels summed; see the module comment — re-seed with seedFrom() afterwards.
   * @param active length M; true = include
   * @throws RangeError on a wrong length or when no channel is active
   */
  setMask(active: ArrayLike<boolean>): void {
    const m = this.channels;
    if (active.length !== m) throw new RangeError(`mask length must equal channels (${m}), got ${active.length}`);
    let count = 0;
    for (let i = 0; i < m; i++) if (active[i]) count++;
    if (count === 0) throw new RangeError('mask must leave at least one channel active, got none');
    const list = new Int32Array(count);
    for (let i = 0, q = 0; i < m; i++) if (active[i]) list[q++] = i;
    const changed = list.length !== this.#active.length || list.some((c, i) => c !== this.#active[i]);
    this.#active = list;
    this.#wasmRows();
    if (changed && this.#updates > 0) this.#consistent = false;
  }

  /**
   * One hop: P ← (1 − g) P + g |vᴴx|²/M'², g = (1 − λ)/c_k (g = 1 on the first snapshot).
   * Feed exactly the snapshots and λ given to the CovarianceBank, in the same order.
   * @param snapshot 2·binsCount·M values, snapshot[(lb·M + m)·2 + {0, 1}] (CovarianceBank.update's
   *   layout); must be finite (checked before anything changes)
   * @param lambda forgetting factor, 0 < λ < 1
   */
  update(snapshot: Float64Array | Float32Array, lambda: number): void {
    if (!(lambda > 0 && lambda < 1)) throw new RangeError(`lambda must be in (0, 1), got ${lambda}`);
    const M = this.channels;
    const B = this.binsCount;
    const n = 2 * B * M;
    if (snapshot.length < n) {
      throw new RangeError(`snapshot needs 2·bins·channels = ${n} values (bin-major, then channel), got ${snapshot.length}`);
    }
    for (let i = 0; i < n; i++) {
      const s = snapshot[i];
      if (!(s - s === 0)) throw new RangeError(`snapshot value at bin ${Math.floor(i / (2 * M))}, channel ${Math.floor(i / 2) % M} is not finite: ${s}`);
    }
    const weightSum = lambda * this.#weightSum + (1 - lambda);
    const g = (1 - lambda) / weightSum;
    const active = this.#active;
    const m = active.length;
    const keep = 1 - g;
    const scale = g / (m * m);
    const x = this.#x;
    const D = this.directions;
    const t = this.table.data;
    const p = this.power;
    const stride = 2 * M;
    const wasm = this.#wasm;
    if (wasm !== null) {
      this.#updateWasm(wasm, snapshot, keep, scale);
      this.#weightSum = weightSum;
      this.#updates++;
      return;
    }
    for (let lb = 0; lb < B; lb++) {
      const src = lb * stride;
      for (let i = 0; i < m; i++) {
        x[2 * i] = snapshot[src + 2 * active[i]];
        x[2 * i + 1] = snapshot[src + 2 * active[i] + 1];
      }
      let o = this.table.offset(this.binsStart + lb, 0);
      const po = lb * D;
      let d = 0;
      // Two directions per pass: independent sums the CPU can overlap.
      for (; d + 1 < D; d += 2, o += 2 * stride) {
        let ar = 0;
        let ai = 0;
        let br = 0;
        let bi = 0;
        const o2 = o + stride;
        for (let i = 0; i < m; i++) {
          const c = 2 * active[i];
          const xr = x[2 * i];
          const xi = x[2 * i + 1];
          const vr = t[o + c];
          const vi = t[o + c + 1];
          const wr = t[o2 + c];
          const wi = t[o2 + c + 1];
          // conj(v) · x
          ar += vr * xr + vi * xi;
          ai += vr * xi - vi * xr;
          br += wr * xr + wi * xi;
          bi += wr * xi - wi * xr;
        }
        p[po + d] = keep * p[po + d] + scale * (ar * ar + ai * ai);
        p[po + d + 1] = keep * p[po + d + 1] + scale * (br * br + bi * bi);
      }
      if (d < D) {
        let ar = 0;
        let ai = 0;
        for (let i = 0; i < m; i++) {
          const c = 2 * active[i];
          const xr = x[2 * i];
          const xi = x[2 * i + 1];
          const vr = t[o + c];
          const vi = t[o + c + 1];
          ar += vr * xr + vi * xi;
          ai += vr * xi - vi * xr;
        }
        p[po + d] = keep * p[po + d] + scale * (ar * ar + ai * ai);
      }
    }
    this.#weightSum = weightSum;
    this.#updates++;
  }

  #updateWasm(w: WasmTrackerState, snapshot: Float64Array | Float32Array, keep: number, scale: number): void {
    const active = this.#active;
    const m = active.length;
    const M = this.channels;
    const D = this.directions;
    const { blocks, k, binStride, blockStride } = w.layout;
    const padded = blocks * k;
    const f64 = w.f64;
    const xs = w.single ? w.f32 : f64;
    const bytes = w.single ? 4 : 8;
    const wo = w.wPtr / bytes;
    for (let lb = 0; lb < this.binsCount; lb++) {
      const src = lb * 2 * M;
      // conj(x): the kernel forms Σ conj(x_j) v_j = conj(vᴴx), whose modulus is |vᴴx|.
      for (let i = 0; i < m; i++) {
        xs[wo + 2 * i] = snapshot[src + 2 * active[i]];
        xs[wo + 2 * i + 1] = -snapshot[src + 2 * active[i] + 1];
      }
      const pp = w.pPtr + 8 * lb * padded;
      w.exp.conv(w.wPtr, w.rowsPtr, m, w.vPtr + bytes * lb * binStride, blocks, bytes * blockStride, pp, keep, scale);
      const power = this.power;
      for (let d = 0, s = pp / 8, o = lb * D; d < D; d++) power[o + d] = f64[s + d];
    }
  }

  /**
   * Takes over a conventional spectrum computed elsewhere from the same bank (FastMvdrScanner.
   * conventional, vᴴRv/M'² per bin on the bank's mask), with the bank's mask and weight state —
   * seedFrom without its plain scan, for a processor that computed the spectrum per row for a
   * while and now tracks it again.
   * @param power binsCount·D values, bin-major (copied)
   * @throws RangeError for a bank of other bins/channels or a short `power`
   */
  adopt(bank: CovarianceBank, power: Float64Array): void {
    if (bank.bins !== this.binsCount) throw new RangeError(`covariance has ${bank.bins} bins, tracker ${this.binsCount}`);
    if (bank.channels !== this.channels) throw new RangeError(`covariance has ${bank.channels} channels, steering table ${this.channels}`);
    const n = this.binsCount * this.directions;
    if (power.length < n) throw new RangeError(`power holds ${power.length}, needs ${n}`);
    this.#active = Int32Array.from(bank.activeChannels);
    this.#wasmRows();
    this.power.set(power.subarray(0, n));
    this.#wasmPush();
    this.#weightSum = bank.weightSum;
    this.#updates = bank.updates;
    this.#consistent = true;
  }

  /**
   * Re-seeds from a covariance bank holding the same bins (after a mask change, or to start
   * tracking a bank with history): adopts the bank's mask, sets P = vᴴRv/M'² on the active
   * sub-matrix (the plain scan's cost, O(M'²·D) per bin), and takes over the bank's weight state.
   * @param weightSum the bank's c_k. Omit when this tracker was fed every snapshot the bank was
   *   (its own c_k is then the bank's); otherwise required — e.g. {@link recursionWeightSum}(λ,
   *   bank.updates) for a constant λ — because the next update's weight depends on it
   * @throws RangeError for a bank of other bins/channels, or a missing/invalid weightSum
   */
  seedFrom(bank: CovarianceBank, weightSum?: number): void {
    if (bank.bins !== this.binsCount) throw new RangeError(`covariance has ${bank.bins} bins, tracker ${this.binsCount}`);
    if (bank.channels !== this.channels) throw new RangeError(`covariance has ${bank.channels} channels, steering table ${this.channels}`);
    let c: number;
    if (weightSum !== undefined) {
      if (!(weightSum >= 0 && weightSum <= 1)) throw new RangeError(`weightSum must be in 0…1, got ${weightSum}`);
      c = weightSum;
    } else if (bank.updates === this.#updates) {
      c = this.#weightSum;
    } else {
      throw new RangeError(
        `tracker saw ${this.#updates} updates, the bank ${bank.updates}: pass the bank's weightSum ` +
          '(recursionWeightSum(λ, updates) for a constant λ)',
      );
    }
    const active = Int32Array.from(bank.activeChannels);
    const m = active.length;
    if (this.#sub.length !== 2 * m * m) this.#sub = new Float64Array(2 * m * m);
    const sub = this.#sub;
    const v = this.#v;
    const D = this.directions;
    const t = this.table.data;
    const invM2 = 1 / (m * m);
    for (let lb = 0; lb < this.binsCount; lb++) {
      bank.gather(lb, sub);
      for (let d = 0; d < D; d++) {
        const o = this.table.offset(this.binsStart + lb, d);
        for (let i = 0; i < m; i++) {
          v[2 * i] = t[o + 2 * active[i]];
          v[2 * i + 1] = t[o + 2 * active[i] + 1];
        }
        this.power[lb * D + d] = quadForm(sub, 0, v, 0, m) * invM2;
      }
    }
    this.#active = active;
    this.#wasmRows();
    this.#wasmPush();
    this.#weightSum = c;
    this.#updates = bank.updates;
    this.#consistent = true;
  }
}
