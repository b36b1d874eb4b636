/**
 * server/site/tracker.ts: the constant-velocity Kalman filter against its closed forms (the discrete
 * white-noise acceleration model, Bar-Shalom, Li & Kirubarajan 2001, from memory), gating, ids and
 * bounds, and the whole chain bearings → locate.ts → tracker on a scene of three arrays with three
 * still sources and one moving at 2 m/s (issue 15's acceptance scene), with and without travel time.
 */
import { describe, expect, it } from 'vitest';
import { locateWindow } from '../../server/site/locate.ts';
import { ACCEL_SIGMA_MPS2, ConstantVelocityTracker, HISTORY_LENGTH, INITIAL_SPEED_SIGMA_MPS, MAX_MISSES, MEAS_FLOOR_M } from '../../server/site/tracker.ts';
import type { LocatedSource } from '../../server/site/types.ts';
import { TestRandom } from '../helpers/random.ts';
import { SCENE_START_UTC_MS, moving, sceneBearings, still, type SceneArray } from '../helpers/site-scene.ts';

const T0 = SCENE_START_UTC_MS;
const C = 343;

function fix(xM: number, yM: number, varM2 = 0.04, extra: Partial<LocatedSource> = {}): LocatedSource {
  return {
    xM, yM, zM: null, covXY: [varM2, 0, varM2], ellipse: { majorM: Math.sqrt(varM2), minorM: Math.sqrt(varM2), angleDeg: 0 },
    uncertaintyM: Math.sqrt(varM2), levelDb: 80, nodes: ['a', 'b', 'c'], ambiguous: false, residualDeg: 0, ...extra,
  };
}

describe('constant-velocity filter', () => {
  it('predicts the covariance by F P Fᵀ + Q, Q = σ_a²·[[dt⁴/4, dt³/2], [dt³/2, dt²]] per axis', () => {
    const tr = new ConstantVelocityTracker();
    tr.update(T0, [fix(10, 20, 0.04)]);
    const [h] = tr.predict(T0 + 2000);
    const dt = 2;
    const p0 = 0.04 + MEAS_FLOOR_M ** 2;
    const v0 = INITIAL_SPEED_SIGMA_MPS ** 2;
    // Position variance: p0 + dt²·v0 + σ_a²·dt⁴/4; no cross-axis term.
    expect(h.covXY[0]).toBeCloseTo(p0 + dt * dt * v0 + (ACCEL_SIGMA_MPS2 ** 2 * dt ** 4) / 4, 10);
    expect(h.covXY[1]).toBeCloseTo(0, 12);
    expect(h.covXY[2]).toBeCloseTo(h.covXY[0], 12);
    expect([h.xM, h.yM, h.vxMps, h.vyMps]).toEqual([10, 20, 0, 0]);
  });

  it('a noise-free straight line at constant speed: position and velocity converge to the truth', () => {
    const tr = new ConstantVelocityTracker();
    let last = null;
    for (let w = 0; w < 80; w++) last = tr.update(T0 + w * 500, [fix(1 + 1.5 * w * 0.5, 2 - 0.8 * w * 0.5, 0.01)]);
    expect(last).toHaveLength(1);
    const t = last![0];
    expect(t.id).toBe('s1');
    expect(t.track.vxMps).toBeCloseTo(1.5, 3);
    expect(t.track.vyMps).toBeCloseTo(-0.8, 3);
    expect(t.xM).toBeCloseTo(1 + 1.5 * 79 * 0.5, 3);
    expect(t.track.hits).toBe(80);
    expect(t.track.ageWindows).toBe(80);
    expect(t.track.history).toHaveLength(80);
  });

  it('a fix referred to its emission time δ earlier measures the position δ earlier (H = [I, −δ·I])', () => {
    // Moving at 2 m/s along x; each fix is where the source was 0.15 s before the window.
    const lagged = new ConstantVelocityTracker();
    const naive = new ConstantVelocityTracker();
    for (let w = 0; w < 60; w++) {
      const t = T0 + w * 500;
      const x = 2 * (w * 0.5 - 0.15);
      lagged.update(t, [fix(x, 0, 0.01, { atUtcMs: t - 150 })]);
      naive.update(t, [fix(x, 0, 0.01)]);
    }
    const [a] = lagged.update(T0 + 30_000, [fix(2 * (30 - 0.15), 0, 0.01, { atUtcMs: T0 + 30_000 - 150 })]);
    const [b] = naive.update(T0 + 30_000, [fix(2 * (30 - 0.15), 0, 0.01)]);
    expect(a.xM).toBeCloseTo(60, 3);
    // Taken at the window's time, the same fixes leave the track 2 m/s · 0.15 s = 0.3 m behind.
    expect(b.xM).toBeCloseTo(59.7, 3);
  });
});

