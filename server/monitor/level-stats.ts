/**
 * Level statistics for unattended monitoring: 1-s energy averages from per-hop mean squares
 * (SecondLeq), the interval statistics Leq, Lmax, Lmin, L10, L50, L90, L95 of a run of 1-s levels
 * (intervalStats), and 1 min / 15 min / 1 h intervals aligned to UTC (IntervalLevels).
 *
 * Every level here is *indicative*: the array is no class-rated sound level meter and no calibration
 * is traceable. Levels are dB re full scale (10·log10 of a mean square of full-scale samples, a
 * full-scale sine reads −3.01 dB); the caller adds a calibration offset (shared/levels.ts
 * splOffsetDb) to show dB SPL.
 *
 * Terms (ISO 1996-1): Leq is the energy average, 10·log10 of the mean of 10^(L/10); LN is the level
 * exceeded N % of the time, here the (100 − N)th percentile of the 1-s levels with linear
 * interpolation between order statistics, the default ('linear', Hyndman & Fan type 7) of
 * numpy.percentile (checked against a numpy fixture in test/fixtures/levels/).
 *
 * Pure and allocation-light: no engine or service wiring. SecondLeq allocates nothing per push;
 * IntervalLevels preallocates its buffers (at most 3600 values per interval length) and allocates
 * only the result object of each emitted interval.
 */

/** Lowest level reported, dB: a mean square of 0 (digital silence) reads this, not −Infinity. */
export const LEVEL_FLOOR_DB = -200;
const MEAN_SQUARE_FLOOR = 10 ** (LEVEL_FLOOR_DB / 10);

/**
 * 10·log10(meanSquare) in dB re full scale, floored at LEVEL_FLOOR_DB (−200 dB, below any quantised
 * signal: one LSB of 24-bit audio squared is about −138 dB).
 */
export function levelDbFromMeanSquare(meanSquare: number): number {
  return 10 * Math.log10(meanSquare > MEAN_SQUARE_FLOOR ? meanSquare : MEAN_SQUARE_FLOOR);
}

/**
 * Receives one completed second from SecondLeq. Scalars only, so nothing is allocated per second.
 * @param secondIndex k: the second covers stream samples [k·fs, (k+1)·fs)
 * @param leqDb 10·log10(meanSquare), floored at LEVEL_FLOOR_DB
 * @param coveredSamples how many of the second's fs samples the pushed hops covered (1 … fs)
 * @param meanSquare energy average over the covered samples, full-scale units²
 */
export type SecondSink = (secondIndex: number, leqDb: number, coveredSamples: number, meanSquare: number) => void;

/** Counters of a SecondLeq (all cumulative since construction or reset). */
export interface SecondLeqCounters {
  /** pushes taken (their samples may still be partly dropped as overlap) */
  pushes: number;
  /** pushes refused: sampleIndex or frames not a safe integer ≥ 0, meanSquare not finite ≥ 0 */
  rejected: number;
  /** samples dropped because they lay before the highest sample already pushed (overlap, going back) */
  overlapSamples: number;
  /** seconds emitted */
  seconds: number;
}

/**
 * 1-s energy averages (Leq per second) from per-hop mean squares on the stream's sample index.
 *
 * Second k is samples [k·fs, (k+1)·fs). A hop straddling a boundary is split by its samples: each
 * part carries the hop's mean square (the hop's energy is taken as spread evenly over it). A second
 * is emitted as soon as a push reaches its end, or when a later push skips past it, or at flush();
 * it reports how many of its samples were covered. Hops never pushed (gaps in the input, skipped
 * hops) leave samples uncovered, and a second with no covered sample is never emitted. Pushes must
 * move forward on the sample index: samples before the highest one already pushed are dropped and
 * counted (overlapSamples). A jump forward of any length costs O(1); a hop longer than a second is
 * split over every second it covers.
 *
 * Push only hops of real input: a hop whose block is a gap (zeros of the gap's length) should not be
 * pushed, so that the second says it was not fully measured. Leq values are indicative (see above).
 */
export class SecondLeq {
  readonly sampleRateHz: number;
  readonly #sink: SecondSink;
  /** index of the open second, or −1 when none is open */
  #second = -1;
  /** Σ meanSquare·samples over the open second's covered samples */
  #energy = 0;
  #covered = 0;
  /** first sample index not yet pushed; samples below it are dropped */
  #nextSample = 0;
  #pushes = 0;
  #rejected = 0;
  #overlapSamples = 0;
  #seconds = 0;

