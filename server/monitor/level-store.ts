/**
 * Where levels are kept: per UTC day in `data.dir/levels/`, and the recent ones in memory for
 * `GET /api/levels`. Indicative levels only (no class-rated meter, no traceable calibration).
 *
 * Files (appended, one per UTC day; the retention of `data.retention` deletes old days):
 * - `YYYY-MM-DD-seconds.csv` and `YYYY-MM-DD-seconds.jsonl`: `utc,sample_index,sector,weighting,unit,
 *   leq_db,coverage`, one line per sector (and `omni`) per second; coverage is the share of the
 *   second's samples metered (hops skipped or missing leave it below 1).
 * - `YYYY-MM-DD-intervals.csv` and `YYYY-MM-DD-intervals.jsonl`: one record per sector per completed
 *   interval (1min, 15min, 1h): `utc` (start), `interval`, `sector`, `weighting`, `unit`, `leq_db`,
 *   `lmax_db`, `lmin_db`, `l10_db`, `l50_db`, `l90_db`, `l95_db`, `seconds`.
 * Writes go through one append queue (a bounded number of pending lines, MAX_PENDING_LINES; beyond
 * it lines are dropped and counted) so a slow disk never stalls the hop path; a failed write is
 * counted and told in status without paths.
 *
 * Memory: the last RECENT_SECONDS 1-s values and the last RECENT_INTERVALS records of each interval
 * length per sector (bounded by MAX_SECTORS + 1 series).
 */
import { appendFile, mkdir, stat } from 'node:fs/promises';
import { join } from 'node:path';
import { fsErrorText } from '../io/disk-space.ts';

export const RECENT_SECONDS = 3600;
export const RECENT_INTERVALS = 2016; // a week of 5-min-or-longer records; 1 min: 33.6 h
export const MAX_SERIES = 9;
export const MAX_PENDING_LINES = 100_000;

export type IntervalName = '1min' | '15min' | '1h';
export const INTERVALS: readonly { name: IntervalName; seconds: number }[] = [
  { name: '1min', seconds: 60 },
  { name: '15min', seconds: 900 },
  { name: '1h', seconds: 3600 },
];

export interface SecondLevel {
  utcMs: number;
  sampleIndex: number;
  sector: string;
  weighting: 'A' | 'C' | 'Z';
  unit: 'dBFS' | 'dB SPL';
  leqDb: number;
  coverage: number;
}

export interface IntervalLevel {
  utcMs: number;
  interval: IntervalName;
  sector: string;
  weighting: 'A' | 'C' | 'Z';
  unit: 'dBFS' | 'dB SPL';
  leqDb: number;
  lmaxDb: number;
  lminDb: number;
  l10Db: number;
  l50Db: number;
  l90Db: number;
  l95Db: number;
  seconds: number;
}

export interface LevelStoreCounters {
  secondsKept: number;
  intervalsKept: number;
  linesWritten: number;
  linesDropped: number;
  writeErrors: number;
  lastError: string | null;
}

