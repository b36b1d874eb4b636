/**
 * Unattended monitoring's levels, put together: the sector meters (sector-meters.ts: a steered beam
 * per sector and the array as one omnidirectional microphone, metered every hop) → 1-s Leq per
 * series (level-stats.ts SecondLeq, on the stream's sample clock) → 1 min, 15 min and 1 h statistics
 * (IntervalLevels, aligned to UTC) → the level store (level-store.ts: per-day files, recent values
 * for GET /api/levels). Indicative levels only: no class-rated meter, no traceable calibration; dB
 * SPL when the array's calibration gives a sensitivity (shared/levels.ts splOffsetDb), else dBFS.
 *
 * UTC of a sample. With a source on the UTC sample clock (a site scene) the caller gives
 * `utcOfSample`; otherwise the clock is anchored at the first hop to the wall clock and follows the
 * sample count, and is anchored again when the two part by more than REANCHOR_MS (a stalled or
 * restarted stream, a sender whose clock runs off) or the sample index goes back.
 */
import type { Sector } from '../../shared/sectors.ts';
import type { WeightingKind } from '../../shared/frequency-weighting.ts';
import { IntervalLevels, SecondLeq, type IntervalLevelsResult } from './level-stats.ts';
import { LevelStore, type IntervalName } from './level-store.ts';
import type { LevelsController } from '../http/routes/levels.ts';
import { SectorMeters, type MeterEngine, type MeterRow, type SectorMeterStatus } from './sector-meters.ts';

export const REANCHOR_MS = 2000;
/** The series name of the array as one omnidirectional microphone. */
export const OMNI = 'omni';

const INTERVAL_OF: Record<number, IntervalName> = { 60: '1min', 900: '15min', 3600: '1h' };

export interface MonitorOptions {
  engine: MeterEngine;
  sampleRateHz: number;
  /** data.dir/levels, or null to keep levels in memory only. */
  levelsDir: string | null;
  /** dB to add for dB SPL (calibrated array), or null: dBFS. */
  splOffsetDb: number | null;
  omniWeighting?: WeightingKind;
  /** UTC (ms) of a stream sample when the source keeps a UTC clock; absent: anchored to the wall clock. */
  utcOfSample?: (sampleIndex: number) => number;
  nowMs?: () => number;
  /** Each series' 1-s Leq as it is made (metrics, rules' background). */
  onSecond?: (series: string, leqDb: number, sampleIndex: number, utcMs: number) => void;
  /** Each series' hop mean square as it is metered (the event detectors). */
  onHopLevel?: (series: string, sampleIndex: number, frames: number, meanSquare: number) => void;
}

interface Series {
  name: string;
  weighting: WeightingKind;
  second: SecondLeq;
  intervals: IntervalLevels;
}

export class Monitor {
  readonly store: LevelStore;
  readonly meters: SectorMeters;
  readonly #o: MonitorOptions;
  readonly #series = new Map<string, Series>();
  readonly #weightings = new Map<string, WeightingKind>();
  #anchor: { sample: number; utcMs: number } | null = null;
  #lastSample = -1;
  reanchors = 0;
  /** First sample of the last hop's analysis frame (its live beam audio hop starts here; the next one half a frame on). */
  lastHopStart = -Infinity;

  constructor(o: MonitorOptions) {
    this.#o = o;
    this.store = new LevelStore(o.levelsDir);
    this.#weightings.set(OMNI, o.omniWeighting ?? 'A');
    this.meters = new SectorMeters(o.engine, {
      sampleRateHz: o.sampleRateHz,
      sink: (name) => {
        const series = this.#seriesFor(name ?? OMNI);
        const key = name ?? OMNI;
        return {
          push: (sampleIndex: number, frames: number, ms: number) => {
            series.second.push(sampleIndex, frames, ms);
            this.#o.onHopLevel?.(key, sampleIndex, frames, ms);
          },
        };
      },
      omniWeighting: o.omniWeighting ?? 'A',
    });
  }