describe('tracks: gating, ids, bounds', () => {
  it('confirmed after two hits; ids s1, s2, … never reused; a tentative track dies at its first miss, a confirmed one after MAX_MISSES', () => {
    const tr = new ConstantVelocityTracker();
    expect(tr.update(T0, [fix(0, 0), fix(50, 0)])).toEqual([]);
    const second = tr.update(T0 + 500, [fix(0, 0)]);
    expect(second.map((t) => t.id)).toEqual(['s1']);
    expect(tr.trackCount).toBe(1); // s2 (tentative) missed once: gone
    // s1 coasts for MAX_MISSES windows, then is deleted; it is not reported while coasting.
    for (let w = 0; w < MAX_MISSES; w++) {
      expect(tr.update(T0 + 1000 + w * 500, [])).toEqual([]);
      expect(tr.trackCount).toBe(1);
    }
    tr.update(T0 + 1000 + MAX_MISSES * 500, []);
    expect(tr.trackCount).toBe(0);
    tr.update(T0 + 5000, [fix(0, 0)]);
    const again = tr.update(T0 + 5500, [fix(0, 0)]);
    expect(again.map((t) => t.id)).toEqual(['s3']);
  });

  it('a fix outside the χ² gate (9.21) of a track starts its own track; the nearest fix inside it updates the track', () => {
    const tr = new ConstantVelocityTracker();
    for (let w = 0; w < 10; w++) tr.update(T0 + w * 500, [fix(10, 10, 0.01)]);
    const out = tr.update(T0 + 5000, [fix(13, 10, 0.01), fix(10.1, 10, 0.01)]);
    expect(out.map((t) => t.id)).toEqual(['s1']);
    expect(out[0].xM).toBeGreaterThan(10);
    expect(out[0].xM).toBeLessThan(10.1);
    expect(tr.trackCount).toBe(2);
  });

  it('bounded: history, number of tracks (starts dropped and counted); stale windows and bad fixes refused', () => {
    const tr = new ConstantVelocityTracker({ maxTracks: 3 });
    for (let w = 0; w < HISTORY_LENGTH + 30; w++) tr.update(T0 + w * 500, [fix(0, 0), fix(20, 0), fix(40, 0), fix(60, 0)]);
    const out = tr.update(T0 + (HISTORY_LENGTH + 30) * 500, [fix(0, 0), fix(20, 0), fix(40, 0)]);
    expect(out).toHaveLength(3);
    for (const t of out) expect(t.track.history).toHaveLength(HISTORY_LENGTH);
    expect(tr.droppedStarts).toBe(HISTORY_LENGTH + 30);
    expect(tr.update(T0, [fix(0, 0)])).toEqual([]);
    expect(tr.staleWindows).toBe(1);
    const bad = new ConstantVelocityTracker();
    bad.update(T0, [fix(Number.NaN, 0), fix(0, 0, Number.POSITIVE_INFINITY)]);
    expect(bad.trackCount).toBe(0);
  });
});