/** A fixed-capacity ring of records. */
class Ring<T> {
  readonly #items: (T | undefined)[];
  #next = 0;
  #size = 0;
  constructor(capacity: number) {
    this.#items = new Array(capacity);
  }
  push(x: T): void {
    this.#items[this.#next] = x;
    this.#next = (this.#next + 1) % this.#items.length;
    if (this.#size < this.#items.length) this.#size++;
  }
  /** Oldest first. */
  *values(): Generator<T> {
    const cap = this.#items.length;
    for (let k = 0; k < this.#size; k++) yield this.#items[(this.#next - this.#size + k + cap) % cap]!;
  }
}

const f2 = (x: number) => (Number.isFinite(x) ? x.toFixed(2) : '');

export class LevelStore {
  readonly dir: string | null;
  readonly counters: LevelStoreCounters = { secondsKept: 0, intervalsKept: 0, linesWritten: 0, linesDropped: 0, writeErrors: 0, lastError: null };
  readonly #seconds = new Map<string, Ring<SecondLevel>>();
  readonly #intervals = new Map<string, Ring<IntervalLevel>>();
  #pending: { file: string; header: string; line: string }[] = [];
  #writing = false;
  #idle: Promise<void> = Promise.resolve();
  #madeDir = false;

  /** @param dir the levels folder (data.dir/levels), or null to keep nothing on disk */
  constructor(dir: string | null) {
    this.dir = dir;
  }

  addSecond(s: SecondLevel): void {
    this.#ring(this.#seconds, s.sector, RECENT_SECONDS)?.push(s);
    this.counters.secondsKept++;
    const day = new Date(s.utcMs).toISOString().slice(0, 10);
    const utc = new Date(s.utcMs).toISOString();
    this.#append(`${day}-seconds.csv`, 'utc,sample_index,sector,weighting,unit,leq_db,coverage', `${utc},${s.sampleIndex},${s.sector},${s.weighting},${s.unit},${f2(s.leqDb)},${s.coverage.toFixed(3)}`);
    this.#append(`${day}-seconds.jsonl`, '', JSON.stringify({ utc, sample_index: s.sampleIndex, sector: s.sector, weighting: s.weighting, unit: s.unit, leq_db: round2(s.leqDb), coverage: Math.round(s.coverage * 1000) / 1000 }));
  }

  addInterval(r: IntervalLevel): void {
    this.#ring(this.#intervals, `${r.sector}\u0000${r.interval}`, RECENT_INTERVALS)?.push(r);
    this.counters.intervalsKept++;
    const day = new Date(r.utcMs).toISOString().slice(0, 10);
    const utc = new Date(r.utcMs).toISOString();
    this.#append(`${day}-intervals.csv`, 'utc,interval,sector,weighting,unit,leq_db,lmax_db,lmin_db,l10_db,l50_db,l90_db,l95_db,seconds', [utc, r.interval, r.sector, r.weighting, r.unit, f2(r.leqDb), f2(r.lmaxDb), f2(r.lminDb), f2(r.l10Db), f2(r.l50Db), f2(r.l90Db), f2(r.l95Db), r.seconds].join(','));
    this.#append(`${day}-intervals.jsonl`, '', JSON.stringify({ utc, interval: r.interval, sector: r.sector, weighting: r.weighting, unit: r.unit, leq_db: round2(r.leqDb), lmax_db: round2(r.lmaxDb), lmin_db: round2(r.lminDb), l10_db: round2(r.l10Db), l50_db: round2(r.l50Db), l90_db: round2(r.l90Db), l95_db: round2(r.l95Db), seconds: r.seconds }));
  }

  /** Recent 1-s values of one series in [fromMs, toMs), oldest first. */
  seconds(sector: string, fromMs = -Infinity, toMs = Infinity): SecondLevel[] {
    const r = this.#seconds.get(sector);
    return r ? [...r.values()].filter((s) => s.utcMs >= fromMs && s.utcMs < toMs) : [];
  }

  /** Recent interval records of one series in [fromMs, toMs), oldest first. */
  intervals(sector: string, interval: IntervalName, fromMs = -Infinity, toMs = Infinity): IntervalLevel[] {
    const r = this.#intervals.get(`${sector}\u0000${interval}`);
    return r ? [...r.values()].filter((s) => s.utcMs >= fromMs && s.utcMs < toMs) : [];
  }

  /** Every series with something kept (sector names and `omni`). */
  series(): string[] {
    return [...this.#seconds.keys()];
  }

  /** Resolves when every line queued so far is written (tests, shutdown). */
  flushed(): Promise<void> {
    return this.#idle;
  }

  #ring<T>(map: Map<string, Ring<T>>, key: string, capacity: number): Ring<T> | null {
    let r = map.get(key);
    if (!r) {
      if (map.size >= MAX_SERIES * INTERVALS.length) return null;
      r = new Ring<T>(capacity);
      map.set(key, r);
    }
    return r;
  }

  #append(file: string, header: string, line: string): void {
    if (!this.dir) return;
    if (this.#pending.length >= MAX_PENDING_LINES) {
      this.counters.linesDropped++;
      return;
    }
    this.#pending.push({ file, header, line });
    if (!this.#writing) this.#idle = this.#drain();
  }

  async #drain(): Promise<void> {
    this.#writing = true;
    try {
      while (this.#pending.length > 0) {
        const batch = this.#pending;
        this.#pending = [];
        const byFile = new Map<string, { header: string; lines: string[] }>();
        for (const p of batch) {
          const e = byFile.get(p.file) ?? { header: p.header, lines: [] };
          e.lines.push(p.line);
          byFile.set(p.file, e);
        }
        try {
          if (!this.#madeDir) {
            await mkdir(this.dir!, { recursive: true });
            this.#madeDir = true;
          }
          for (const [file, { header, lines }] of byFile) {
            const path = join(this.dir!, file);
            let text = lines.join('\n') + '\n';
            if (header && !(await exists(path))) text = header + '\n' + text;
            await appendFile(path, text);
            this.counters.linesWritten += lines.length;
          }
        } catch (e) {
          this.counters.writeErrors++;
          this.counters.lastError = fsErrorText(e);
        }
      }
    } finally {
      this.#writing = false;
    }
  }
}

function round2(x: number): number | null {
  return Number.isFinite(x) ? Math.round(x * 100) / 100 : null;
}

async function exists(path: string): Promise<boolean> {
  try {
    await stat(path);
    return true;
  } catch {
    return false;
  }
}
