/**
 * The direction-history ring: the last `capacity` rows of broadband level per azimuth, one
 * preallocated Float32Array image per method (row-major, `capacity × nAz`), filled in place. It is
 * deliberately not reactive state: the history view reads it from requestAnimationFrame, prompted
 * by the live connection's row counter. For 2-D grids each stored value is the maximum over
 * elevation at that azimuth.
 */
import type { SpectrumRow } from '../../../shared/messages.ts';

export type HistoryMethod = 'mvdr' | 'conventional';
export const HISTORY_METHODS: readonly HistoryMethod[] = ['mvdr', 'conventional'];

/** Most rows kept (7.5 min at the default 20 rows/s, 3 min at the 50 rows/s maximum). */
export const MAX_HISTORY_ROWS = 9000;
/** Memory the two level images may take together; wide grids keep fewer rows. */
export const HISTORY_BUDGET_BYTES = 64 * 1024 * 1024;
const MIN_HISTORY_ROWS = 64;

export class RowHistory {
  readonly nAz: number;
  readonly capacity: number;
  /** Azimuth axis of the columns, degrees. */
  readonly azimuthDeg: Float64Array;
  /** capacity × nAz levels in dB per method; NaN where the method was off. */
  readonly levels: Record<HistoryMethod, Float32Array>;
  /** Largest level of each stored row, per method (−∞ when the method was off). */
  readonly rowMaxDb: Record<HistoryMethod, Float32Array>;
  /** performance.now() at arrival of each stored row, ms. */
  readonly arrivalMs: Float64Array;
  #count = 0;

  constructor(azimuthDeg: ArrayLike<number>, capacity?: number) {
    this.nAz = azimuthDeg.length;
    if (this.nAz < 1) throw new RangeError('a history needs at least one azimuth');
    const fit = Math.floor(HISTORY_BUDGET_BYTES / (this.nAz * 4 * HISTORY_METHODS.length));
    this.capacity = Math.max(MIN_HISTORY_ROWS, Math.min(capacity ?? MAX_HISTORY_ROWS, MAX_HISTORY_ROWS, fit));
    this.azimuthDeg = Float64Array.from(azimuthDeg);
    const n = this.capacity * this.nAz;
    this.levels = { mvdr: new Float32Array(n).fill(Number.NaN), conventional: new Float32Array(n).fill(Number.NaN) };
    this.rowMaxDb = { mvdr: new Float32Array(this.capacity).fill(-Infinity), conventional: new Float32Array(this.capacity).fill(-Infinity) };
    this.arrivalMs = new Float64Array(this.capacity);
  }

  /** Rows pushed since creation (monotonic; the newest is number count − 1). */
  get count(): number {
    return this.#count;
  }

  /** Rows still held. */
  get stored(): number {
    return Math.min(this.#count, this.capacity);
  }

  /** Oldest row number still held. */
  get oldest(): number {
    return this.#count - this.stored;
  }

  /** Ring slot of row number `n` (valid for oldest ≤ n < count). */
  slot(n: number): number {
    return n % this.capacity;
  }

  /** True when `row` has this history's azimuth count. */
  fits(row: SpectrumRow): boolean {
    return row.nAz === this.nAz;
  }

  /** Store one row (its azimuth count must match); overwrites the oldest when full. */
  push(row: SpectrumRow, arrivalMs: number): void {
    const s = this.#count % this.capacity;
    const nAz = this.nAz;
    const off = s * nAz;
    for (const m of HISTORY_METHODS) {
      const dst = this.levels[m];
      const src = m === 'mvdr' ? row.mvdrDb : row.conventionalDb;
      if (src === null) {
        dst.fill(Number.NaN, off, off + nAz);
        this.rowMaxDb[m][s] = -Infinity;
        continue;
      }
      let rowMax = -Infinity;
      const nEl = row.nEl;
      for (let iAz = 0; iAz < nAz; iAz++) {
        let v = src[iAz];
        for (let iEl = 1; iEl < nEl; iEl++) {
          const w = src[iEl * nAz + iAz];
          if (w > v || v !== v) v = w;
        }
        dst[off + iAz] = v;
        if (v > rowMax) rowMax = v;
      }
      this.rowMaxDb[m][s] = rowMax;
    }
    this.arrivalMs[s] = arrivalMs;
    this.#count++;
  }

  /**
   * A history on another azimuth axis holding this one's rows, each column taken from the
   * nearest old azimuth (NaN beyond the old axis by more than one old step): the history
   * survives a grid change, e.g. the engine coarsening the grid while it sheds load.
   */
  resampled(azimuthDeg: ArrayLike<number>): RowHistory {
    const next = new RowHistory(azimuthDeg, this.capacity);
    const oldAz = this.azimuthDeg;
    const oldStep = oldAz.length > 1 ? Math.abs(oldAz[1] - oldAz[0]) : 360;
    const map = new Int32Array(next.nAz);
    for (let j = 0; j < next.nAz; j++) {
      const a = next.azimuthDeg[j];
      let best = -1;
      let bestD = Infinity;
      for (let i = 0; i < oldAz.length; i++) {
        const d = Math.abs(oldAz[i] - a);
        if (d < bestD) {
          bestD = d;
          best = i;
        }
      }
      map[j] = bestD <= oldStep ? best : -1;
    }
    const first = this.oldest;
    for (let n = first; n < this.#count; n++) {
      const s = this.slot(n);
      const t = n - first;
      for (const m of HISTORY_METHODS) {
        const src = this.levels[m];
        const dst = next.levels[m];
        for (let j = 0; j < next.nAz; j++) dst[t * next.nAz + j] = map[j] < 0 ? Number.NaN : src[s * this.nAz + map[j]];
        next.rowMaxDb[m][t] = this.rowMaxDb[m][s];
      }
      next.arrivalMs[t] = this.arrivalMs[s];
    }
    next.#count = this.stored;
    return next;
  }
}