  /**
   * @param sampleRateHz integer samples per second (the length of a second in samples)
   * @param sink called synchronously, from push() or flush(), once per completed second
   * @throws RangeError when sampleRateHz is not a positive integer, TypeError when sink is not a function
   */
  constructor(sampleRateHz: number, sink: SecondSink) {
    if (!Number.isSafeInteger(sampleRateHz) || sampleRateHz < 1) {
      throw new RangeError(`sampleRateHz must be a positive integer, got ${String(sampleRateHz)}`);
    }
    if (typeof sink !== 'function') throw new TypeError('sink must be a function');
    this.sampleRateHz = sampleRateHz;
    this.#sink = sink;
  }

  /**
   * Adds one hop: `frames` samples from `sampleIndex` on, of mean square `meanSquare` (full-scale
   * units², e.g. the band power of the hop's spectrum with the weighting applied). Invalid arguments
   * are refused and counted (counters.rejected), never thrown. No allocation.
   * @param sampleIndex stream index of the hop's first sample, safe integer ≥ 0
   * @param frames samples the hop covers, safe integer ≥ 0 (0 is a no-op)
   * @param meanSquare finite, ≥ 0
   */
  push(sampleIndex: number, frames: number, meanSquare: number): void {
    if (
      !Number.isSafeInteger(sampleIndex) ||
      sampleIndex < 0 ||
      !Number.isSafeInteger(frames) ||
      frames < 0 ||
      !Number.isSafeInteger(sampleIndex + frames) ||
      typeof meanSquare !== 'number' ||
      !(meanSquare >= 0) ||
      meanSquare === Infinity
    ) {
      this.#rejected++;
      return;
    }
    this.#pushes++;
    let start = sampleIndex;
    const end = sampleIndex + frames;
    if (start < this.#nextSample) {
      const stop = end < this.#nextSample ? end : this.#nextSample;
      this.#overlapSamples += stop - start;
      start = stop;
    }
    if (start >= end) return;
    this.#nextSample = end;
    const fs = this.sampleRateHz;
    while (start < end) {
      const k = Math.floor(start / fs);
      if (k !== this.#second) {
        this.#emitOpen();
        this.#second = k;
      }
      const secondEnd = (k + 1) * fs;
      const stop = end < secondEnd ? end : secondEnd;
      const n = stop - start;
      this.#energy += meanSquare * n;
      this.#covered += n;
      start = stop;
      // Nothing below #nextSample can arrive any more, so a second pushed to its end is complete.
      if (stop === secondEnd) this.#emitOpen();
    }
  }