describe('the site scene: three arrays, three still sources 20–60 m away, one moving at 2 m/s, σ = 1°, 60 windows of 0.5 s', () => {
  const arrays: SceneArray[] = [
    { node: 'a', xM: 0, yM: 0 },
    { node: 'b', xM: 60, yM: 0 },
    { node: 'c', xM: 30, yM: 50 },
  ];
  const sources = [still('p', 50, 32, 90), still('q', 30, -10, 84), still('r', 6, 26, 96), moving('m', 5, 15, 2, 0, 88)];
  /** Rows of the three edges are not aligned: each edge's row is this much before the window's UTC, s. */
  const rowOffsetS = [-0.02, -0.11, -0.3];

  function run(seed: number, locateSpeedMps: number) {
    const rng = new TestRandom(seed);
    const tr = new ConstantVelocityTracker();
    const windows: { w: number; tS: number; tracks: ReturnType<ConstantVelocityTracker['update']> }[] = [];
    for (let w = 0; w < 60; w++) {
      const tS = w * 0.5;
      const t = T0 + tS * 1000;
      const bs = sceneBearings(rng, arrays, sources, tS, 1, C, rowOffsetS);
      const located = locateWindow(bs, { speedOfSoundMps: locateSpeedMps, windowUtcMs: t, hints: tr.predict(t) });
      windows.push({ w, tS, tracks: tr.update(t, located) });
    }
    return windows;
  }

  function nearest(tS: number, x: number, y: number): { k: number; d: number } {
    const d = sources.map((s) => Math.hypot(x - s.at(tS)[0], y - s.at(tS)[1]));
    const k = d.indexOf(Math.min(...d));
    return { k, d: d[k] };
  }

  it('eight seeds: still tracks within 1.5 m, the moving track within 3 m with one id and its velocity within 0.3 m/s (RMS)', () => {
    let stillSq = 0, stillN = 0, stillWithin = 0, stillWorst = 0;
    let movSq = 0, movN = 0, movWorst = 0, vSq = 0, vN = 0, vWorst = 0, extra = 0;
    for (let seed = 1; seed <= 8; seed++) {
      const ids: Set<string>[] = sources.map(() => new Set());
      let movingSeen = 0;
      for (const { w, tS, tracks } of run(seed, C)) {
        // Confirmed after two windows. While all four tracks start at once their velocities are
        // still loose (σ 5 m/s at start) and a young track can lose its source to a neighbour (seed 8:
        // the moving source's first track gives way at window 3); from window 5 on, one id per source.
        if (w >= 5) for (const t of tracks) ids[nearest(tS, t.xM, t.yM).k].add(t.id);
        // After ten windows (5 s) the filters have converged.
        if (w < 10) continue;
        if (tracks.length > 4) extra++;
        for (const t of tracks) {
          const { k, d } = nearest(tS, t.xM, t.yM);
          if (k < 3) {
            stillSq += d * d; stillN++; stillWorst = Math.max(stillWorst, d);
            if (d <= 1.5) stillWithin++;
          } else {
            movingSeen++;
            movSq += d * d; movN++; movWorst = Math.max(movWorst, d);
            expect(d).toBeLessThan(3);
            if (w >= 20) {
              const e = Math.hypot(t.track.vxMps - 2, t.track.vyMps);
              vSq += e * e; vN++; vWorst = Math.max(vWorst, e);
            }
          }
        }
      }
      // One id per source over windows 5–59, the moving one reported in most windows after convergence.
      for (const s of ids) expect(s.size).toBe(1);
      expect(movingSeen).toBeGreaterThanOrEqual(45);
    }
    expect(extra).toBe(0);
    // Measured over 8 seeds: still 99.9 % within 1.5 m (RMS 0.52 m, worst 2.0 m); moving RMS 0.53 m,
    // worst 1.35 m; velocity RMS 0.22 m/s, worst 0.54 m/s.
    expect(stillWithin / stillN).toBeGreaterThan(0.99);
    expect(Math.sqrt(stillSq / stillN)).toBeLessThan(0.75);
    expect(Math.sqrt(movSq / movN)).toBeLessThan(1);
    expect(Math.sqrt(vSq / vN)).toBeLessThan(0.3);
    expect(vWorst).toBeLessThan(0.8);
    console.log(`site-tracker scene (8 seeds, windows 10–59): still RMS ${Math.sqrt(stillSq / stillN).toFixed(3)} m, within 1.5 m ${((100 * stillWithin) / stillN).toFixed(1)} %, worst ${stillWorst.toFixed(2)} m; moving RMS ${Math.sqrt(movSq / movN).toFixed(3)} m, worst ${movWorst.toFixed(2)} m; velocity (windows 20–59) RMS ${Math.sqrt(vSq / vN).toFixed(3)} m/s, worst ${vWorst.toFixed(2)} m/s`);
  });

  it('travel time: ignoring it leaves the moving track behind the source; with it the track is on the source', () => {
    const along = (c: number) => {
      let sum = 0, n = 0;
      for (let seed = 1; seed <= 8; seed++) {
        for (const { w, tS, tracks } of run(seed, c)) {
          if (w < 10) continue;
          for (const t of tracks) {
            const { k } = nearest(tS, t.xM, t.yM);
            if (k !== 3) continue;
            sum += t.xM - sources[3].at(tS)[0];
            n++;
          }
        }
      }
      return sum / n;
    };
    const withTravel = along(C);
    // c taken as infinite: bearings compared at their rows' UTC, as if the sound arrived at once.
    const without = along(1e12);
    // Measured: −0.045 m with, −0.228 m without (the sound takes 0.06–0.2 s to reach the arrays, the source moves 2 m/s).
    expect(Math.abs(withTravel)).toBeLessThan(0.1);
    expect(without).toBeLessThan(-0.15);
    console.log(`site-tracker travel time: mean along-track error ${withTravel.toFixed(3)} m with, ${without.toFixed(3)} m without`);
  });
});

