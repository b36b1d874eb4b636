/**
 * The site service's core without a broker: node registry (online → offline after the bound, with an
 * injected clock), the clock offset's lower envelope, windows on UTC with late messages, and the
 * counting of malformed and foreign messages. Every check is on counters, states and window
 * indices; the clock is a number the test sets. Window arithmetic: window k covers [k·w, (k+1)·w)
 * (the definition in the issue); the offset estimate follows from receive − send = offset + delay,
 * delay ≥ 0 (so the minimum is the estimate).
 */
import { describe, expect, it } from 'vitest';
import { siteSubject, type NodeStatusMessage, type PeakMessage, type Pose } from '../../shared/site.ts';
import { CLOCK_FLAG_MS, NodeRegistry, OFFSET_SAMPLES } from '../../server/site/node-registry.ts';
import { SiteCore, type PeaksToBearings } from '../../server/site/site-core.ts';
import { LAG_MARGIN_MS, LAG_MEMORY_S, SiteWindows } from '../../server/site/site-windows.ts';
import type { Bearing, LocateWindow, SourceTracker } from '../../server/site/types.ts';
import { mulberry32 } from '../helpers/random.ts';

const T0 = Date.UTC(2026, 0, 1, 12, 0, 0); // a whole second: window k = T0/500 + j starts at T0 + 500 j

function status(node: string, sentUtcMs: number, pose: Pose | null = { positionM: [0, 0, 0], headingDeg: 0 }, site = 'yard'): NodeStatusMessage {
  return { v: 1, site, node, sentUtcMs, uptimeS: 10, arrayName: 'ring8', channels: 8, pose, sampleRateHz: 48000, sampleIndex: 480000, sampleUtcMs: sentUtcMs, rowsPerS: 20, load: 0.3, input: 'flowing', dashboardUrl: `http://127.0.0.1:9000/`, pending: 0, dropped: 0 };
}

function peaks(node: string, utcMs: number, azimuthDeg = 45, site = 'yard'): PeakMessage {
  return { v: 1, site, node, sampleIndex: 1000, sampleRateHz: 48000, utcMs, peaks: [{ azimuthDeg, elevationDeg: 0, siteAzimuthDeg: azimuthDeg, siteElevationDeg: 0, levelDb: -20, widthDeg: 8, aboveFloorDb: 12 }] };
}

describe('node registry', () => {
  it('puts a node online with its first status and offline once not heard for offlineAfterS, on tick', () => {
    const r = new NodeRegistry({ offlineAfterS: 3 });
    expect(r.noteStatus(status('a', T0), T0)).toEqual({ node: 'a', state: 'online' });
    expect(r.tick(T0 + 2999)).toEqual([]);
    expect(r.state('a')).toBe('online');
    expect(r.tick(T0 + 3000)).toEqual([{ node: 'a', state: 'offline' }]);
    expect(r.state('a')).toBe('offline');
    expect(r.tick(T0 + 5000)).toEqual([]); // counted once
    expect(r.counters).toMatchObject({ wentOnline: 1, wentOffline: 1 });
    expect(r.noteStatus(status('a', T0 + 6000), T0 + 6000)).toEqual({ node: 'a', state: 'online' });
    expect(r.counters.wentOnline).toBe(2);
    expect(r.list()[0]).toMatchObject({ node: 'a', state: 'online', usedForPositions: true });
  });

  it('lists a node without a pose as not used for positions, with the reason', () => {
    const r = new NodeRegistry({ offlineAfterS: 3 });
    r.noteStatus(status('b', T0, null), T0);
    expect(r.list()[0]).toMatchObject({ node: 'b', pose: null, usedForPositions: false, why: 'no pose: listed, not used for positions' });
    expect(r.usablePose('b')).toBeNull();
  });

  it('estimates the clock offset as the minimum of receive − send over the last messages (delay only adds)', () => {
    const r = new NodeRegistry({ offlineAfterS: 3 });
    const rnd = mulberry32(7);
    const trueOffsetMs = 12; // site clock ahead of the edge
    for (let i = 0; i < OFFSET_SAMPLES; i++) {
      const sent = T0 + i * 1000;
      const delayMs = i === 5 ? 0 : 1 + rnd() * 30;
      r.noteStatus(status('a', sent), sent + trueOffsetMs + delayMs);
    }
    expect(r.clockOffsetMs('a')).toBeCloseTo(trueOffsetMs, 9);
    expect(r.list()[0].clockFlag).toBeUndefined();
    // The zero-delay sample leaves the window of OFFSET_SAMPLES: the envelope rises to the next smallest.
    for (let i = 0; i < 6; i++) {
      const sent = T0 + (OFFSET_SAMPLES + i) * 1000;
      r.noteStatus(status('a', sent), sent + trueOffsetMs + 3);
    }
    expect(r.clockOffsetMs('a')).toBeGreaterThan(trueOffsetMs);
    expect(r.clockOffsetMs('a')).toBeLessThanOrEqual(trueOffsetMs + 3);
  });

  it('flags an offset beyond the bound', () => {
    const r = new NodeRegistry({ offlineAfterS: 3 });
    r.noteStatus(status('a', T0), T0 - (CLOCK_FLAG_MS + 20)); // the edge is 70 ms ahead
    expect(r.list()[0]).toMatchObject({ clockOffsetMs: -(CLOCK_FLAG_MS + 20), clockFlag: 'clock: check NTP/PTP' });
  });

  it('holds at most maxNodes: evicts the node offline the longest, refuses when all are online', () => {
    const r = new NodeRegistry({ offlineAfterS: 1, maxNodes: 2 });
    r.noteStatus(status('a', T0), T0);
    r.noteStatus(status('b', T0), T0);
    expect(r.noteStatus(status('c', T0), T0)).toBe('refused');
    expect(r.counters.refusedFull).toBe(1);
    r.tick(T0 + 1000); // a and b offline
    r.noteStatus(status('c', T0 + 1500), T0 + 1500);
    expect(r.size).toBe(2);
    expect(r.counters.evicted).toBe(1);
  });
});

