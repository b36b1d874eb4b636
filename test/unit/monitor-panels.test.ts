/**
 * The pure parts of the dashboard's Levels and Events panels (client/src/lib/level-plot.ts,
 * event-list.ts): the level axis, line paths and table of the Levels plot, the bounded newest-first
 * event list, and where an event's sample index lands on the direction history's time line. The
 * expected coordinates are worked out by hand beside each check (linear maps: x = (t − from)·W/(to −
 * from), y = (high − dB)·H/(high − low); time = sample index / rate); no wall clock is read.
 */
import { describe, expect, it } from 'vitest';
import type { SpectrumRow } from '../../shared/messages.ts';
import { RowHistory } from '../../client/src/lib/history.ts';
import { latestTable, levelRange, linePath, orderSeries, pointsOf, timeTicks } from '../../client/src/lib/level-plot.ts';
import { beamClip, eventDurationS, eventView, isEvent, MAX_EVENTS, mergeEvents, timeOfSample, utcText, type MonitorEvent } from '../../client/src/lib/event-list.ts';
import type { LevelRecord } from '../../client/src/lib/levels-api.ts';

const FS = 48_000;
const ROW = 2400; // 20 rows/s at 48 kHz

function row(sampleIndex: number): SpectrumRow {
  const db = new Float32Array(4).fill(-20);
  return { seq: 0, sampleIndex, emittedAtMs: 0, shedStep: 0, normalised: false, nAz: 4, nEl: 1, conventionalDb: db, mvdrDb: db, peaks: { conventional: [], mvdr: [] } };
}

function ev(id: string, startSample: number, over: Partial<MonitorEvent> = {}): MonitorEvent {
  return { id, rule: 'gate-loud', sector: 'gate', state: 'active', startSample, endSample: null, startUtc: new Date(Date.UTC(2026, 11, 4, 2, 0, 0) + (startSample * 1000) / FS).toISOString(), endUtc: null, peakDb: -30, leqDb: -32, azimuthDeg: 35, elevationDeg: 0, thresholdDb: -80, unit: 'dBFS', clips: [], ...over };
}

function rec(utc: string, leqDb: number | null, l90Db?: number | null): LevelRecord {
  return { utc, weighting: 'A', unit: 'dBFS', leqDb, ...(l90Db !== undefined ? { l90Db } : {}) };
}

describe('Levels plot', () => {
  it('puts omni first and keeps the server order of the sectors', () => {
    expect(orderSeries(['gate', 'omni', 'pump'])).toEqual(['omni', 'gate', 'pump']);
    expect(orderSeries(['gate'])).toEqual(['gate']);
  });

  it('rounds the level axis out to 5 dB and makes it at least 10 dB wide', () => {
    // −31.2 … −24.9 → floor(−31.2/5)·5 = −35, ceil(−24.9/5)·5 = −20.
    expect(levelRange([-31.2, -24.9, NaN])).toEqual({ lowDb: -35, highDb: -20 });
    // One value −30 (a multiple of 5): one step either side, then widened to 10 dB: −35 … −25.
    expect(levelRange([-30])).toEqual({ lowDb: -35, highDb: -25 });
    expect(levelRange([])).toBeNull();
  });

  it('maps time and level linearly and breaks the line across missing records', () => {
    const t0 = Date.UTC(2026, 11, 4, 2, 0, 0);
    const iso = (s: number) => new Date(t0 + s * 1000).toISOString();
    const pts = pointsOf([rec(iso(0), -30), rec(iso(60), -40), rec(iso(120), null), rec(iso(240), -20)], 'leqDb');
    expect(pts.map((p) => p.db)).toEqual([-30, -40, -20]);
    // W 300 px over 300 s: 1 px/s; H 100 px over −50 … −10 dB: 2.5 px/dB (y = (−10 − dB)·2.5).
    // 0 s −30 → (0, 50); 60 s −40 → (60, 75); 240 s −20 → (240, 25), a new piece (180 s > 150 s gap).
    expect(linePath(pts, t0, t0 + 300_000, -50, -10, 300, 100, 150_000)).toBe('M0.0 50.0L60.0 75.0M240.0 25.0');
    expect(pointsOf([rec(iso(0), -30, -35)], 'l90Db')).toEqual([{ tMs: t0, db: -35 }]);
  });

  it('tables the newest record of each series in the order given', () => {
    const m = new Map<string, LevelRecord[]>([
      ['omni', [rec('2026-12-04T02:00:00.000Z', -30, -33), rec('2026-12-04T02:01:00.000Z', -29, -32)]],
      ['gate', [rec('2026-12-04T02:01:00.000Z', -28, -31)]],
      ['pump', []],
    ]);
    const t = latestTable(m, ['omni', 'gate', 'pump']);
    expect(t.map((r) => [r.series, r.utc, r.leqDb, r.l90Db, r.lmaxDb])).toEqual([
      ['omni', '2026-12-04T02:01:00.000Z', -29, -32, null],
      ['gate', '2026-12-04T02:01:00.000Z', -28, -31, null],
    ]);
  });

  it('labels the time axis at round UTC minutes', () => {
    const from = Date.UTC(2026, 11, 4, 1, 2, 30);
    // An hour: 15-min steps (60/15 = 4 labels at most) from 01:15.
    expect(timeTicks(from, from + 3_600_000).map((t) => t.text)).toEqual(['01:15', '01:30', '01:45', '02:00']);
    // 25 s from 01:02:30: 10-s steps (25/5 > 4, 25/10 ≤ 4), the start itself round.
    expect(timeTicks(from, from + 25_000).map((t) => t.text)).toEqual(['01:02:30', '01:02:40', '01:02:50']);
  });
});

