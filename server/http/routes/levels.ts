/**
 * Levels per direction over REST (server/monitor/): indicative levels (no class-rated meter, no
 * traceable calibration), dBFS unless the array is calibrated (then dB SPL).
 *   GET /api/levels?sector=NAME|omni&interval=1s|1min|15min|1h&from=UTC&to=UTC
 *     → { sector, interval, indicative: true, levels: [...] } (oldest first)
 * `sector` defaults to `omni` (the array as one omnidirectional microphone), `interval` to `1min`;
 * `from` and `to` are ISO 8601 UTC or milliseconds since the epoch; absent, the last hour. The query
 * is closed: an unknown parameter or a bad value is 400 ERR_HTTP_VALIDATION naming it. What is
 * answered is what the server keeps in memory (the last hour of 1-s values, the last 2016 records of
 * each interval); older days are in the files of data.dir/levels.
 */
import type { FastifyPluginAsync } from 'fastify';
import { HttpError } from '../errors.ts';
import type { IntervalLevel, IntervalName, SecondLevel } from '../../monitor/level-store.ts';

export interface LevelsController {
  /** Names of the series kept: sector names and `omni`. */
  series(): string[];
  seconds(sector: string, fromMs: number, toMs: number): SecondLevel[];
  intervals(sector: string, interval: IntervalName, fromMs: number, toMs: number): IntervalLevel[];
}

const INTERVAL_NAMES = ['1s', '1min', '15min', '1h'] as const;
const KNOWN = ['sector', 'interval', 'from', 'to'];
/** Longest span one answer covers: 1-s values for an hour, intervals for 31 days. */
const MAX_SPAN_MS = { '1s': 3_600_000, other: 31 * 86_400_000 };

function parseTime(name: string, v: string, problems: string[]): number | null {
  const n = /^\d{1,15}$/.test(v) ? Number(v) : Date.parse(v);
  if (!Number.isFinite(n) || !/^\d{1,15}$|^\d{4}-\d{2}-\d{2}T[\d:.]+(Z|[+-]\d{2}:\d{2})$/.test(v)) {
    problems.push(`${name}: must be an ISO 8601 UTC time (2026-12-04T10:00:00Z) or milliseconds since 1970`);
    return null;
  }
  return n;
}

/** Check the query. @throws HttpError 400 naming every problem */
export function parseLevelsQuery(q: Record<string, unknown>, nowMs: number): { sector: string; interval: (typeof INTERVAL_NAMES)[number]; fromMs: number; toMs: number } {
  const problems: string[] = [];
  for (const k of Object.keys(q)) if (!KNOWN.includes(k)) problems.push(`${k}: unknown parameter; known: ${KNOWN.join(', ')}`);
  const str = (k: string): string | null => {
    const v = q[k];
    if (v === undefined) return null;
    if (typeof v !== 'string') {
      problems.push(`${k}: give it once`);
      return null;
    }
    return v;
  };
  const sector = str('sector') ?? 'omni';
  if (!/^[A-Za-z0-9_-]{1,32}$/.test(sector)) problems.push('sector: must be a sector name (1–32 letters, digits, _ or -) or omni');
  const iv = str('interval') ?? '1min';
  if (!(INTERVAL_NAMES as readonly string[]).includes(iv)) problems.push(`interval: must be one of ${INTERVAL_NAMES.join(', ')}`);
  const to = str('to');
  const from = str('from');
  const toMs = to === null ? nowMs : parseTime('to', to, problems);
  const fromMs = from === null ? (toMs ?? nowMs) - 3_600_000 : parseTime('from', from, problems);
  if (fromMs !== null && toMs !== null) {
    if (!(fromMs < toMs)) problems.push('from: must be before to');
    else if (toMs - fromMs > (iv === '1s' ? MAX_SPAN_MS['1s'] : MAX_SPAN_MS.other)) problems.push(`to: at most ${iv === '1s' ? 'an hour of 1-s values' : '31 days of intervals'} per answer`);
  }
  if (problems.length > 0) throw new HttpError('ERR_HTTP_VALIDATION', { detail: problems.join('; ') });
  return { sector, interval: iv as (typeof INTERVAL_NAMES)[number], fromMs: fromMs!, toMs: toMs! };
}

export function levelsRoutes(c: LevelsController, nowMs: () => number = Date.now): FastifyPluginAsync {
  return async (app) => {
    app.get('/levels', async (req) => {
      const q = parseLevelsQuery((req.query ?? {}) as Record<string, unknown>, nowMs());
      const base = { sector: q.sector, interval: q.interval, from: new Date(q.fromMs).toISOString(), to: new Date(q.toMs).toISOString(), indicative: true, series: c.series() };
      if (q.interval === '1s') {
        return { ...base, levels: c.seconds(q.sector, q.fromMs, q.toMs).map((s) => ({ utc: new Date(s.utcMs).toISOString(), sampleIndex: s.sampleIndex, weighting: s.weighting, unit: s.unit, leqDb: round2(s.leqDb), coverage: s.coverage })) };
      }
      return {
        ...base,
        levels: c.intervals(q.sector, q.interval, q.fromMs, q.toMs).map((r) => ({ utc: new Date(r.utcMs).toISOString(), weighting: r.weighting, unit: r.unit, leqDb: round2(r.leqDb), lmaxDb: round2(r.lmaxDb), lminDb: round2(r.lminDb), l10Db: round2(r.l10Db), l50Db: round2(r.l50Db), l90Db: round2(r.l90Db), l95Db: round2(r.l95Db), seconds: r.seconds })),
      };
    });
  };
}

function round2(x: number): number | null {
  return Number.isFinite(x) ? Math.round(x * 100) / 100 : null;
}
