/**
 * Clock offset and drift of the members of a merged array (several acquisition units feeding one
 * array), two ways:
 *
 * (a) {@link ArrivalDrift}: a member's media time (sample index / fs) against the local arrival
 *     time of its packets. Network and queueing delays only ever add, so the fit follows the lower
 *     envelope of the delays, not their mean: the smallest delay of each bucket of media time
 *     (minimum filtering, V. Paxson, "On calibrating measurements of packet transit times", ACM
 *     SIGMETRICS 1998, from memory), then a line through those minima. Two fits are offered:
 *     `least-squares` (ordinary least squares on the bucket minima, then buckets far above the line
 *     dropped and the line fitted again) and `lower-hull` (the linear-programming fit of S. B. Moon,
 *     P. Skelly, D. Towsley, "Estimation and removal of clock skew from network delay measurements",
 *     IEEE INFOCOM 1999, from memory: the line below every point that minimises the summed vertical
 *     distance, which is the edge of the lower convex hull above the mean abscissa).
 *     The slope is the member's drift relative to the local clock; the difference of two members'
 *     drifts is their relative drift.
 *
 * (b) {@link ReferenceOffset}: where one input of every unit is fed the same signal, the
 *     generalized cross-correlation with phase transform (GCC-PHAT, server/dsp/gcc-phat.ts;
 *     C. H. Knapp & G. C. Carter, "The generalized correlation method for estimation of time
 *     delay", IEEE Trans. ASSP 24(4), 1976) between a member's reference and the base member's,
 *     window by window; the peak is
 *     refined to a fraction of a sample by maximising the band-limited correlation itself (Newton
 *     steps on its derivative), which is free of the bias of a parabola through three samples of
 *     the peak. The offset in µs per window, and the drift in ppm as the slope of the offsets over
 *     time (µs per second = ppm).
 *
 * Sign convention (both methods): positive drift = the member's sample clock runs fast (against
 * the local clock for (a), against the base member for (b)); positive offset = the member's samples
 * of one event carry a later sample index than the base member's, i.e. its channels are delayed on
 * the merged timeline. That is the sense of the array file's `offsetUs` and of a calibration delay,
 * which the front end advances.
 */
import { GccPhat, type GccPhatOptions, type GccPhatResult } from '../dsp/gcc-phat.ts';

// ---------------------------------------------------------------------------------------------
// (a) arrival time against media time
// ---------------------------------------------------------------------------------------------

export type ArrivalFit = 'least-squares' | 'lower-hull';

export interface ArrivalDriftOptions {
  sampleRateHz: number;
  /** Width of a bucket of media time whose smallest delay is kept, seconds (default 1). */
  bucketS?: number;
  /** Buckets kept (a ring; default 600, ten minutes at 1 s): the memory bound and the fit's span. */
  maxBuckets?: number;
  /** No estimate before this many buckets hold a point (default 10). */
  minBuckets?: number;
  /**
   * Line fit over the bucket minima (default `lower-hull`: with 60 s of 1–20 ms packets and a few
   * ms of exponential or uniform jitter it came 2–4× closer than least squares, test/unit/drift.test.ts).
   */
  fit?: ArrivalFit;
  /**
   * A point this far below the fitted envelope, seconds, means the media clock jumped (delays cannot
   * shrink that much): the estimator starts over from that point (default 0.5).
   */
  resetBelowS?: number;
}

export interface ArrivalDriftEstimate {
  /** Drift of the member's clock against the local clock, ppm (positive: the member runs fast). */
  ppm: number;
  /**
   * Lower-envelope delay at the newest bucket: arrival time − media time, ms. Its origin is
   * arbitrary (the local clock's zero, sample 0); between members sharing a sample clock the
   * difference is their relative latency.
   */
  offsetMs: number;
  /** Buckets in the fit. */
  points: number;
  /** Media time the buckets span, seconds. */
  spanS: number;
  /** Root-mean-square distance of the fitted minima from the line, µs. */
  residualUs: number;
}

/**
 * Drift of one member's sample clock against the local clock, from (sample index, arrival time)
 * pairs of its packets. Memory: a ring of `maxBuckets` buckets. {@link add} is O(1); {@link estimate}
 * is O(buckets · log buckets) and meant for the status rate, not per packet.
 */