describe('windows on UTC', () => {
  const b = (utcMs: number): Bearing => ({ node: 'a', originM: [0, 0, 0], azimuthDeg: 0, elevationDeg: null, sigmaDeg: 2, levelDb: -20, utcMs });

  it('puts a bearing in window floor(utc / w), closes a window after its end + grace, and counts late ones', () => {
    const w = new SiteWindows({ windowS: 0.5, graceS: 0.3 });
    const k0 = T0 / 500;
    expect(w.indexOf(T0)).toBe(k0);
    expect(w.indexOf(T0 + 499.999)).toBe(k0);
    expect(w.indexOf(T0 + 500)).toBe(k0 + 1);
    expect(w.add('a', T0 + 100, [b(T0 + 100)], T0 + 120)).toBe(k0);
    // The first call closes the window before k0 (empty); k0 is inside its grace and stays open.
    expect(w.closeDue(T0 + 500 + 299).map((c) => c.index)).toEqual([k0 - 1]);
    // A late message inside the grace still counts for window k0. Its lag (250 ms) raises the grace
    // to 250 + LAG_MARGIN_MS = 350 ms: k0 is still open at T0 + 800 and closes at T0 + 850.
    expect(w.add('a', T0 + 450, [b(T0 + 450)], T0 + 700)).toBe(k0);
    expect(w.graceMs(T0 + 700)).toBe(250 + LAG_MARGIN_MS);
    expect(w.closeDue(T0 + 849)).toEqual([]);
    const closed = w.closeDue(T0 + 850);
    expect(closed.map((c) => c.index)).toEqual([k0]);
    expect(closed[0].bearings).toHaveLength(2);
    expect(closed[0].latestByNode.get('a')?.[0].utcMs).toBe(T0 + 450);
    // After the close, a message for k0 is late.
    expect(w.add('a', T0 + 480, [b(T0 + 480)], T0 + 900)).toBe('late');
    expect(w.counters.late).toBe(1);
    // Windows without bearings still close, in order, with no holes (the late one's 420 ms lag is
    // the grace now: 520 ms).
    expect(w.closeDue(T0 + 2000 + 520).map((c) => c.index)).toEqual([k0 + 1, k0 + 2, k0 + 3]);
  });

  it('the grace follows the largest lag of the last LAG_MEMORY_S seconds, between its floor and its ceiling', () => {
    const w = new SiteWindows({ windowS: 0.5, graceS: 0.3, maxGraceS: 5 });
    const k0 = T0 / 500;
    expect(w.graceMs(T0)).toBe(300);
    // A node 2 s behind real time (an edge on a loaded machine): its messages arrive 2 s after their UTC.
    for (let i = 0; i < 20; i++) expect(w.add('a', T0 + i * 100, [b(T0 + i * 100)], T0 + 2000 + i * 100)).toBe(k0 + Math.floor(i / 5));
    expect(w.graceMs(T0 + 3900)).toBe(2000 + LAG_MARGIN_MS);
    // Window k0 ends at T0 + 500: it waits until T0 + 2600, and nothing of the lagging node is late.
    expect(w.closeDue(T0 + 2599).map((c) => c.index)).toEqual([k0 - 1]);
    expect(w.closeDue(T0 + 2600).map((c) => c.index)).toEqual([k0]);
    expect(w.add('a', T0 + 2000, [b(T0 + 2000)], T0 + 4000)).toBe(k0 + 4);
    expect(w.counters.late).toBe(0);
    // A lag beyond the ceiling holds windows for 5 s at most; its messages are late.
    w.add('a', T0 + 2100, [b(T0 + 2100)], T0 + 12_100);
    expect(w.graceMs(T0 + 12_100)).toBe(5000);
    // LAG_MEMORY_S after the last lagging message the grace is back at its floor.
    const later = T0 + 12_100 + LAG_MEMORY_S * 1000;
    w.add('a', later, [b(later)], later + 10);
    expect(w.graceMs(later + 10)).toBe(300);
  });

  it('drops a bearing far ahead of the site clock (counted)', () => {
    const w = new SiteWindows({ windowS: 0.5, maxAheadS: 2 });
    expect(w.add('a', T0 + 5000, [b(T0 + 5000)], T0)).toBe('ahead');
    expect(w.counters.ahead).toBe(1);
  });

  it('bounds the bearings per window', () => {
    const w = new SiteWindows({ windowS: 0.5, maxBearingsPerWindow: 3 });
    expect(w.add('a', T0, [b(T0), b(T0)], T0)).toBe(T0 / 500);
    expect(w.add('a', T0, [b(T0), b(T0)], T0)).toBe('full');
    expect(w.counters.full).toBe(1);
  });
});

