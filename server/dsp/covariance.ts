/**
 * Per-bin spatial covariance of the array snapshots, R_b = E[x_b x_bᴴ], kept recursively for the
 * live spectrum or averaged over a whole file for offline analysis.
 *
 * Recursion (forgetting factor λ per hop; exponentially weighted, effective memory 1/(1−λ)
 * snapshots, time constant τ = hop/(fs(1−λ)); recursive least squares, common practice):
 *   S_k = λ S_{k−1} + (1−λ) x_k x_kᴴ,  c_k = λ c_{k−1} + (1−λ),  S_0 = 0, c_0 = 0,
 *   R_k = S_k / c_k,  i.e.  R_k = (1 − w_k) R_{k−1} + w_k x_k x_kᴴ  with  w_k = (1−λ)/c_k.
 * Dividing by c_k = 1 − λᵏ (constant λ) removes the start-up bias toward zero of the plain
 * recursion: R_1 = x_1 x_1ᴴ, and R_k is the normalised weighted mean Σ λ^(k−i) x_i x_iᴴ / Σ λ^(k−i)
 * at every k (the same correction as for exponentially weighted means in general; common
 * practice). The weight w_k = 1/(1 + λ + … + λ^(k−1)) falls from 1 toward 1−λ and is never below
 * max(1/k, 1−λ). Because c_k is tracked, λ may change from one hop to the next.
 *
 * Storage: bin b's M×M matrix, full row-major complex, at data[b·M²·2 …]. The update computes the
 * lower triangle and mirrors each element into the upper one in the same pass; measured here on
 * 61 bins (median µs per hop, Node 20, AMD EPYC): M = 8: 8.3 full vs 6.5 lower+mirror;
 * M = 32: 115 vs 79; M = 64: 931 vs 318 (a separate mirror pass after the lower update: 648).
 * Diagonal imaginary parts are written as exactly 0, so every stored matrix is exactly Hermitian.
 */

/** Largest channel count (matches the Hermitian solver). */
export const MAX_COVARIANCE_CHANNELS = 1024;
/** Largest bank, in doubles (2²⁷ = 1 GiB), so an impossible size fails here with a clear message. */
export const MAX_COVARIANCE_DOUBLES = 2 ** 27;

const MODE_EMPTY = 0;
const MODE_RECURSIVE = 1;
const MODE_ACCUMULATING = 2;
const MODE_AVERAGED = 3;

/**
 * Spatial covariance matrices of M channels for B frequency bins.
 *
 * Snapshot layout (input of `update` / `accumulate`): snapshot[(b·M + m)·2 + {0, 1}], bin-major
 * then channel, interleaved complex, Float64Array or Float32Array, length ≥ 2·B·M.
 */
export class CovarianceBank {
  /** Channel count M. */
  readonly channels: number;
  /** Bin count B. */
  readonly bins: number;
  /** B full row-major M×M complex matrices; bin b at offset b·M²·2. */
  readonly data: Float64Array;
  /** One bin's snapshot converted to float64 (2·M), so the inner loop sees one array type. */
  readonly #x: Float64Array;
  #updates = 0;
  /** c_k of the recursion (see module comment). */
  #weightSum = 0;
  #mode = MODE_EMPTY;
  #active: Int32Array;

  /**
   * @param channels M, integer 1…1024
   * @param bins B, integer ≥ 1, with B·M²·2 ≤ 2²⁷
   */
  constructor(channels: number, bins: number) {
    if (!Number.isInteger(channels) || channels < 1 || channels > MAX_COVARIANCE_CHANNELS) {
      throw new RangeError(`channels must be an integer in 1…${MAX_COVARIANCE_CHANNELS}, got ${channels}`);
    }
    if (!Number.isInteger(bins) || bins < 1) {
      throw new RangeError(`bins must be an integer ≥ 1, got ${bins}`);
    }
    const doubles = bins * channels * channels * 2;
    if (doubles > MAX_COVARIANCE_DOUBLES) {
      throw new RangeError(
        `bins·channels²·2 = ${doubles} doubles exceeds the limit of ${MAX_COVARIANCE_DOUBLES} (1 GiB); ` +
          'use fewer bins per bank or fewer channels',
      );
    }
    this.channels = channels;
    this.bins = bins;
    this.data = new Float64Array(doubles);
    this.#x = new Float64Array(2 * channels);
    this.#active = new Int32Array(channels);
    for (let m = 0; m < channels; m++) this.#active[m] = m;
  }