export class ArrivalDrift {
  readonly sampleRateHz: number;
  readonly bucketS: number;
  readonly maxBuckets: number;
  readonly minBuckets: number;
  readonly fit: ArrivalFit;
  readonly resetBelowS: number;
  /** Bucket number held in each slot (NaN: empty). */
  readonly #key: Float64Array;
  /** Media time (s since the origin) and delay (s) of the bucket's smallest delay. */
  readonly #x: Float64Array;
  readonly #y: Float64Array;
  /** Scratch for the fit (sorted copies, residuals), preallocated. */
  readonly #fx: Float64Array;
  readonly #fy: Float64Array;
  readonly #fr: Float64Array;
  readonly #res: Float64Array;
  readonly #sorted: Float64Array;
  readonly #hull: Int32Array;
  #s0 = 0;
  #a0Ms = 0;
  #started = false;
  #newest = -Infinity;
  /** The last fit, for the jump check: delay ≈ #fitA + #fitB · x. */
  #fitA = NaN;
  #fitB = NaN;
  #resets = 0;
  #points = 0;

  constructor(options: ArrivalDriftOptions) {
    const { sampleRateHz } = options;
    const bucketS = options.bucketS ?? 1;
    const maxBuckets = options.maxBuckets ?? 600;
    const minBuckets = options.minBuckets ?? 10;
    const resetBelowS = options.resetBelowS ?? 0.5;
    if (!(Number.isFinite(sampleRateHz) && sampleRateHz > 0)) throw new RangeError(`ArrivalDrift: sampleRateHz must be > 0, got ${sampleRateHz}`);
    if (!(Number.isFinite(bucketS) && bucketS > 0 && bucketS <= 3600)) throw new RangeError(`ArrivalDrift: bucketS must be in (0, 3600], got ${bucketS}`);
    if (!Number.isInteger(maxBuckets) || maxBuckets < 3 || maxBuckets > 100_000) throw new RangeError(`ArrivalDrift: maxBuckets must be an integer in [3, 100000], got ${maxBuckets}`);
    if (!Number.isInteger(minBuckets) || minBuckets < 2 || minBuckets > maxBuckets) throw new RangeError(`ArrivalDrift: minBuckets must be an integer in [2, maxBuckets], got ${minBuckets}`);
    if (!(Number.isFinite(resetBelowS) && resetBelowS > 0)) throw new RangeError(`ArrivalDrift: resetBelowS must be > 0, got ${resetBelowS}`);
    const fit = options.fit ?? 'lower-hull';
    if (fit !== 'least-squares' && fit !== 'lower-hull') throw new RangeError(`ArrivalDrift: fit must be least-squares or lower-hull, got ${String(fit)}`);
    this.sampleRateHz = sampleRateHz;
    this.bucketS = bucketS;
    this.maxBuckets = maxBuckets;
    this.minBuckets = minBuckets;
    this.fit = fit;
    this.resetBelowS = resetBelowS;
    this.#key = new Float64Array(maxBuckets).fill(NaN);
    this.#x = new Float64Array(maxBuckets);
    this.#y = new Float64Array(maxBuckets);
    this.#fx = new Float64Array(maxBuckets);
    this.#fy = new Float64Array(maxBuckets);
    this.#fr = new Float64Array(maxBuckets);
    this.#res = new Float64Array(maxBuckets);
    this.#sorted = new Float64Array(maxBuckets);
    this.#hull = new Int32Array(maxBuckets);
  }

  /** Times the estimator started over (a media-clock jump seen, or {@link reset}). */
  get resets(): number {
    return this.#resets;
  }

  /** Pairs accepted since the last start. */
  get points(): number {
    return this.#points;
  }

