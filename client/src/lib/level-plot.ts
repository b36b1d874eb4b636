/**
 * Pure helpers of the Levels panel: how far back each interval length is asked for, the plot's
 * scales and line paths, and the table of the latest records. Levels are indicative (no
 * class-rated meter, no traceable calibration).
 */
import type { LevelInterval, LevelRecord } from './levels-api.ts';

export const LEVEL_INTERVALS: readonly LevelInterval[] = ['1s', '1min', '15min', '1h'];

/**
 * Time shown per interval length, ms: 10 min of 1-s values, the last hour of 1-min, a day of
 * 15-min, a week of 1-h records (within what GET /api/levels answers: an hour of 1-s values,
 * 31 days of intervals).
 */
export const LEVEL_SPAN_MS: Record<LevelInterval, number> = { '1s': 600_000, '1min': 3_600_000, '15min': 86_400_000, '1h': 7 * 86_400_000 };

/** How often the panel asks again, ms, per interval length (a record is added at most this often or less). */
export const LEVEL_REFRESH_MS: Record<LevelInterval, number> = { '1s': 5_000, '1min': 15_000, '15min': 60_000, '1h': 60_000 };

/** Line colours of the series, in order (omni first, then the sectors as the server lists them). */
export const SERIES_COLOURS = ['#d8dee5', '#f0b34a', '#6ea6dc', '#5cbf7e', '#d283dd', '#e0645d', '#5cc6b2', '#c9b458', '#9aa5ff', '#ff9f7a'] as const;

/** The series in the order shown: `omni` first, then the others in the server's order. */
export function orderSeries(series: readonly string[]): string[] {
  return [...(series.includes('omni') ? ['omni'] : []), ...series.filter((s) => s !== 'omni')];
}

export interface PlotPoint {
  tMs: number;
  db: number;
}

/** The points of one statistic of a series (records without a finite value are left out). */
export function pointsOf(records: readonly LevelRecord[], key: 'leqDb' | 'l90Db'): PlotPoint[] {
  const out: PlotPoint[] = [];
  for (const r of records) {
    const v = r[key];
    const t = Date.parse(r.utc);
    if (typeof v === 'number' && Number.isFinite(v) && Number.isFinite(t)) out.push({ tMs: t, db: v });
  }
  return out;
}

/**
 * The level axis for every value shown: from the lowest to the highest rounded out to `stepDb`,
 * at least `minSpanDb` wide; null when there is no value.
 */
export function levelRange(values: Iterable<number>, stepDb = 5, minSpanDb = 10): { lowDb: number; highDb: number } | null {
  let lo = Infinity;
  let hi = -Infinity;
  for (const v of values) {
    if (!Number.isFinite(v)) continue;
    if (v < lo) lo = v;
    if (v > hi) hi = v;
  }
  if (lo > hi) return null;
  let lowDb = Math.floor(lo / stepDb) * stepDb;
  let highDb = Math.ceil(hi / stepDb) * stepDb;
  if (highDb === hi) highDb += stepDb;
  if (lowDb === lo) lowDb -= stepDb;
  while (highDb - lowDb < minSpanDb) {
    highDb += stepDb;
    if (highDb - lowDb < minSpanDb) lowDb -= stepDb;
  }
  return { lowDb, highDb };
}

/**
 * An SVG path ("M x y L x y …") of points on a plot `widthPx × heightPx`, time from `fromMs` (left)
 * to `toMs` (right), level from `lowDb` (bottom) to `highDb` (top). A step between two points longer
 * than `gapMs` starts a new piece (no line drawn across missing records).
 */
export function linePath(points: readonly PlotPoint[], fromMs: number, toMs: number, lowDb: number, highDb: number, widthPx: number, heightPx: number, gapMs: number): string {
  const sx = widthPx / (toMs - fromMs);
  const sy = heightPx / (highDb - lowDb);
  let d = '';
  let prevT = -Infinity;
  for (const p of points) {
    if (p.tMs < fromMs || p.tMs > toMs) continue;
    const x = (p.tMs - fromMs) * sx;
    const y = (highDb - p.db) * sy;
    d += `${d === '' || p.tMs - prevT > gapMs ? 'M' : 'L'}${x.toFixed(1)} ${y.toFixed(1)}`;
    prevT = p.tMs;
  }
  return d;
}

/** Length of one record of an interval, ms. */
export function intervalMs(interval: LevelInterval): number {
  return { '1s': 1000, '1min': 60_000, '15min': 900_000, '1h': 3_600_000 }[interval];
}

export interface LevelTableRow {
  series: string;
  utc: string;
  unit: string;
  weighting: string;
  leqDb: number | null;
  lmaxDb: number | null;
  lminDb: number | null;
  l10Db: number | null;
  l50Db: number | null;
  l90Db: number | null;
  l95Db: number | null;
}

/** The newest record of each series (series without one are left out), in the order given. */
export function latestTable(bySeries: ReadonlyMap<string, readonly LevelRecord[]>, order: readonly string[]): LevelTableRow[] {
  const rows: LevelTableRow[] = [];
  for (const s of order) {
    const recs = bySeries.get(s);
    const r = recs && recs.length > 0 ? recs[recs.length - 1] : null;
    if (!r) continue;
    const n = (v: number | null | undefined): number | null => (typeof v === 'number' && Number.isFinite(v) ? v : null);
    rows.push({ series: s, utc: r.utc, unit: r.unit, weighting: r.weighting, leqDb: n(r.leqDb), lmaxDb: n(r.lmaxDb), lminDb: n(r.lminDb), l10Db: n(r.l10Db), l50Db: n(r.l50Db), l90Db: n(r.l90Db), l95Db: n(r.l95Db) });
  }
  return rows;
}

/** Time labels for the plot's x axis: at most `count` round UTC times in [fromMs, toMs], "HH:MM:SS" below a minute's step, "HH:MM", or "MM-DD" for a day's. */
export function timeTicks(fromMs: number, toMs: number, count = 4): { tMs: number; text: string }[] {
  const span = toMs - fromMs;
  if (!(span > 0)) return [];
  const steps = [5_000, 10_000, 15_000, 30_000, 60_000, 120_000, 300_000, 600_000, 900_000, 1_800_000, 3_600_000, 3 * 3_600_000, 6 * 3_600_000, 12 * 3_600_000, 86_400_000];
  const step = steps.find((s) => span / s <= count) ?? 86_400_000;
  const out: { tMs: number; text: string }[] = [];
  for (let t = Math.ceil(fromMs / step) * step; t <= toMs; t += step) {
    const iso = new Date(t).toISOString();
    out.push({ tMs: t, text: step >= 86_400_000 ? iso.slice(5, 10) : iso.slice(11, step < 60_000 ? 19 : 16) });
  }
  return out;
}