  /**
   * c_k of the recursion (module comment): the weight state the next update continues from, also
   * after hops left out with λ^k (so not recursionWeightSum(λ, updates) then).
   */
  get weightSum(): number {
    return this.#weightSum;
  }

  /** Snapshots folded in since construction or the last `reset()` (either mode). */
  get updates(): number {
    return this.#updates;
  }

  /** Indices of the channels included by the mask, ascending (a new array after each `setMask`). */
  get activeChannels(): Int32Array {
    return this.#active;
  }

  /** Offset of bin b's matrix in `data` (b·M²·2). */
  matrixOffset(bin: number): number {
    this.#requireBin(bin);
    return bin * this.channels * this.channels * 2;
  }

  /** Zeroes every matrix and the counters; the mask is kept. */
  reset(): void {
    this.data.fill(0);
    this.#updates = 0;
    this.#weightSum = 0;
    this.#mode = MODE_EMPTY;
  }

  /**
   * One hop of the recursion for every bin: R_b ← (1 − w) R_b + w x_b x_bᴴ, w = (1−λ)/c_k (see
   * the module comment; w = 1 for the first snapshot after reset). All channels are updated,
   * masked or not, so unmasking needs no restart.
   * @param snapshot 2·B·M values, layout above; must be finite (checked before anything changes)
   * @param lambda forgetting factor λ, 0 < λ < 1 (λ = 1: use accumulate + finishAverage)
   */
  update(snapshot: Float64Array | Float32Array, lambda: number): void {
    if (!(lambda > 0 && lambda < 1)) {
      throw new RangeError(
        `lambda must be in (0, 1) for update(), got ${lambda}; ` +
          'for λ = 1 (a plain average) use accumulate() and finishAverage()',
      );
    }
    if (this.#mode === MODE_ACCUMULATING || this.#mode === MODE_AVERAGED) {
      throw new Error('CovarianceBank: update() after accumulate()/finishAverage(); call reset() first');
    }
    this.#requireSnapshot(snapshot);
    const weightSum = lambda * this.#weightSum + (1 - lambda);
    const w = (1 - lambda) / weightSum;
    this.#fold(snapshot, 1 - w, w);
    this.#weightSum = weightSum;
    this.#updates++;
    this.#mode = MODE_RECURSIVE;
  }

  /**
   * Adds x_b x_bᴴ to every bin and counts the snapshot (offline: average over a whole file).
   * @param snapshot 2·B·M values, layout above; must be finite
   */
  accumulate(snapshot: Float64Array | Float32Array): void {
    if (this.#mode === MODE_RECURSIVE || this.#mode === MODE_AVERAGED) {
      throw new Error(
        'CovarianceBank: accumulate() after update() or finishAverage(); call reset() first',
      );
    }
    this.#requireSnapshot(snapshot);
    this.#fold(snapshot, 1, 1);
    this.#updates++;
    this.#mode = MODE_ACCUMULATING;
  }

  /** Divides the accumulated sums by the snapshot count, giving the sample covariance (1/K) Σ x xᴴ. */
  finishAverage(): void {
    if (this.#mode !== MODE_ACCUMULATING) {
      throw new Error('CovarianceBank: finishAverage() needs at least one accumulate() since reset()');
    }
    const scale = 1 / this.#updates;
    const data = this.data;
    for (let i = 0; i < data.length; i++) data[i] *= scale;
    this.#mode = MODE_AVERAGED;
  }

  /**
   * Selects the channels the solvers see. Masked channels stay in storage and keep being updated.
   * @param active length M; true = include
   * @throws RangeError on a wrong length or when no channel is active
   */
  setMask(active: ArrayLike<boolean>): void {
    const m = this.channels;
    if (active.length !== m) {
      throw new RangeError(`mask length must equal channels (${m}), got ${active.length}`);
    }
    let count = 0;
    for (let i = 0; i < m; i++) if (active[i]) count++;
    if (count === 0) throw new RangeError('mask must leave at least one channel active, got none');
    const list = new Int32Array(count);
    for (let i = 0, q = 0; i < m; i++) if (active[i]) list[q++] = i;
    this.#active = list;
  }