describe('a source that turns corners (issue 15: the yard cart, a 20 m × 10 m loop at 2 m/s)', () => {
  // Corners (30,20) → (50,20) → (50,30) → (30,30) → back, as in config/scenes/eastgate-yard.json.
  const corners: [number, number][] = [[30, 20], [50, 20], [50, 30], [30, 30]];
  function onLoop(tS: number): [number, number] {
    let d = (2 * tS) % 60;
    for (let i = 0; i < 4; i++) {
      const a = corners[i], b = corners[(i + 1) % 4];
      const len = Math.hypot(b[0] - a[0], b[1] - a[1]);
      if (d <= len) return [a[0] + ((b[0] - a[0]) * d) / len, a[1] + ((b[1] - a[1]) * d) / len];
      d -= len;
    }
    return corners[0];
  }
  function laps(opts: ConstructorParameters<typeof ConstantVelocityTracker>[0]) {
    let ids = 0, missing = 0, sq = 0, n = 0, worst = 0;
    for (let seed = 1; seed <= 8; seed++) {
      const rng = new TestRandom(seed);
      const tr = new ConstantVelocityTracker(opts);
      const seen = new Set<string>();
      // Two laps: 120 windows of 0.5 s, eight right-angle corners; fixes with σ = 0.5 m per axis.
      for (let w = 0; w < 120; w++) {
        const [x, y] = onLoop(w * 0.5);
        const out = tr.update(T0 + w * 500, [fix(x + 0.5 * rng.gaussian(), y + 0.5 * rng.gaussian(), 0.25)]);
        if (w < 2) continue;
        if (out.length === 0) missing++;
        for (const t of out) {
          seen.add(t.id);
          const d = Math.hypot(t.xM - x, t.yM - y);
          sq += d * d; n++; worst = Math.max(worst, d);
        }
      }
      ids += seen.size;
    }
    return { idsPerSeed: ids / 8, missing, rmsM: Math.sqrt(sq / n), worstM: worst };
  }

  it('keeps one id round the corners with the manoeuvre model; without it a new id at every corner', () => {
    const withModel = laps({});
    const without = laps({ manoeuvreSigmaMps2: 0 });
    console.log(`corner loop (8 seeds, 2 laps): with manoeuvre model ${JSON.stringify(withModel)}; without ${JSON.stringify(without)}`);
    // Measured: with 1 id per seed, 0 windows missing, RMS 0.57 m, worst 1.66 m; without 8 ids per seed (one per corner).
    expect(withModel.idsPerSeed).toBe(1);
    expect(withModel.missing).toBe(0);
    expect(withModel.rmsM).toBeLessThan(0.75);
    expect(withModel.worstM).toBeLessThan(2.5);
    expect(without.idsPerSeed).toBeGreaterThanOrEqual(6);
  });

  it('the fix 1 s after a corner: outside the 9.21 gate of σ_a = 0.3 (d² 9.7), inside with the manoeuvre model', () => {
    // Noise-free fixes σ 0.5 m: straight along +x for 10 s, then north.
    const one = (opts: ConstructorParameters<typeof ConstantVelocityTracker>[0]) => {
      const tr = new ConstantVelocityTracker(opts);
      const ids: string[] = [];
      for (let w = 0; w <= 24; w++) {
        const [x, y] = onLoop(w * 0.5);
        for (const t of tr.update(T0 + w * 500, [fix(x, y, 0.25)])) ids.push(t.id);
      }
      return { ids: [...new Set(ids)], manoeuvres: tr.manoeuvres };
    };
    expect(one({ manoeuvreSigmaMps2: 0 }).ids).toEqual(['s1', 's2']);
    const m = one({});
    expect(m.ids).toEqual(['s1']);
    expect(m.manoeuvres).toBeGreaterThan(0);
  });
});