  /**
   * One packet: the sample index of its first sample on the member's clock and when it arrived.
   * Non-finite values are ignored.
   * @param arrivalMs local monotonic clock, milliseconds (performance.now())
   */
  add(sampleIndex: number, arrivalMs: number): void {
    if (!Number.isFinite(sampleIndex) || !Number.isFinite(arrivalMs)) return;
    if (!this.#started) {
      this.#s0 = sampleIndex;
      this.#a0Ms = arrivalMs;
      this.#started = true;
    }
    const x = (sampleIndex - this.#s0) / this.sampleRateHz;
    const y = (arrivalMs - this.#a0Ms) / 1000 - x;
    const k = Math.floor(x / this.bucketS);
    // A point far below the envelope (the media clock jumped ahead) or older than the ring (it
    // jumped back): the relation changed, start over from here.
    const below = Number.isFinite(this.#fitA) && y < this.#fitA + this.#fitB * x - this.resetBelowS;
    if (below || k <= this.#newest - this.maxBuckets) {
      this.#restart();
      this.add(sampleIndex, arrivalMs);
      return;
    }
    if (k > this.#newest) this.#newest = k;
    const n = this.maxBuckets;
    const slot = ((k % n) + n) % n;
    this.#points++;
    if (this.#key[slot] !== k) {
      this.#key[slot] = k;
      this.#x[slot] = x;
      this.#y[slot] = y;
    } else if (y < this.#y[slot]) {
      this.#x[slot] = x;
      this.#y[slot] = y;
    }
  }

  /** Forgets every point (after a discontinuity of the member's clock). */
  reset(): void {
    this.#restart();
  }

  #restart(): void {
    this.#key.fill(NaN);
    this.#started = false;
    this.#newest = -Infinity;
    this.#fitA = NaN;
    this.#fitB = NaN;
    this.#points = 0;
    this.#resets++;
  }

  /** The drift and envelope offset, or null with fewer than `minBuckets` buckets. */
  estimate(): ArrivalDriftEstimate | null {
    // Gather the live buckets oldest first (keys newest−n+1 … newest map to distinct slots).
    const n = this.maxBuckets;
    const fx = this.#fx;
    const fy = this.#fy;
    let count = 0;
    if (this.#newest === -Infinity) return null;
    for (let k = this.#newest - n + 1; k <= this.#newest; k++) {
      const slot = ((k % n) + n) % n;
      if (this.#key[slot] !== k) continue;
      fx[count] = this.#x[slot];
      fy[count] = this.#y[slot];
      count++;
    }
    if (count < this.minBuckets) return null;
    const spanS = fx[count - 1] - fx[0];
    if (!(spanS > 0)) return null;
    const line = this.fit === 'lower-hull' ? this.#hullFit(count) : this.#leastSquares(count);
    if (!line) return null;
    const [a, b, used] = line;
    this.#fitA = a;
    this.#fitB = b;
    let ss = 0;
    let m = 0;
    for (let i = 0; i < count; i++) {
      const r = fy[i] - (a + b * fx[i]);
      if (this.fit === 'least-squares' && this.#fr[i] < 0) continue; // dropped as congested
      ss += r * r;
      m++;
    }
    const xNew = fx[count - 1];
    return {
      ppm: (-b / (1 + b)) * 1e6,
      offsetMs: this.#a0Ms - (this.#s0 / this.sampleRateHz) * 1000 + (a + b * xNew) * 1000,
      points: used,
      spanS,
      residualUs: Math.sqrt(ss / Math.max(1, m)) * 1e6,
    };
  }

  /**
   * Least squares through the bucket minima; then the buckets more than 3 robust standard
   * deviations (1.4826 · median absolute deviation) above the line, and more than 50 µs, are
   * left out (a whole bucket delayed by congestion) and the line fitted again. Marks dropped
   * buckets with #fr[i] = −1.
   */
  #leastSquares(count: number): [number, number, number] | null {
    const fx = this.#fx;
    const fy = this.#fy;
    const fr = this.#fr;
    fr.fill(1, 0, count);
    let line = lineFit(fx, fy, fr, count);
    if (!line) return null;
    // Residuals, their median and median absolute deviation.
    const res = this.#res;
    const sorted = this.#sorted.subarray(0, count);
    for (let i = 0; i < count; i++) res[i] = fy[i] - (line[0] + line[1] * fx[i]);
    sorted.set(res.subarray(0, count));
    sorted.sort();
    const med = median(sorted);
    for (let i = 0; i < count; i++) sorted[i] = Math.abs(res[i] - med);
    sorted.sort();
    const scale = 1.4826 * median(sorted);
    const limit = med + Math.max(3 * scale, 50e-6);
    let used = 0;
    for (let i = 0; i < count; i++) {
      if (res[i] > limit) fr[i] = -1;
      else used++;
    }
    if (used < count && used >= 2) line = lineFit(fx, fy, fr, count) ?? line;
    return [line[0], line[1], used];
  }

  /**
   * Moon–Skelly–Towsley: the line y = a + b·x with y_i ≥ a + b·x_i for every point that minimises
   * Σ (y_i − a − b·x_i), i.e. maximises a + b·x̄: the lower convex hull's edge spanning x̄.
   * Points are sorted by x (buckets in order); Andrew's monotone chain builds the hull.
   */
  #hullFit(count: number): [number, number, number] {
    const fx = this.#fx;
    const fy = this.#fy;
    const hull = this.#hull;
    this.#fr.fill(1, 0, count);
    let h = 0;
    let meanX = 0;
    for (let i = 0; i < count; i++) {
      meanX += fx[i];
      // Pop while the last two hull points and i do not make a counter-clockwise (convex from below) turn.
      while (h >= 2) {
        const o = hull[h - 2];
        const p = hull[h - 1];
        const cross = (fx[p] - fx[o]) * (fy[i] - fy[o]) - (fy[p] - fy[o]) * (fx[i] - fx[o]);
        if (cross > 0) break;
        h--;
      }
      hull[h++] = i;
    }
    meanX /= count;
    let e = 0;
    while (e < h - 2 && fx[hull[e + 1]] < meanX) e++;
    const p = hull[e];
    const q = hull[e + 1];
    const b = (fy[q] - fy[p]) / (fx[q] - fx[p]);
    return [fy[p] - b * fx[p], b, count];
  }
}

/** Least-squares line through the points with flag[i] > 0; null when they span no x range. */
function lineFit(x: Float64Array, y: Float64Array, flag: Float64Array, n: number): [number, number] | null {
  let sw = 0;
  let sx = 0;
  let sy = 0;
  for (let i = 0; i < n; i++) {
    if (flag[i] <= 0) continue;
    sw++;
    sx += x[i];
    sy += y[i];
  }
  if (sw < 2) return null;
  const mx = sx / sw;
  const my = sy / sw;
  let sxx = 0;
  let sxy = 0;
  for (let i = 0; i < n; i++) {
    if (flag[i] <= 0) continue;
    const dx = x[i] - mx;
    sxx += dx * dx;
    sxy += dx * (y[i] - my);
  }
  if (!(sxx > 0)) return null;
  const b = sxy / sxx;
  return [my - b * mx, b];
}

function median(sorted: Float64Array): number {
  const n = sorted.length;
  const h = n >> 1;
  return n % 2 === 1 ? sorted[h] : 0.5 * (sorted[h - 1] + sorted[h]);
}

// ---------------------------------------------------------------------------------------------
// (b) GCC-PHAT between reference channels
// ---------------------------------------------------------------------------------------------

export interface ReferenceOffsetOptions extends GccPhatOptions {
  /** Windows below this quality give no offset (default 0.2; independent noise gives ~1/√bins). */
  minQuality?: number;
  /** Windows kept for the drift fit (a ring; default 512, 87 s at N = 8192, 48 kHz). */
  maxWindows?: number;
  /** This many poor windows in a row mean the reference is gone: the history is dropped (default 3). */
  poorWindowsToForget?: number;
}

export interface ReferenceEstimate {
  /**
   * Offset of the member behind the base, µs: the drift line at the newest window once four
   * windows are kept, otherwise their mean.
   */
  offsetUs: number;
  /** The newest window's own offset, µs. */
  lastOffsetUs: number;
  /** Slope of the offsets over time, ppm (µs per second); null before four windows span 1 s. */
  driftPpm: number | null;
  /** Quality of the newest good window (GccPhatResult.quality). */
  quality: number;
  /** Windows in the fit. */
  windows: number;
  /** Time the windows span, seconds (centre of the first to centre of the newest). */
  spanS: number;
}

/**
 * Offset and drift of one member against the base member from their reference channels, fed span
 * by span with both references on the same sample indices. Consecutive, non-overlapping windows of
 * N samples; a span where either reference is absent ({@link skip}) or a jump in the sample index
 * discards the partial window. Memory: two windows and a ring of `maxWindows` results.
 */
export class ReferenceOffset {
  readonly gcc: GccPhat;
  readonly minQuality: number;
  readonly maxWindows: number;
  readonly poorWindowsToForget: number;
  readonly #bx: Float64Array;
  readonly #by: Float64Array;
  #fill = 0;
  #first = 0;
  #next = NaN;
  /** Ring of good windows: centre time (s, sample index / fs) and offset (µs). */
  readonly #t: Float64Array;
  readonly #o: Float64Array;
  readonly #flag: Float64Array;
  /** Scratch for the fit. */
  readonly #tx: Float64Array;
  readonly #oy: Float64Array;
  #count = 0;
  #head = 0;
  #poor = 0;
  #lastQuality = 0;
  #lastOffsetUs = NaN;
  #windows = 0;
  #rejected = 0;
  #last: GccPhatResult | null = null;

  constructor(options: ReferenceOffsetOptions) {
    this.gcc = new GccPhat(options);
    const minQuality = options.minQuality ?? 0.2;
    const maxWindows = options.maxWindows ?? 512;
    const poor = options.poorWindowsToForget ?? 3;
    if (!(minQuality > 0 && minQuality < 1)) throw new RangeError(`ReferenceOffset: minQuality must be in (0, 1), got ${minQuality}`);
    if (!Number.isInteger(maxWindows) || maxWindows < 4 || maxWindows > 100_000) throw new RangeError(`ReferenceOffset: maxWindows must be an integer in [4, 100000], got ${maxWindows}`);
    if (!Number.isInteger(poor) || poor < 1) throw new RangeError(`ReferenceOffset: poorWindowsToForget must be an integer ≥ 1, got ${poor}`);
    this.minQuality = minQuality;
    this.maxWindows = maxWindows;
    this.poorWindowsToForget = poor;
    const n = this.gcc.windowSamples;
    this.#bx = new Float64Array(n);
    this.#by = new Float64Array(n);
    this.#t = new Float64Array(maxWindows);
    this.#o = new Float64Array(maxWindows);
    this.#flag = new Float64Array(maxWindows).fill(1);
    this.#tx = new Float64Array(maxWindows);
    this.#oy = new Float64Array(maxWindows);
  }

  /** Windows analysed, and those refused for low quality. */
  get counters(): { windows: number; rejected: number } {
    return { windows: this.#windows, rejected: this.#rejected };
  }

  /** The newest window's result (null before the first). */
  get lastWindow(): GccPhatResult | null {
    return this.#last;
  }

  /**
   * Both references over [sampleIndex, sampleIndex + n).
   * @param base the base member's reference, n samples from baseOffset
   * @param member this member's reference, n samples from memberOffset
   */
  push(base: Float32Array | Float64Array, member: Float32Array | Float64Array, n: number, sampleIndex: number, baseOffset = 0, memberOffset = 0): void {
    if (sampleIndex !== this.#next) this.#fill = 0;
    this.#next = sampleIndex + n;
    const size = this.gcc.windowSamples;
    let i = 0;
    while (i < n) {
      if (this.#fill === 0) this.#first = sampleIndex + i;
      const take = Math.min(n - i, size - this.#fill);
      const bx = this.#bx;
      const by = this.#by;
      const f = this.#fill;
      for (let j = 0; j < take; j++) {
        bx[f + j] = base[baseOffset + i + j];
        by[f + j] = member[memberOffset + i + j];
      }
      this.#fill += take;
      i += take;
      if (this.#fill === size) {
        this.#fill = 0;
        this.#window();
      }
    }
  }

  /** A span where either reference is missing: the partial window is discarded. */
  skip(): void {
    this.#fill = 0;
    this.#next = NaN;
  }

  /** Forgets the history (after a discontinuity). */
  reset(): void {
    this.skip();
    this.#count = 0;
    this.#head = 0;
    this.#poor = 0;
    this.#lastQuality = 0;
    this.#lastOffsetUs = NaN;
  }

  #window(): void {
    const res = this.gcc.analyze(this.#bx, this.#by);
    this.#last = res;
    this.#windows++;
    if (!(res.quality >= this.minQuality) || !Number.isFinite(res.lagSamples)) {
      this.#rejected++;
      if (++this.#poor >= this.poorWindowsToForget) {
        this.#count = 0;
        this.#head = 0;
        this.#lastOffsetUs = NaN;
      }
      return;
    }
    this.#poor = 0;
    const fs = this.gcc.sampleRateHz;
    const centreS = (this.#first + this.gcc.windowSamples / 2) / fs;
    const offsetUs = (res.lagSamples / fs) * 1e6;
    this.#t[this.#head] = centreS;
    this.#o[this.#head] = offsetUs;
    this.#head = (this.#head + 1) % this.maxWindows;
    if (this.#count < this.maxWindows) this.#count++;
    this.#lastQuality = res.quality;
    this.#lastOffsetUs = offsetUs;
  }

  /** Offset and drift, or null while no good window is kept (no reference signal: no number). */
  estimate(): ReferenceEstimate | null {
    const c = this.#count;
    if (c === 0) return null;
    const size = this.maxWindows;
    const oldest = (this.#head - c + size) % size;
    const newest = (this.#head - 1 + size) % size;
    // Times relative to the oldest window keep the sums well conditioned at large sample indices.
    const t0 = this.#t[oldest];
    const tx = this.#tx;
    const oy = this.#oy;
    for (let i = 0; i < c; i++) {
      const s = (oldest + i) % size;
      tx[i] = this.#t[s] - t0;
      oy[i] = this.#o[s];
    }
    const spanS = tx[c - 1];
    let offsetUs = 0;
    let driftPpm: number | null = null;
    const line = c >= 4 && spanS >= 1 ? lineFit(tx, oy, this.#flag, c) : null;
    if (line) {
      driftPpm = line[1];
      offsetUs = line[0] + line[1] * tx[c - 1];
    } else {
      for (let i = 0; i < c; i++) offsetUs += oy[i];
      offsetUs /= c;
    }
    return { offsetUs, lastOffsetUs: this.#o[newest], driftPpm, quality: this.#lastQuality, windows: c, spanS };
  }
}
