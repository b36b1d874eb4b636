/**
 * Bearing rate of the strongest peak, followed over the last seconds of rows (the τ advisor's
 * input; the dashboard feeds it every row it receives).
 *
 * Each row offers its peaks (azimuth, level). The tracker follows one peak: the strongest peak of
 * the row starts a track; later rows extend it with their peak nearest to the track's last azimuth
 * within `gateDeg` (wrapped to ±180°). A row without such a peak is a miss; after `maxMisses`
 * misses in a row the track is dropped and the next row's strongest peak starts a new one.
 * Azimuths are unwrapped as they are appended (each step taken the short way round, ±180°), so a
 * source crossing 0°/360° keeps a straight track.
 *
 * The rate is the least-squares slope of unwrapped azimuth against time over the points of the
 * last `windowS` seconds, where time is the row's sample index / fs (never the arrival time).
 * Memory: a ring of at most `capacity` points (default 1024 ≈ 51 s of rows at 20 rows/s; older
 * points are overwritten).
 */

export interface BearingPeak {
  azimuthDeg: number;
  levelDb: number;
}

export interface BearingRateOptions {
  sampleRateHz: number;
  /** Fit window, seconds of stream time (default 5). */
  windowS?: number;
  /** Largest step from the track's last azimuth still counted as the same source, degrees (default 10). */
  gateDeg?: number;
  /** Rows without a matching peak before the track is dropped (default 10). */
  maxMisses?: number;
  /** Ring size, points (default 1024). */
  capacity?: number;
  /** Fewest points in the window for a rate (default 5). */
  minPoints?: number;
}

export interface BearingRate {
  /** deg/s, counter-clockwise positive. */
  rateDegPerS: number;
  /** The track's latest azimuth, degrees in [0, 360). */
  azimuthDeg: number;
  /** Points in the fit. */
  points: number;
  /** Stream time the fit spans, seconds. */
  spanS: number;
}

/** Wrap an angle difference into (−180, 180]. */
export function wrapDeg180(d: number): number {
  let x = d % 360;
  if (x > 180) x -= 360;
  else if (x <= -180) x += 360;
  return x;
}

export class BearingRateTracker {
  readonly sampleRateHz: number;
  readonly windowS: number;
  readonly gateDeg: number;
  readonly maxMisses: number;
  readonly capacity: number;
  readonly minPoints: number;
  readonly #t: Float64Array;
  readonly #az: Float64Array;
  #count = 0;
  #head = 0;
  #misses = 0;
  #lastSample = -Infinity;

  constructor(o: BearingRateOptions) {
    if (!(o.sampleRateHz > 0)) throw new RangeError(`sampleRateHz must be > 0, got ${o.sampleRateHz}`);
    this.sampleRateHz = o.sampleRateHz;
    this.windowS = o.windowS ?? 5;
    this.gateDeg = o.gateDeg ?? 10;
    this.maxMisses = o.maxMisses ?? 10;
    this.capacity = o.capacity ?? 1024;
    this.minPoints = o.minPoints ?? 5;
    if (!(this.windowS > 0 && this.gateDeg > 0 && this.capacity >= 2 && this.minPoints >= 2)) throw new RangeError('windowS, gateDeg > 0; capacity, minPoints ≥ 2');
    this.#t = new Float64Array(this.capacity);
    this.#az = new Float64Array(this.capacity);
  }

  /** Forget the track (grid or stream change). */
  reset(): void {
    this.#count = 0;
    this.#head = 0;
    this.#misses = 0;
    this.#lastSample = -Infinity;
  }

  /** Feed one row: its sample index and its peaks (any order). Rows going back in time reset the track. */
  push(sampleIndex: number, peaks: readonly BearingPeak[]): void {
    if (!Number.isFinite(sampleIndex)) return;
    if (sampleIndex <= this.#lastSample) {
      if (sampleIndex < this.#lastSample) this.reset();
      else return;
    }
    this.#lastSample = sampleIndex;
    const t = sampleIndex / this.sampleRateHz;
    if (this.#count === 0) {
      let best: BearingPeak | null = null;
      for (const p of peaks) if (Number.isFinite(p.azimuthDeg) && (best === null || p.levelDb > best.levelDb)) best = p;
      if (best) this.#append(t, best.azimuthDeg);
      return;
    }
    const last = this.#az[(this.#head - 1 + this.capacity) % this.capacity];
    let bestStep = Infinity;
    for (const p of peaks) {
      if (!Number.isFinite(p.azimuthDeg)) continue;
      const step = wrapDeg180(p.azimuthDeg - last);
      if (Math.abs(step) <= this.gateDeg && Math.abs(step) < Math.abs(bestStep)) bestStep = step;
    }
    if (bestStep === Infinity) {
      if (++this.#misses > this.maxMisses) this.reset();
      return;
    }
    this.#misses = 0;
    this.#append(t, last + bestStep);
  }

  #append(t: number, unwrappedDeg: number): void {
    this.#t[this.#head] = t;
    this.#az[this.#head] = unwrappedDeg;
    this.#head = (this.#head + 1) % this.capacity;
    if (this.#count < this.capacity) this.#count++;
  }

  /** The least-squares rate over the last windowS seconds, or null with fewer than minPoints. */
  rate(): BearingRate | null {
    if (this.#count === 0) return null;
    const cap = this.capacity;
    const newest = (this.#head - 1 + cap) % cap;
    const tEnd = this.#t[newest];
    // Means first (points within the window), then the centred sums: numerically safe at large t.
    let n = 0;
    let st = 0;
    let sa = 0;
    let tStart = tEnd;
    for (let k = 0; k < this.#count; k++) {
      const i = (newest - k + cap) % cap;
      if (tEnd - this.#t[i] > this.windowS) break;
      n++;
      st += this.#t[i] - tEnd;
      sa += this.#az[i];
      tStart = this.#t[i];
    }
    if (n < this.minPoints) return null;
    const mt = st / n;
    const ma = sa / n;
    let stt = 0;
    let sta = 0;
    for (let k = 0; k < n; k++) {
      const i = (newest - k + cap) % cap;
      const dt = this.#t[i] - tEnd - mt;
      stt += dt * dt;
      sta += dt * (this.#az[i] - ma);
    }
    if (!(stt > 0)) return null;
    const az = this.#az[newest];
    return { rateDegPerS: sta / stt, azimuthDeg: ((az % 360) + 360) % 360, points: n, spanS: tEnd - tStart };
  }
}