describe('site core: messages in, windows out', () => {
  // Test doubles: bearings straight from the peak's site azimuth; a locator that reports how many
  // bearings it got; a tracker that numbers what it is given.
  const toBearings: PeaksToBearings = (m, pose) => m.peaks.map((p) => ({ node: m.node, originM: pose.positionM, azimuthDeg: p.siteAzimuthDeg ?? 0, elevationDeg: null, sigmaDeg: 2, levelDb: p.levelDb, utcMs: m.utcMs }));
  const calls: number[] = [];
  const locate: LocateWindow = (bs) => {
    calls.push(bs.length);
    return bs.length >= 2 ? [{ xM: 1, yM: 2, zM: null, covXY: [1, 0, 1], ellipse: { majorM: 1, minorM: 1, angleDeg: 0 }, uncertaintyM: 1, levelDb: 60, nodes: [...new Set(bs.map((x) => x.node))], ambiguous: false, residualDeg: 0 }] : [];
  };
  const tracker: SourceTracker = { update: (_t, located) => located.map((l, i) => ({ ...l, id: `s${i + 1}`, track: { vxMps: 0, vyMps: 0, ageWindows: 1, hits: 1, history: [] } })) };

  function make() {
    let now = T0;
    const core = new SiteCore({ site: 'yard', windowS: 0.5, offlineAfterS: 3, graceS: 0.3, locate, tracker, toBearings, nowMs: () => now });
    return { core, set: (t: number) => (now = t) };
  }
  const enc = (o: unknown) => new TextEncoder().encode(JSON.stringify(o));

  it('counts malformed and foreign messages by reason and ignores them', () => {
    const { core } = make();
    core.handle(siteSubject('yard', 'a', 'status'), '{not json');
    core.handle(siteSubject('yard', 'a', 'status'), enc({ ...status('a', T0), extra: 1 }));
    core.handle(siteSubject('yard', 'a', 'peaks'), enc({ ...peaks('a', T0), v: 2 }));
    core.handle(siteSubject('yard', 'a', 'status'), enc(status('b', T0))); // subject a, body b
    core.handle(siteSubject('yard', 'a', 'peaks'), enc(peaks('a', T0, 45, 'other')));
    core.handle('nullsteer.yard.a.bogus', enc(status('a', T0)));
    expect(core.counters).toMatchObject({ messages: 6, malformed: 3, foreign: 3 });
    expect(core.counters.byReason).toMatchObject({ badStatus: 2, badPeaks: 1, statusNodeMismatch: 1, peaksNodeMismatch: 1, subject: 1 });
    expect(core.registry.size).toBe(0);
  });

  it('locates per window from nodes online with a pose; a node without a pose is listed and unused', () => {
    const { core, set } = make();
    core.handle(siteSubject('yard', 'a', 'status'), enc(status('a', T0)));
    core.handle(siteSubject('yard', 'b', 'status'), enc(status('b', T0, { positionM: [100, 0, 0], headingDeg: 0 })));
    core.handle(siteSubject('yard', 'c', 'status'), enc(status('c', T0, null)));
    calls.length = 0;
    for (const n of ['a', 'b', 'c']) core.handle(siteSubject('yard', n, 'peaks'), enc(peaks(n, T0 + 100)));
    expect(core.counters.byReason.noPose).toBe(1);
    set(T0 + 800);
    const out = core.tick();
    expect(out.map((w) => w.index)).toEqual([T0 / 500]);
    expect(calls).toEqual([2]);
    expect(out[0].sources[0]).toMatchObject({ id: 's1', nodes: ['a', 'b'] });
    expect(out[0].bearings.map((x) => x.node)).toEqual(['a', 'b']);
    expect(core.counters.windows).toBe(1);
  });

  it('moves peak times by the node clock offset only with applyClockOffset (by default it is shown, not applied)', () => {
    const { core, set } = make();
    // The edge's clock reads 400 ms behind the site's (or its status took 400 ms): shown, peaks left at their own UTC.
    core.handle(siteSubject('yard', 'a', 'status'), enc(status('a', T0 - 400)));
    core.handle(siteSubject('yard', 'a', 'peaks'), enc(peaks('a', T0 + 300)));
    expect(core.registry.clockOffsetMs('a')).toBe(400);
    set(T0 + 800);
    const k0 = T0 / 500;
    expect(core.tick().find((w) => w.index === k0)?.bearingCount).toBe(1);
    // Applied: the peak at edge time T0 + 300 is site time T0 + 700 (window k0 + 1).
    let now = T0;
    const applied = new SiteCore({ site: 'yard', windowS: 0.5, offlineAfterS: 3, graceS: 0.3, applyClockOffset: true, locate, tracker, toBearings, nowMs: () => now });
    applied.handle(siteSubject('yard', 'a', 'status'), enc(status('a', T0 - 400)));
    applied.handle(siteSubject('yard', 'a', 'peaks'), enc(peaks('a', T0 + 300)));
    now = T0 + 1300;
    expect(applied.tick().find((w) => w.index === k0 + 1)?.bearingCount).toBe(1);
  });

  it('takes the bearings at the row\'s UTC less the mean age of the estimate (ageMs)', () => {
    const { core, set } = make();
    core.handle(siteSubject('yard', 'a', 'status'), enc(status('a', T0)));
    // A row at T0 + 700 whose covariance has a mean age of 500 ms describes T0 + 200: window k0.
    core.handle(siteSubject('yard', 'a', 'peaks'), enc({ ...peaks('a', T0 + 700), ageMs: 500 }));
    core.handle(siteSubject('yard', 'a', 'peaks'), enc({ ...peaks('a', T0 + 700), ageMs: -1 }));
    expect(core.counters.byReason.badPeaks).toBe(1);
    set(T0 + 800);
    const k0 = T0 / 500;
    expect(core.tick().find((w) => w.index === k0)?.bearings[0].bearings[0].utcMs).toBe(T0 + 200);
  });

  it('counts a locator failure and publishes the window empty', () => {
    let now = T0;
    const core = new SiteCore({ site: 'yard', windowS: 0.5, offlineAfterS: 3, locate: () => { throw new Error('boom'); }, tracker, toBearings, nowMs: () => now });
    core.handle(siteSubject('yard', 'a', 'status'), enc(status('a', T0)));
    core.handle(siteSubject('yard', 'a', 'peaks'), enc(peaks('a', T0 + 10)));
    now = T0 + 900;
    expect(core.tick()[0].sources).toEqual([]);
    expect(core.counters.locateFailed).toBe(1);
  });

  it('keeps at most keepWindows results', () => {
    let now = T0;
    const core = new SiteCore({ site: 'yard', windowS: 0.5, offlineAfterS: 3, keepWindows: 4, locate, tracker, toBearings, nowMs: () => now });
    for (let i = 1; i <= 20; i++) {
      now = T0 + i * 500;
      core.tick();
    }
    expect(core.results.length).toBe(4);
  });
});
