/**
 * GET /api/levels for the Levels panel (server/http/routes/levels.ts). Levels are indicative (no
 * class-rated meter, no traceable calibration): dBFS unless the array is calibrated (then dB SPL).
 */
import { request, type ApiResult } from './api.ts';

export type LevelInterval = '1s' | '1min' | '15min' | '1h';

/** One record: a 1-s value (only `leqDb`) or an interval's statistics (all of them). Null where not finite. */
export interface LevelRecord {
  /** Start of the second or interval, ISO 8601 UTC. */
  utc: string;
  weighting: 'A' | 'C' | 'Z';
  unit: 'dBFS' | 'dB SPL';
  leqDb: number | null;
  lmaxDb?: number | null;
  lminDb?: number | null;
  l10Db?: number | null;
  l50Db?: number | null;
  l90Db?: number | null;
  l95Db?: number | null;
  /** Seconds that went into an interval's statistics. */
  seconds?: number;
  /** Share of a second's samples metered (1-s values). */
  coverage?: number;
}

export interface LevelsAnswer {
  sector: string;
  interval: LevelInterval;
  from: string;
  to: string;
  indicative: true;
  /** Every series kept: sector names and `omni`. */
  series: string[];
  levels: LevelRecord[];
}

/** `GET /api/levels?sector=&interval=&from=&to=` (times in ms since 1970). */
export const getLevels = (sector: string, interval: LevelInterval, fromMs: number, toMs: number): Promise<ApiResult<LevelsAnswer>> =>
  request('GET', `/api/levels?sector=${encodeURIComponent(sector)}&interval=${interval}&from=${Math.floor(fromMs)}&to=${Math.ceil(toMs)}`);
