/**
 * server/monitor/level-store.ts: per-day files (CSV and JSON lines) and the recent values in memory.
 * The files are read back and parsed here; the day boundary is UTC midnight (common practice for
 * daily files).
 */
import { mkdtempSync, readFileSync, readdirSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { LevelStore, RECENT_SECONDS } from '../../server/monitor/level-store.ts';

const dir = mkdtempSync(join(tmpdir(), 'nullsteer-levels-'));
afterAll(() => rmSync(dir, { recursive: true, force: true }));
const T0 = Date.UTC(2026, 11, 3, 23, 59, 58);

describe('level store', () => {
  it('writes 1-s values and intervals into one file per UTC day, with headers once, and keeps the recent ones', async () => {
    const st = new LevelStore(join(dir, 'levels'));
    for (let k = 0; k < 4; k++) {
      st.addSecond({ utcMs: T0 + k * 1000, sampleIndex: k * 48_000, sector: 'gate', weighting: 'A', unit: 'dBFS', leqDb: -40 - k, coverage: 1 });
      st.addSecond({ utcMs: T0 + k * 1000, sampleIndex: k * 48_000, sector: 'omni', weighting: 'A', unit: 'dBFS', leqDb: -30, coverage: 0.5 });
    }
    st.addInterval({ utcMs: T0 - 58_000, interval: '1min', sector: 'gate', weighting: 'A', unit: 'dBFS', leqDb: -41.234, lmaxDb: -40, lminDb: -43, l10Db: -40.5, l50Db: -41.5, l90Db: -42.5, l95Db: -42.75, seconds: 60 });
    await st.flushed();
    expect(readdirSync(join(dir, 'levels')).sort()).toEqual(['2026-12-03-intervals.csv', '2026-12-03-intervals.jsonl', '2026-12-03-seconds.csv', '2026-12-03-seconds.jsonl', '2026-12-04-seconds.csv', '2026-12-04-seconds.jsonl']);
    expect(JSON.parse(readFileSync(join(dir, 'levels', '2026-12-03-seconds.jsonl'), 'utf8').split('\n')[1])).toEqual({ utc: '2026-12-03T23:59:58.000Z', sample_index: 0, sector: 'omni', weighting: 'A', unit: 'dBFS', leq_db: -30, coverage: 0.5 });
    const day1 = readFileSync(join(dir, 'levels', '2026-12-03-seconds.csv'), 'utf8').trim().split('\n');
    expect(day1[0]).toBe('utc,sample_index,sector,weighting,unit,leq_db,coverage');
    expect(day1.slice(1)).toEqual([
      '2026-12-03T23:59:58.000Z,0,gate,A,dBFS,-40.00,1.000',
      '2026-12-03T23:59:58.000Z,0,omni,A,dBFS,-30.00,0.500',
      '2026-12-03T23:59:59.000Z,48000,gate,A,dBFS,-41.00,1.000',
      '2026-12-03T23:59:59.000Z,48000,omni,A,dBFS,-30.00,0.500',
    ]);
    expect(readFileSync(join(dir, 'levels', '2026-12-04-seconds.csv'), 'utf8').trim().split('\n')).toHaveLength(5);
    const rec = JSON.parse(readFileSync(join(dir, 'levels', '2026-12-03-intervals.jsonl'), 'utf8').trim());
    expect(rec).toEqual({ utc: '2026-12-03T23:59:00.000Z', interval: '1min', sector: 'gate', weighting: 'A', unit: 'dBFS', leq_db: -41.23, lmax_db: -40, lmin_db: -43, l10_db: -40.5, l50_db: -41.5, l90_db: -42.5, l95_db: -42.75, seconds: 60 });
    expect(readFileSync(join(dir, 'levels', '2026-12-03-intervals.csv'), 'utf8').trim().split('\n')[1]).toBe('2026-12-03T23:59:00.000Z,1min,gate,A,dBFS,-41.23,-40.00,-43.00,-40.50,-41.50,-42.50,-42.75,60');
    expect(st.seconds('gate').map((s) => s.leqDb)).toEqual([-40, -41, -42, -43]);
    expect(st.seconds('gate', T0 + 1000, T0 + 3000).map((s) => s.leqDb)).toEqual([-41, -42]);
    expect(st.intervals('gate', '1min')).toHaveLength(1);
    expect(st.series().sort()).toEqual(['gate', 'omni']);
    expect(st.counters.linesWritten).toBe(18);
  });

  it('keeps at most RECENT_SECONDS values per series in memory; without a folder writes nothing', async () => {
    const st = new LevelStore(null);
    for (let k = 0; k < RECENT_SECONDS + 10; k++) st.addSecond({ utcMs: T0 + k * 1000, sampleIndex: k, sector: 'gate', weighting: 'Z', unit: 'dBFS', leqDb: k, coverage: 1 });
    await st.flushed();
    const s = st.seconds('gate');
    expect(s).toHaveLength(RECENT_SECONDS);
    expect(s[0].leqDb).toBe(10);
    expect(st.counters.linesWritten).toBe(0);
  });

  it('a folder that cannot be made is counted as a write error, told without its path', async () => {
    writeFileSync(join(dir, 'a-file'), 'not a folder');
    const st = new LevelStore(join(dir, 'a-file', 'levels'));
    st.addSecond({ utcMs: T0, sampleIndex: 0, sector: 'gate', weighting: 'Z', unit: 'dBFS', leqDb: -1, coverage: 1 });
    await st.flushed();
    expect(st.counters.writeErrors).toBeGreaterThanOrEqual(1); // one per batch of lines that failed
    expect(st.counters.lastError).not.toContain(dir);
    expect(st.counters.lastError).toMatch(/ENOTDIR|EEXIST/);
  });
});
