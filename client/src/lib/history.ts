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

/** A spacing above this many times the previous spacing is a gap (rows skipped or shed). */
export const GAP_FACTOR = 1.5;
/**
 * A step of the sample index backwards, or forwards by more than this, is a discontinuity (a new
 * stream, a clock reset), not elapsed time: the row is then placed one row duration later.
 */
export const MAX_ROW_GAP_S = 3600;

/**
 * Time between two rows from their sample indices, seconds: (index − prevIndex) / sampleRateHz;
 * for a discontinuity (a step backwards, or more than {@link MAX_ROW_GAP_S}) `fallbackS`.
 */
export function rowSpacingS(prevIndex: number, index: number, sampleRateHz: number, fallbackS: number): number {
  const d = (index - prevIndex) / sampleRateHz;
  return d >= 0 && d <= MAX_ROW_GAP_S ? d : fallbackS;
}

/**
 * The time a row covers, seconds, given its spacing to the previous row and the previous row's
 * spacing and duration: the spacing, unless it is a gap (above {@link GAP_FACTOR} × the previous
 * spacing: rows skipped or shed), when the row keeps the previous row's duration and the rest of
 * the gap stays empty. A lasting change of rate is taken from the second row on (its spacing then
 * matches the one before). The first spacing (no previous one) is taken as it is.
 */
export function rowDurationS(spacingS: number, prevSpacingS: number, prevDurationS: number): number {
  if (prevSpacingS > 0 && spacingS > GAP_FACTOR * prevSpacingS) return prevDurationS;
  return spacingS;
}

export class RowHistory {
  readonly nAz: number;
  readonly capacity: number;
  /** Azimuth axis of the columns, degrees. */
  readonly azimuthDeg: Float64Array;
  /** capacity × nAz levels in dB per method; NaN where the method was off. */
  readonly levels: Record<HistoryMethod, Float32Array>;
  /** Largest level of each stored row, per method (−∞ when the method was off). */
  readonly rowMaxDb: Record<HistoryMethod, Float32Array>;
  /** performance.now() at arrival of each stored row, ms (informational: placement uses timeS). */
  readonly arrivalMs: Float64Array;
  /** Stream-clock sample index of each stored row (the row's `sampleIndex`). */
  readonly sampleIndex: Float64Array;
  /**
   * Each stored row's place on the history's own time line, seconds: the previous row's plus the
   * spacing of their sample indices over the sample rate ({@link rowSpacingS}). Non-decreasing, so
   * rows arriving late or in bursts land at their true time and skipped rows leave their true gap.
   */
  readonly timeS: Float64Array;
  /**
   * How much time each stored row covers, seconds (its top edge is timeS): the spacing to the
   * previous row, or after a gap the previous row's duration ({@link rowDurationS}).
   */
  readonly durationS: Float64Array;
  /** 1 where the stored row is partial (SpectrumRow.partial: some bins missing), else 0. */
  readonly partial: Uint8Array;
  #count = 0;
  #partialHeld = 0;

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
    this.sampleIndex = new Float64Array(this.capacity);
    this.timeS = new Float64Array(this.capacity);
    this.durationS = new Float64Array(this.capacity);
    this.partial = new Uint8Array(this.capacity);
  }

  /** Partial rows among the rows still held (0: nothing to mark). */
  get partialHeld(): number {
    return this.#partialHeld;
  }

  /**
   * The newest row at or before (older than or as old as) time line position `tS`, or −1 when every
   * stored row is later. O(log rows).
   */
  rowAtOrBefore(tS: number): number {
    let lo = this.oldest;
    let hi = this.#count - 1;
    if (hi < lo || this.timeS[this.slot(lo)] > tS) return -1;
    while (lo < hi) {
      const mid = Math.ceil((lo + hi) / 2);
      if (this.timeS[this.slot(mid)] <= tS) lo = mid;
      else hi = mid - 1;
    }
    return lo;
  }

  /**
   * The row drawn at time line position `tS`: the oldest row whose span [timeS − durationS, timeS]
   * reaches `tS`, or −1 when `tS` falls in a gap, after the newest row or before the oldest held.
   */
  rowCovering(tS: number): number {
    const below = this.rowAtOrBefore(tS);
    if (below >= 0 && this.timeS[this.slot(below)] === tS) return below;
    const n = below < 0 ? this.oldest : below + 1;
    if (n >= this.#count) return -1;
    const s = this.slot(n);
    return this.timeS[s] - this.durationS[s] <= tS + 1e-9 ? n : -1;
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

  /**
   * Store one row (its azimuth count must match); overwrites the oldest when full. `sampleRateHz`
   * (the stream's rate) places the row in time by its sample index; without it (not known yet)
   * the arrival time stands in.
   */
  push(row: SpectrumRow, arrivalMs: number, sampleRateHz?: number): void {
    const s = this.#count % this.capacity;
    if (this.#count === 0) {
      this.timeS[s] = 0;
      this.durationS[s] = 0;
    } else {
      const p = (this.#count - 1) % this.capacity;
      const prevSpacingS = this.#count >= 2 ? this.timeS[p] - this.timeS[(this.#count - 2) % this.capacity] : 0;
      const fallbackS = this.durationS[p];
      const spacing =
        sampleRateHz !== undefined && sampleRateHz > 0
          ? rowSpacingS(this.sampleIndex[p], row.sampleIndex, sampleRateHz, fallbackS)
          : rowSpacingS(this.arrivalMs[p], arrivalMs, 1000, fallbackS);
      this.timeS[s] = this.timeS[p] + spacing;
      this.durationS[s] = rowDurationS(spacing, prevSpacingS, this.durationS[p]);
    }
    this.sampleIndex[s] = row.sampleIndex;
    // The slot's old row (if the ring is full) leaves, the new one comes.
    const wasPartial = this.#count >= this.capacity ? this.partial[s] : 0;
    const isPartial = row.partial === true ? 1 : 0;
    this.#partialHeld += isPartial - wasPartial;
    this.partial[s] = isPartial;
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
      next.sampleIndex[t] = this.sampleIndex[s];
      next.timeS[t] = this.timeS[s];
      next.durationS[t] = this.durationS[s];
      next.partial[t] = this.partial[s];
    }
    next.#partialHeld = this.#partialHeld;
    next.#count = this.stored;
    return next;
  }
}