  /**
   * Copies the active sub-matrix of bin b (rows and columns of `activeChannels`) as a full
   * row-major M'×M' complex matrix, M' = activeChannels.length.
   * @param out length ≥ 2·M'²; must not overlap `data`
   */
  gather(bin: number, out: Float64Array): void {
    this.#requireBin(bin);
    const active = this.#active;
    const mp = active.length;
    if (out.length < 2 * mp * mp) {
      throw new RangeError(`out needs ${2 * mp * mp} entries for ${mp} active channels, got ${out.length}`);
    }
    const m = this.channels;
    const data = this.data;
    const base = bin * m * m * 2;
    for (let r = 0; r < mp; r++) {
      const src = base + active[r] * m * 2;
      const dst = r * mp * 2;
      for (let c = 0; c < mp; c++) {
        const s = src + active[c] * 2;
        out[dst + 2 * c] = data[s];
        out[dst + 2 * c + 1] = data[s + 1];
      }
    }
  }

  /**
   * Picks the active entries of a length-M complex vector (e.g. a steering vector).
   * @param out length ≥ 2·M'; must not overlap `v`
   * @param v 2·M values from `vOffset`
   */
  gatherVector(out: Float64Array, v: Float64Array, vOffset = 0): void {
    const active = this.#active;
    const mp = active.length;
    if (out.length < 2 * mp) throw new RangeError(`out needs ${2 * mp} entries, got ${out.length}`);
    if (!Number.isInteger(vOffset) || vOffset < 0 || vOffset + 2 * this.channels > v.length) {
      throw new RangeError(`v needs ${2 * this.channels} entries from offset ${vOffset}, has ${v.length}`);
    }
    for (let q = 0; q < mp; q++) {
      const s = vOffset + active[q] * 2;
      out[2 * q] = v[s];
      out[2 * q + 1] = v[s + 1];
    }
  }

  #requireBin(bin: number): void {
    if (!Number.isInteger(bin) || bin < 0 || bin >= this.bins) {
      throw new RangeError(`bin must be an integer in 0…${this.bins - 1}, got ${bin}`);
    }
  }

  /** Length and finiteness, before anything is modified: one NaN would poison R until reset. */
  #requireSnapshot(snapshot: Float64Array | Float32Array): void {
    const n = 2 * this.bins * this.channels;
    if (snapshot.length < n) {
      throw new RangeError(
        `snapshot needs 2·bins·channels = ${n} values (bin-major, then channel), got ${snapshot.length}`,
      );
    }
    for (let i = 0; i < n; i++) {
      const s = snapshot[i];
      if (!(s - s === 0)) {
        const channel = Math.floor(i / 2) % this.channels;
        const bin = Math.floor(i / (2 * this.channels));
        throw new RangeError(`snapshot value at bin ${bin}, channel ${channel} is not finite: ${s}`);
      }
    }
  }

  /** R_b ← keep·R_b + weight·x_b x_bᴴ for every bin (lower triangle computed, upper mirrored). */
  #fold(snapshot: Float64Array | Float32Array, keep: number, weight: number): void {
    const m = this.channels;
    const m2 = 2 * m;
    const x = this.#x;
    const data = this.data;
    for (let b = 0; b < this.bins; b++) {
      const src = b * m2;
      for (let i = 0; i < m2; i++) x[i] = snapshot[src + i];
      const base = b * m * m2;
      for (let i = 0; i < m; i++) {
        const xr = x[2 * i];
        const xi = x[2 * i + 1];
        const wr = weight * xr;
        const wi = weight * xi;
        let p = base + i * m2; // (i, j), walking the row
        let q = base + 2 * i; // (j, i), walking the column
        for (let j = 0; j < i; j++, p += 2, q += m2) {
          const yr = x[2 * j];
          const yi = x[2 * j + 1];
          // x_i · conj(x_j)
          const re = keep * data[p] + (wr * yr + wi * yi);
          const im = keep * data[p + 1] + (wi * yr - wr * yi);
          data[p] = re;
          data[p + 1] = im;
          data[q] = re;
          data[q + 1] = -im;
        }
        data[p] = keep * data[p] + (wr * xr + wi * xi);
        data[p + 1] = 0;
      }
    }
  }
}