  /**
   * Emits the open (partly covered) second now, e.g. when the stream stops. Later samples of that
   * second are dropped as overlap, so no second is emitted twice.
   */
  flush(): void {
    if (this.#second < 0) return;
    const secondEnd = (this.#second + 1) * this.sampleRateHz;
    if (this.#nextSample < secondEnd) this.#nextSample = secondEnd;
    this.#emitOpen();
  }

  /** Forgets the open second and the position without emitting (a new stream); counters are kept. */
  reset(): void {
    this.#second = -1;
    this.#energy = 0;
    this.#covered = 0;
    this.#nextSample = 0;
  }

  /** The first sample index the next push may cover without being dropped as overlap. */
  get nextSample(): number {
    return this.#nextSample;
  }

  /** A snapshot of the counters (allocates; for status, not for the hot path). */
  get counters(): SecondLeqCounters {
    return {
      pushes: this.#pushes,
      rejected: this.#rejected,
      overlapSamples: this.#overlapSamples,
      seconds: this.#seconds,
    };
  }

  #emitOpen(): void {
    const k = this.#second;
    const covered = this.#covered;
    const energy = this.#energy;
    this.#second = -1;
    this.#energy = 0;
    this.#covered = 0;
    if (k < 0 || covered === 0) return;
    this.#seconds++;
    const meanSquare = energy / covered;
    this.#sink(k, levelDbFromMeanSquare(meanSquare), covered, meanSquare);
  }
}

/** Statistics of a run of 1-s levels (ISO 1996-1 terms), dB in the levels' own reference. */
export interface IntervalStats {
  /** energy average: 10·log10(mean of 10^(L/10)) */
  leqDb: number;
  lmaxDb: number;
  lminDb: number;
  /** level exceeded 10 % of the time: the 90th percentile */
  l10Db: number;
  /** the median */
  l50Db: number;
  /** level exceeded 90 % of the time (the usual background level): the 10th percentile */
  l90Db: number;
  /** level exceeded 95 % of the time: the 5th percentile */
  l95Db: number;
  /** how many finite levels the statistics are made of (non-finite entries are skipped) */
  count: number;
}

/**
 * The p-th percentile of `sorted[0 … n−1]` (ascending, n ≥ 1) by numpy's default 'linear' method
 * (Hyndman & Fan type 7): virtual index h = (n − 1)·p/100, interpolated between the order statistics
 * at floor(h) and floor(h) + 1. The interpolation is written as numpy's _lerp writes it (from b
 * backwards when the fraction is ≥ 0.5) so the results agree to the last bit or nearly.
 */
export function percentileLinear(sorted: ArrayLike<number>, n: number, p: number): number {
  const h = (n - 1) * (p / 100);
  const lo = Math.floor(h);
  const hi = lo + 1 < n ? lo + 1 : n - 1;
  const t = h - lo;
  const a = sorted[lo];
  const b = sorted[hi];
  const d = b - a;
  return t >= 0.5 ? b - d * (1 - t) : a + d * t;
}

/**
 * Leq, Lmax, Lmin, L10, L50, L90, L95 and the count of a run of 1-s levels. LN is the level exceeded
 * N % of the time: the (100 − N)th percentile, linear interpolation as numpy.percentile's default
 * (percentileLinear). Non-finite entries (NaN for a second not measured) are skipped; with no finite
 * entry every level is NaN and count is 0 (no throw). Levels are indicative (see the module comment).
 * @param levelsDb 1-s levels, dB; not modified
 * @param scratch optional buffer of length ≥ levelsDb.length to sort in, so nothing is allocated
 */
export function intervalStats(levelsDb: ArrayLike<number>, scratch?: Float64Array): IntervalStats {
  const total = levelsDb.length;
  const buffer = scratch !== undefined && scratch.length >= total ? scratch : new Float64Array(total);
  let n = 0;
  for (let i = 0; i < total; i++) {
    const v = levelsDb[i];
    if (Number.isFinite(v)) buffer[n++] = v;
  }
  if (n === 0) {
    return { leqDb: NaN, lmaxDb: NaN, lminDb: NaN, l10Db: NaN, l50Db: NaN, l90Db: NaN, l95Db: NaN, count: 0 };
  }
  const sorted = buffer.subarray(0, n).sort();
  const maxDb = sorted[n - 1];
  // Energy average referred to the maximum, so 10^(L/10) neither overflows nor underflows.
  let sum = 0;
  for (let i = 0; i < n; i++) sum += 10 ** ((sorted[i] - maxDb) / 10);
  return {
    leqDb: maxDb + 10 * Math.log10(sum / n),
    lmaxDb: maxDb,
    lminDb: sorted[0],
    l10Db: percentileLinear(sorted, n, 90),
    l50Db: percentileLinear(sorted, n, 50),
    l90Db: percentileLinear(sorted, n, 10),
    l95Db: percentileLinear(sorted, n, 5),
    count: n,
  };
}

/** The interval lengths of IntervalLevels, s: 1 min, 15 min, 1 h, aligned to UTC. */
export const INTERVAL_LENGTHS_S = [60, 900, 3600] as const;
export type IntervalLengthS = (typeof INTERVAL_LENGTHS_S)[number];

/** One closed interval of IntervalLevels. */
export interface IntervalLevelsResult {
  intervalS: IntervalLengthS;
  /** UTC second (s since 1970-01-01T00:00:00Z) the interval starts at; a multiple of intervalS */
  startUtcS: number;
  /** startUtcS + intervalS (exclusive) */
  endUtcS: number;
  /** statistics of the seconds received; stats.count of intervalS seconds were measured */
  stats: IntervalStats;
  /** true when closed by flush() before its end (a shutdown), not by time moving past it */
  partial: boolean;
}

/** Counters of an IntervalLevels, cumulative. Per (second, interval length) pair where stated. */
export interface IntervalLevelsCounters {
  /** seconds taken by at least one interval length */
  accepted: number;
  /** pushes refused: utcSecond not a safe integer ≥ 0 or level not finite */
  invalid: number;
  /** (second, length) pairs refused because that length's interval holding the second had closed */
  late: number;
  /** (second, length) pairs refused because that second was already in the open interval */
  duplicates: number;
  /** intervals emitted */
  intervals: number;
}

/** One interval length's open interval: values by second offset, NaN where none arrived. */
class IntervalSlot {
  readonly lengthS: IntervalLengthS;
  /** one value per second of the interval; NaN = not received. Bound: lengthS ≤ 3600 entries. */
  readonly values: Float64Array;
  /** sorting space for intervalStats, same bound */
  readonly scratch: Float64Array;
  /** UTC start of the open interval, or −1 when none is open */
  startS = -1;
  /** seconds below this are late for this length */
  closedBeforeS = 0;

  constructor(lengthS: IntervalLengthS) {
    this.lengthS = lengthS;
    this.values = new Float64Array(lengthS).fill(NaN);
    this.scratch = new Float64Array(lengthS);
  }
}

/**
 * Collects 1-s levels keyed by UTC second and emits the 1 min, 15 min and 1 h intervals aligned to
 * UTC (interval [m·L, (m+1)·L) for length L) with their statistics, when time moves past them.
 *
 * An interval closes when a second at or after its end is pushed, or when advanceTo() is given a
 * time at or after its end (call it from a clock, a few seconds behind, so that seconds still on
 * their way are not counted late); flush() closes the open ones as partial. A second arriving for an
 * interval that has closed is counted late and ignored for that length (it may still count for a
 * longer length whose interval is open); a second received twice is counted as a duplicate and the
 * first value kept. Intervals with no second are not emitted. Memory is fixed at construction: two
 * Float64Array of L entries per length (60 + 900 + 3600 entries, 73 KB per instance).
 * Levels are indicative (see the module comment).
 */
export class IntervalLevels {
  readonly #slots: IntervalSlot[];
  readonly #sink: (result: IntervalLevelsResult) => void;
  #accepted = 0;
  #invalid = 0;
  #late = 0;
  #duplicates = 0;
  #intervals = 0;

  /**
   * @param sink called synchronously from push(), advanceTo() or flush() for each closed interval,
   *   shorter lengths first
   * @param lengthsS the interval lengths to keep (default all of INTERVAL_LENGTHS_S)
   * @throws TypeError for a sink that is not a function, RangeError for an unknown or repeated length
   */
  constructor(sink: (result: IntervalLevelsResult) => void, lengthsS: readonly IntervalLengthS[] = INTERVAL_LENGTHS_S) {
    if (typeof sink !== 'function') throw new TypeError('sink must be a function');
    const seen = new Set<number>();
    for (const l of lengthsS) {
      if (!(INTERVAL_LENGTHS_S as readonly number[]).includes(l) || seen.has(l)) {
        throw new RangeError(`interval lengths must be distinct values of ${INTERVAL_LENGTHS_S.join(', ')} s, got ${String(l)}`);
      }
      seen.add(l);
    }
    this.#sink = sink;
    this.#slots = [...lengthsS].sort((a, b) => a - b).map((l) => new IntervalSlot(l));
  }

  /**
   * Adds the 1-s level of one UTC second. Invalid input is counted (counters.invalid), never thrown.
   * @param utcSecond whole seconds since 1970-01-01T00:00:00Z: the second [utcSecond, utcSecond + 1)
   * @param levelDb finite, dB
   */
  push(utcSecond: number, levelDb: number): void {
    if (!Number.isSafeInteger(utcSecond) || utcSecond < 0 || typeof levelDb !== 'number' || !Number.isFinite(levelDb)) {
      this.#invalid++;
      return;
    }
    let taken = false;
    for (const slot of this.#slots) {
      const l = slot.lengthS;
      if (slot.startS >= 0 && utcSecond >= slot.startS + l) this.#close(slot, false);
      if (utcSecond < slot.closedBeforeS) {
        this.#late++;
        continue;
      }
      if (slot.startS < 0) {
        slot.startS = utcSecond - (utcSecond % l);
        // Time has reached this interval: the ones before it count as closed.
        slot.closedBeforeS = slot.startS;
      }
      const offset = utcSecond - slot.startS;
      if (!Number.isNaN(slot.values[offset])) {
        this.#duplicates++;
        continue;
      }
      slot.values[offset] = levelDb;
      taken = true;
    }
    if (taken) this.#accepted++;
  }

  /**
   * Time has reached `utcSecond`: closes every open interval ending at or before it, and counts
   * later seconds of intervals that ended by then as late.
   * @param utcSecond whole or fractional seconds since the epoch; ignored unless finite and ≥ 0
   */
  advanceTo(utcSecond: number): void {
    if (typeof utcSecond !== 'number' || !Number.isFinite(utcSecond) || utcSecond < 0) return;
    for (const slot of this.#slots) {
      const l = slot.lengthS;
      if (slot.startS >= 0 && utcSecond >= slot.startS + l) this.#close(slot, false);
      const currentStartS = Math.floor(utcSecond / l) * l;
      if (currentStartS > slot.closedBeforeS) slot.closedBeforeS = currentStartS;
    }
  }

  /** Closes and emits every open interval as partial (shutdown); their later seconds are late. */
  flush(): void {
    for (const slot of this.#slots) if (slot.startS >= 0) this.#close(slot, true);
  }

  /** A snapshot of the counters (allocates; for status). */
  get counters(): IntervalLevelsCounters {
    return {
      accepted: this.#accepted,
      invalid: this.#invalid,
      late: this.#late,
      duplicates: this.#duplicates,
      intervals: this.#intervals,
    };
  }

  #close(slot: IntervalSlot, partial: boolean): void {
    const startS = slot.startS;
    const l = slot.lengthS;
    const stats = intervalStats(slot.values, slot.scratch);
    slot.values.fill(NaN);
    slot.startS = -1;
    if (startS + l > slot.closedBeforeS) slot.closedBeforeS = startS + l;
    if (stats.count === 0) return;
    this.#intervals++;
    this.#sink({ intervalS: l, startUtcS: startS, endUtcS: startS + l, stats, partial });
  }
}