  get unit(): 'dBFS' | 'dB SPL' {
    return this.#o.splOffsetDb === null ? 'dBFS' : 'dB SPL';
  }

  /** Follow the sector list (GET/PUT/DELETE /api/sectors). */
  setSectors(list: readonly Sector[]): void {
    for (const s of list) this.#weightings.set(s.name, s.weighting);
    this.meters.setSectors(list);
    const names = new Set([OMNI, ...list.map((s) => s.name)]);
    for (const n of [...this.#series.keys()]) if (!names.has(n)) this.#series.delete(n);
  }

  row(row: MeterRow): void {
    this.meters.row(row);
  }

  hop(snapshot: Float64Array, offset: number, hopStart: number): void {
    this.lastHopStart = hopStart;
    this.#clock(hopStart);
    this.meters.hop(snapshot, offset, hopStart);
  }

  /** UTC (ms) of a stream sample. */
  utcOfSample(sampleIndex: number): number {
    if (this.#o.utcOfSample) return this.#o.utcOfSample(sampleIndex);
    const a = this.#anchor;
    if (!a) return (this.#o.nowMs ?? Date.now)();
    return a.utcMs + ((sampleIndex - a.sample) * 1000) / this.#o.sampleRateHz;
  }

  #clock(sample: number): void {
    if (this.#o.utcOfSample) return;
    const now = (this.#o.nowMs ?? Date.now)();
    if (!this.#anchor || sample < this.#lastSample || Math.abs(this.utcOfSample(sample) - now) > REANCHOR_MS) {
      if (this.#anchor) this.reanchors++;
      this.#anchor = { sample, utcMs: now };
    }
    this.#lastSample = sample;
  }

  #seriesFor(name: string): Series {
    let s = this.#series.get(name);
    if (s) return s;
    const weighting = this.#weightings.get(name) ?? 'A';
    const fs = this.#o.sampleRateHz;
    const offset = this.#o.splOffsetDb ?? 0;
    const unit = this.unit;
    const intervals = new IntervalLevels((r: IntervalLevelsResult) => {
      const interval = INTERVAL_OF[r.intervalS];
      if (!interval || r.stats.count === 0) return;
      this.store.addInterval({ utcMs: r.startUtcS * 1000, interval, sector: name, weighting, unit, leqDb: r.stats.leqDb, lmaxDb: r.stats.lmaxDb, lminDb: r.stats.lminDb, l10Db: r.stats.l10Db, l50Db: r.stats.l50Db, l90Db: r.stats.l90Db, l95Db: r.stats.l95Db, seconds: r.stats.count });
    });
    const second = new SecondLeq(fs, (k, leqDb, covered) => {
      const sampleIndex = k * fs;
      const utcMs = this.utcOfSample(sampleIndex);
      const level = leqDb + offset;
      this.store.addSecond({ utcMs, sampleIndex, sector: name, weighting, unit, leqDb: level, coverage: covered / fs });
      intervals.push(Math.floor(utcMs / 1000), level);
      this.#o.onSecond?.(name, level, sampleIndex, utcMs);
    });
    s = { name, weighting, second, intervals };
    this.#series.set(name, s);
    return s;
  }

  /** For GET /api/levels. */
  levels(): LevelsController {
    return {
      series: () => this.store.series(),
      seconds: (sector, from, to) => this.store.seconds(sector, from, to),
      intervals: (sector, interval, from, to) => this.store.intervals(sector, interval, from, to),
    };
  }

  status(): { unit: string; sectors: SectorMeterStatus[]; store: LevelStore['counters']; reanchors: number; indicative: true } {
    return { unit: this.unit, sectors: this.meters.status(), store: { ...this.store.counters }, reanchors: this.reanchors, indicative: true };
  }

  /** Close the open seconds and intervals (shutdown) and release the beams. */
  async close(): Promise<void> {
    for (const s of this.#series.values()) {
      s.second.flush();
      s.intervals.flush();
    }
    this.meters.close();
    await this.store.flushed();
  }
}