describe('Events list', () => {
  it('keeps the newest MAX_EVENTS, newest first, an event held once and replaced by its newer copy', () => {
    let list: MonitorEvent[] = [];
    for (let i = 0; i < MAX_EVENTS + 5; i++) list = mergeEvents(list, [ev(`e${i}`, i * FS)]);
    expect(list).toHaveLength(MAX_EVENTS);
    expect(list[0].id).toBe(`e${MAX_EVENTS + 4}`);
    expect(list[MAX_EVENTS - 1].id).toBe('e5');
    const ended = ev('e100', 100 * FS, { state: 'ended', endSample: 104 * FS, clips: ['e100-beam.wav'] });
    const next = mergeEvents(list, [ended]);
    expect(next).toHaveLength(MAX_EVENTS);
    expect(next.find((e) => e.id === 'e100')).toEqual(ended);
    expect(list.find((e) => e.id === 'e100')!.state).toBe('active'); // the old list is unchanged
    expect(beamClip(ended)).toBe('e100-beam.wav');
    expect(beamClip(ev('x', 0, { clips: ['x-raw.wav'] }))).toBeNull();
  });

  it('checks the shape of listed events and formats their times and lengths', () => {
    expect(isEvent(ev('a', 0))).toBe(true);
    expect(isEvent({ id: 'a' })).toBe(false);
    expect(isEvent(null)).toBe(false);
    expect(utcText('2026-12-04T02:01:40.250Z')).toBe('2026-12-04 02:01:40');
    expect(utcText('nonsense')).toBe('—');
    // 4.5 s: (216 000 − 0) / 48 000; an active one runs to the newest sample known.
    expect(eventDurationS(ev('a', 0, { endSample: 216_000 }), FS)).toBe(4.5);
    expect(eventDurationS(ev('a', 48_000), FS, 96_000)).toBe(1);
    expect(eventDurationS(ev('a', 48_000), FS)).toBeNull();
    expect(eventDurationS(ev('a', 0, { endSample: 1 }), null)).toBeNull();
  });

  it('places an event on the history time line by its sample index', () => {
    const h = new RowHistory([0, 90, 180, 270], 64);
    // Rows at sample 100 000 + n·2400 (n = 0…39): time line 0, 0.05, …, 1.95 s.
    for (let n = 0; n < 40; n++) h.push(row(100_000 + n * ROW), 0, FS);
    // Sample 100 000 + 10·2400 + 1200 lies half a row after row 10: 0.5 + 0.025 s.
    expect(timeOfSample(h, 100_000 + 10 * ROW + 1200, FS)).toBeCloseTo(0.525, 12);
    expect(timeOfSample(h, 99_999, FS)).toBeNull();
    // Once the ring has moved on (64 rows held), an old sample is no longer placed.
    for (let n = 40; n < 100; n++) h.push(row(100_000 + n * ROW), 0, FS);
    expect(h.oldest).toBe(36);
    expect(timeOfSample(h, 100_000 + 35 * ROW, FS)).toBeNull();
    expect(timeOfSample(h, 100_000 + 36 * ROW, FS)).toBeCloseTo(36 * 0.05, 12);
  });

  it('chooses a span that holds the event and a top row just after its end', () => {
    const h = new RowHistory([0, 90, 180, 270], 9000);
    // 60 s of rows (1200 at 20 rows/s) from sample 0.
    for (let n = 0; n < 1200; n++) h.push(row(n * ROW), 0, FS);
    const spans = [15, 30, 60, 180, 450];
    // An event from 20 s to 24 s: 4 s · 1.25 + 2 = 7 s → 15 s span; top at 24 + 1.5 s (0.1 · 15) = 25.5 s = row 510.
    const v = eventView(h, ev('a', 20 * FS, { state: 'ended', endSample: 24 * FS }), FS, spans, 20)!;
    expect(v).toEqual({ spanS: 15, topRow: 510 });
    // An active 30-s event (from 29.95 s to the newest row at 59.95 s): 30 · 1.25 + 2 = 39.5 → 60 s; top = the newest row.
    expect(eventView(h, ev('b', 599 * ROW), FS, spans, 20)).toEqual({ spanS: 60, topRow: 1199 });
    // Spans needing more rows than the ring holds are not chosen: at 100 rows/s 60 s is 6000 rows (fits),
    // 180 s is 18 000 (does not); a 60-s event would want 76.9 s, so the longest that fits, 60 s.
    expect(eventView(h, ev('c', 0), FS, spans, 100)!.spanS).toBe(60);
    expect(eventView(h, ev('c', 0), FS, spans, 20)!.spanS).toBe(180);
    expect(eventView(h, ev('d', -5), FS, spans, 20)).toBeNull();
  });
});
