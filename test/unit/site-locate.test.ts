/**
 * server/site/bearing-sigma.ts, bearing-fix.ts, condense-rows.ts and locate.ts: the fix against scipy (test/fixtures/site-locate/
 * generate.py: scipy.optimize.least_squares on the same cost, the covariance from its Jacobian and
 * from the Fisher information), the worked check of shared/CHECKS.md, a Monte Carlo of the fix's
 * spread against the predicted ellipse, association (ghosts, two arrays, geometry refusals) and
 * travel time.
 */
import { spawnSync } from 'node:child_process';
import { mkdtempSync, readFileSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { afterAll, describe, expect, it } from 'vitest';
import type { PeakMessage } from '../../shared/site.ts';
import { ANGLE_SLOPE_K, MAX_SIGMA_DEG, MIN_SIGMA_DEG, bearingSigmaDeg, bearingsFromPeaks } from '../../server/site/bearing-sigma.ts';
import { bearingsFix, covarianceEllipse, fisherCovariance } from '../../server/site/bearing-fix.ts';
import { condenseRows } from '../../server/site/condense-rows.ts';
import { locateWindow } from '../../server/site/locate.ts';
import type { Bearing, TrackHint } from '../../server/site/types.ts';
import { TestRandom } from '../helpers/random.ts';
import { SCENE_START_UTC_MS, moving, sceneBearings, still, type SceneArray } from '../helpers/site-scene.ts';

const RAD = Math.PI / 180;
const C = 343;
const T0 = SCENE_START_UTC_MS;
const THREE: SceneArray[] = [
  { node: 'a', xM: 0, yM: 0 },
  { node: 'b', xM: 60, yM: 0 },
  { node: 'c', xM: 30, yM: 50 },
];

function bearing(node: string, x: number, y: number, azimuthDeg: number, extra: Partial<Bearing> = {}): Bearing {
  return { node, originM: [x, y, 0], azimuthDeg, elevationDeg: null, sigmaDeg: 1, levelDb: -40, utcMs: T0, ...extra };
}

describe('bearing σ', () => {
  it('is θ₃/(k√(2·SNR)) with a floor added in quadrature (radar angle-accuracy rule, common practice, from memory)', () => {
    // Width 20°, 20 dB above the floor: 20 / (1.6·√200) = 0.8839°, with the 0.5° floor √(0.8839² + 0.5²) = 1.0155°.
    expect(bearingSigmaDeg(20, 20)).toBeCloseTo(Math.hypot(20 / (ANGLE_SLOPE_K * Math.sqrt(200)), MIN_SIGMA_DEG), 12);
    expect(bearingSigmaDeg(20, 20)).toBeCloseTo(1.0155, 4);
    // Narrower or stronger → smaller; 10 dB more above the floor divides the spectral part by √10.
    expect(bearingSigmaDeg(10, 20)).toBeLessThan(bearingSigmaDeg(20, 20));
    expect(bearingSigmaDeg(20, 30)).toBeLessThan(bearingSigmaDeg(20, 20));
    // Clamps: very strong → the floor; unusable → the largest σ.
    expect(bearingSigmaDeg(2, 80)).toBeCloseTo(MIN_SIGMA_DEG, 6);
    expect(bearingSigmaDeg(360, 3)).toBe(MAX_SIGMA_DEG);
    for (const [w, l] of [[0, 20], [-1, 20], [20, 0], [Number.NaN, 10], [10, Number.POSITIVE_INFINITY]]) expect(bearingSigmaDeg(w, l)).toBe(MAX_SIGMA_DEG);
  });

  it('turns a peak message into site bearings: heading, clock offset, weak peaks left out, elevation only when asked', () => {
    const msg: PeakMessage = {
      v: 1, site: 'yard', node: 'n1', sampleIndex: 48000, sampleRateHz: 48000, utcMs: T0 + 500,
      peaks: [
        { azimuthDeg: 10, elevationDeg: 12, siteAzimuthDeg: null, siteElevationDeg: null, levelDb: -30, widthDeg: 15, aboveFloorDb: 12 },
        { azimuthDeg: 300, elevationDeg: 0, siteAzimuthDeg: 30, siteElevationDeg: 5, levelDb: -35, widthDeg: 20, aboveFloorDb: 9 },
        { azimuthDeg: 200, elevationDeg: 0, siteAzimuthDeg: null, siteElevationDeg: null, levelDb: -50, widthDeg: 40, aboveFloorDb: 1 },
      ],
    };
    const pose = { positionM: [5, -3, 1.5] as [number, number, number], headingDeg: 90 };
    const flat = bearingsFromPeaks(msg, pose, { clockOffsetMs: 20, useElevation: false });
    expect(flat).toHaveLength(2);
    expect(flat[0]).toEqual({ node: 'n1', originM: [5, -3, 1.5], azimuthDeg: 100, elevationDeg: null, sigmaDeg: bearingSigmaDeg(15, 12), levelDb: -30, utcMs: T0 + 480 });
    expect(flat[1].azimuthDeg).toBe(30);
    const tall = bearingsFromPeaks(msg, pose, { clockOffsetMs: 0, useElevation: true });
    expect(tall.map((b) => b.elevationDeg)).toEqual([12, 5]);
  });
});

interface FixtureCase {
  name: string;
  arraysM: [number, number][];
  azimuthDeg: number[];
  sigmaDeg: number[];
  fixM: [number, number];
  chi2: number;
  covXY: [number, number, number];
  covXYNumeric: [number, number, number];
  ellipse: { majorM: number; minorM: number; angleDeg: number };
  uncertaintyM: number;
}
const FIXTURES = fileURLToPath(new URL('../fixtures/site-locate/', import.meta.url));
const fixture = JSON.parse(readFileSync(join(FIXTURES, 'fixes.json'), 'utf8')) as { cases: FixtureCase[] };

describe('the bearings-only least-squares fix against scipy.optimize.least_squares (fixture)', () => {
  for (const c of fixture.cases) {
    it(c.name, () => {
      const fix = bearingsFix(c.arraysM.map((a) => a[0]), c.arraysM.map((a) => a[1]), c.azimuthDeg.map((a) => a * RAD), c.sigmaDeg.map((s) => s * RAD));
      expect(fix).not.toBeNull();
      expect(Math.abs(fix!.xM - c.fixM[0])).toBeLessThan(1e-6);
      expect(Math.abs(fix!.yM - c.fixM[1])).toBeLessThan(1e-6);
      expect(fix!.chi2).toBeCloseTo(c.chi2, 8);
      // Covariance: the Fisher form to 1e-7 relative, scipy's numerical Jacobian to 1e-5.
      const scale = Math.max(...c.covXY.map(Math.abs));
      for (let i = 0; i < 3; i++) {
        expect(Math.abs(fix!.covXY[i] - c.covXY[i])).toBeLessThan(1e-7 * scale);
        expect(Math.abs(fix!.covXY[i] - c.covXYNumeric[i])).toBeLessThan(1e-5 * scale);
      }
      const e = covarianceEllipse(fix!.covXY);
      expect(e.majorM).toBeCloseTo(c.ellipse.majorM, 6);
      expect(e.minorM).toBeCloseTo(c.ellipse.minorM, 6);
      // The angle is undefined for a circle (the worked check).
      if (c.ellipse.majorM - c.ellipse.minorM > 1e-6) expect(e.angleDeg).toBeCloseTo(c.ellipse.angleDeg, 5);
      // Through locateWindow: the same fix, ellipse and equal-area radius.
      const bs = c.arraysM.map((a, i) => bearing(`n${i}`, a[0], a[1], c.azimuthDeg[i], { sigmaDeg: c.sigmaDeg[i] }));
      const located = locateWindow(bs, { speedOfSoundMps: C, windowUtcMs: T0 });
      expect(located).toHaveLength(1);
      expect(Math.hypot(located[0].xM - c.fixM[0], located[0].yM - c.fixM[1])).toBeLessThan(1e-6);
      expect(located[0].uncertaintyM).toBeCloseTo(c.uncertaintyM, 6);
      expect(located[0].nodes).toHaveLength(c.arraysM.length);
    });
  }

  it('the worked check of shared/CHECKS.md: arrays at (0,0) and (100,0), bearings 45° and 135° → (50, 50)', () => {
    const [s] = locateWindow([bearing('a', 0, 0, 45), bearing('b', 100, 0, 135)], { speedOfSoundMps: C, windowUtcMs: T0 });
    expect(s.xM).toBeCloseTo(50, 9);
    expect(s.yM).toBeCloseTo(50, 9);
    expect(s.ambiguous).toBe(false);
    expect(s.residualDeg).toBeCloseTo(0, 9);
  });

  it('regenerating the fixture gives no difference', { timeout: 60_000 }, () => {
    const python = spawnSync('python3', ['-c', 'import numpy, scipy'], { encoding: 'utf8' }).status === 0;
    if (!python) return;
    const dir = mkdtempSync(join(tmpdir(), 'nullsteer-site-locate-'));
    try {
      const run = spawnSync('python3', [join(FIXTURES, 'generate.py'), dir], { encoding: 'utf8' });
      expect(run.status, run.stderr).toBe(0);
      expect(readFileSync(join(dir, 'fixes.json'), 'utf8')).toBe(readFileSync(join(FIXTURES, 'fixes.json'), 'utf8'));
    } finally {
      rmSync(dir, { recursive: true, force: true });
    }
  });
});

describe('Monte Carlo: the spread of the fixes matches the predicted ellipse', () => {
  it('2000 windows, three arrays, σ = 1°, 1.5°, 2°: covariance within 20 %, coverage of the 1-σ and 95 % ellipses', () => {
    const truth: [number, number] = [20, 25];
    const sigmas = [1, 1.5, 2];
    const rng = new TestRandom(20261203);
    const xs: number[] = [], ys: number[] = [];
    let in1 = 0, in68 = 0, in95 = 0, own95 = 0;
    const predicted = fisherCovariance(THREE.map((a) => a.xM), THREE.map((a) => a.yM), sigmas.map((s) => s * RAD), truth[0], truth[1])!;
    const d2 = (cov: [number, number, number], dx: number, dy: number) => (cov[2] * dx * dx - 2 * cov[1] * dx * dy + cov[0] * dy * dy) / (cov[0] * cov[2] - cov[1] * cov[1]);
    const trials = 2000;
    for (let k = 0; k < trials; k++) {
      const bs = THREE.map((a, i) => {
        const az = Math.atan2(truth[1] - a.yM, truth[0] - a.xM) / RAD + rng.gaussian() * sigmas[i];
        return bearing(a.node, a.xM, a.yM, az, { sigmaDeg: sigmas[i] });
      });
      const located = locateWindow(bs, { speedOfSoundMps: C, windowUtcMs: T0 });
      if (located.length !== 1) continue;
      const s = located[0];
      xs.push(s.xM);
      ys.push(s.yM);
      const q = d2(predicted, s.xM - truth[0], s.yM - truth[1]);
      // χ², 2 dof: P(d² ≤ k) = 1 − e^(−k/2): the 1-σ ellipse (k = 1) holds 39.35 %, k = 2.2789 68.3 %,
      // k = 5.9915 95 % (common practice).
      if (q <= 1) in1++;
      if (q <= 2.2789) in68++;
      if (q <= 5.9915) in95++;
      if (d2(s.covXY, s.xM - truth[0], s.yM - truth[1]) <= 5.9915) own95++;
    }
    const n = xs.length;
    // Measured: all 2000 windows give one source (a miss beyond 3σ after the fit would drop one).
    expect(n).toBeGreaterThan(trials * 0.99);
    const mx = xs.reduce((a, b) => a + b, 0) / n, my = ys.reduce((a, b) => a + b, 0) / n;
    let sxx = 0, sxy = 0, syy = 0;
    for (let i = 0; i < n; i++) {
      sxx += (xs[i] - mx) ** 2;
      sxy += (xs[i] - mx) * (ys[i] - my);
      syy += (ys[i] - my) ** 2;
    }
    const empirical: [number, number, number] = [sxx / (n - 1), sxy / (n - 1), syy / (n - 1)];
    const pe = covarianceEllipse(predicted), ee = covarianceEllipse(empirical);
    expect(Math.abs(ee.majorM / pe.majorM - 1)).toBeLessThan(0.2);
    expect(Math.abs(ee.minorM / pe.minorM - 1)).toBeLessThan(0.2);
    expect(Math.abs(ee.angleDeg - pe.angleDeg)).toBeLessThan(10);
    expect(Math.abs(empirical[0] / predicted[0] - 1)).toBeLessThan(0.2);
    expect(Math.abs(empirical[2] / predicted[2] - 1)).toBeLessThan(0.2);
    // Bias well inside the ellipse.
    expect(Math.hypot(mx - truth[0], my - truth[1])).toBeLessThan(0.2 * pe.minorM);
    expect(in1 / n).toBeGreaterThan(0.35);
    expect(in1 / n).toBeLessThan(0.44);
    expect(in68 / n).toBeGreaterThan(0.63);
    expect(in68 / n).toBeLessThan(0.73);
    expect(in95 / n).toBeGreaterThan(0.92);
    expect(own95 / n).toBeGreaterThan(0.92);
    console.log(`site-locate Monte Carlo: major ${ee.majorM.toFixed(3)} m (predicted ${pe.majorM.toFixed(3)}), minor ${ee.minorM.toFixed(3)} m (${pe.minorM.toFixed(3)}), angle ${ee.angleDeg.toFixed(1)}° (${pe.angleDeg.toFixed(1)}°), coverage 1σ ${(in1 / n).toFixed(3)} (0.393), 68 % ${(in68 / n).toFixed(3)}, 95 % ${(in95 / n).toFixed(3)}, own ellipse 95 % ${(own95 / n).toFixed(3)}, fixes ${n}/${trials}`);
  });
});

describe('association across arrays', () => {
  const sources = [still('p', 50, 32, 90), still('q', 30, -10, 84), still('r', 6, 26, 96), moving('m', 5, 15, 2, 0, 88)];

  it('three arrays, three still sources 20–60 m away and one moving at 2 m/s, σ = 1°: one fix per source, no ghosts', () => {
    const rng = new TestRandom(11);
    let fixes = 0, within = 0, sq = 0, worst = 0;
    for (let w = 0; w < 60; w++) {
      const tS = w * 0.5;
      const bs = sceneBearings(rng, THREE, sources, tS, 1, C, [-0.02, -0.11, -0.3]);
      const located = locateWindow(bs, { speedOfSoundMps: C, windowUtcMs: T0 + tS * 1000 });
      // No ghosts: never more fixes than sources, each near a source (at its emission time), none ambiguous.
      expect(located.length).toBeLessThanOrEqual(4);
      expect(located.length).toBeGreaterThanOrEqual(3);
      for (const s of located) {
        expect(s.ambiguous).toBe(false);
        expect(s.nodes).toEqual(['a', 'b', 'c']);
        const atS = (s.atUtcMs! - T0) / 1000;
        const d = Math.min(...sources.map((src) => Math.hypot(s.xM - src.at(atS)[0], s.yM - src.at(atS)[1])));
        expect(d).toBeLessThan(4);
        fixes++;
        sq += d * d;
        worst = Math.max(worst, d);
        if (d <= 1.5) within++;
      }
    }
    // Single windows, σ = 1° at 20–60 m: the fixes' RMS error ≈ 0.9 m (predicted ≈ 0.8 m for one source);
    // the tracker (site-tracker.test.ts) brings the still sources within 1.5 m.
    expect(fixes).toBeGreaterThanOrEqual(236);
    expect(within / fixes).toBeGreaterThan(0.85);
    expect(Math.sqrt(sq / fixes)).toBeLessThan(1.2);
    console.log(`site-locate scene: ${fixes} fixes in 60 windows, RMS error ${Math.sqrt(sq / fixes).toFixed(3)} m, worst ${worst.toFixed(2)} m, within 1.5 m ${((100 * within) / fixes).toFixed(1)} %`);
  });

  it('24 arrays on a 60 m circle, 8 still sources, σ = 0.5°: one fix per source from (nearly) all 24, within 0.5 m; a bearing two sources share at one array does not lose either', () => {
    const ring: SceneArray[] = Array.from({ length: 24 }, (_, i) => ({ node: `a${String(i).padStart(2, '0')}`, xM: 60 * Math.cos((i * Math.PI) / 12), yM: 60 * Math.sin((i * Math.PI) / 12) }));
    // Sunflower spiral on a disc of 40 m; levels 80…94 dB at 1 m.
    const eight = Array.from({ length: 8 }, (_, k) => still(`s${k}`, 40 * Math.sqrt((k + 0.5) / 8) * Math.cos(k * 2.39996), 40 * Math.sqrt((k + 0.5) / 8) * Math.sin(k * 2.39996), 80 + 2 * k));
    const rng = new TestRandom(5);
    for (let w = 0; w < 5; w++) {
      const located = locateWindow(sceneBearings(rng, ring, eight, w * 0.5, 0.5, C), { speedOfSoundMps: C, windowUtcMs: T0 + w * 500 });
      expect(located).toHaveLength(8);
      for (const src of eight) {
        const [x, y] = src.at(0);
        const d = Math.min(...located.map((s) => Math.hypot(s.xM - x, s.yM - y)));
        expect(d).toBeLessThan(0.5); // 1-σ radius about 0.15 m here (bench/site.ts geometry)
      }
      for (const s of located) expect(s.nodes.length).toBeGreaterThanOrEqual(22); // a bearing 3σ off is left out now and then
    }
    // A ninth source behind s0 as seen from a00 (on the line a00 → s0, 15 m further): a00 hears the
    // two as one direction and reports one bearing, which the louder takes; the other is located
    // by the 23 arrays left (the candidates seeded with a00's bearing are rebuilt from other pairs).
    const [x0, y0] = eight[0].at(0);
    const ux = (x0 - ring[0].xM) / Math.hypot(x0 - ring[0].xM, y0 - ring[0].yM), uy = (y0 - ring[0].yM) / Math.hypot(x0 - ring[0].xM, y0 - ring[0].yM);
    const behind = still('t', x0 + 15 * ux, y0 + 15 * uy, 95);
    const bs = sceneBearings(null, ring, [...eight, behind], 0, 0.5, C);
    const a00 = bs.filter((b) => b.node === 'a00').sort((p, q) => q.levelDb - p.levelDb);
    const shared = a00.find((b) => Math.abs(b.azimuthDeg - a00.find((c) => c !== b)!.azimuthDeg) < 1e-6) ?? null;
    expect(shared).not.toBeNull(); // the two directions are the same from a00
    const merged = bs.filter((b) => !(b.node === 'a00' && b !== shared && Math.abs(b.azimuthDeg - shared!.azimuthDeg) < 1e-6));
    const located = locateWindow(merged, { speedOfSoundMps: C, windowUtcMs: T0 });
    expect(located).toHaveLength(9);
    for (const src of [...eight, behind]) {
      const [x, y] = src.at(0);
      expect(Math.min(...located.map((s) => Math.hypot(s.xM - x, s.yM - y)))).toBeLessThan(0.05);
    }
    expect(located.filter((s) => s.nodes.length === 23)).toHaveLength(1);
  });

  it('a two-array crossing the third array would have heard is a ghost; only a track once fixed by three arrays vouches for it', () => {
    const deg = (dx: number, dy: number) => (Math.atan2(dy, dx) * 180) / Math.PI;
    // A source at (30, 20) heard by a (0, 0) and b (60, 0); c (30, 50) hears only a weak source elsewhere,
    // yet would have heard one at (30, 20): 1.1 dB at 1 m less 29.5 dB is −28.4 dBFS, over its weakest −50.
    const bs: Bearing[] = [
      bearing('a', 0, 0, deg(30, 20), { levelDb: -30, sigmaDeg: 1 }),
      bearing('b', 60, 0, deg(-30, 20), { levelDb: -30, sigmaDeg: 1 }),
      bearing('c', 30, 50, deg(-30, 10), { levelDb: -50, sigmaDeg: 1 }),
    ];
    const hint = (verified: boolean): TrackHint => ({ id: 's1', xM: 30, yM: 20, vxMps: 0, vyMps: 0, covXY: [0.25, 0, 0.25], speedSigmaMps: 0.1, verified });
    const near = (l: ReturnType<typeof locateWindow>) => l.filter((x) => Math.hypot(x.xM - 30, x.yM - 20) < 1).length;
    expect(near(locateWindow(bs, { speedOfSoundMps: C, windowUtcMs: T0 }))).toBe(0);
    // A track born of such a crossing while c was silent does not keep it alive…
    expect(near(locateWindow(bs, { speedOfSoundMps: C, windowUtcMs: T0, hints: [hint(false)] }))).toBe(0);
    // …one that was once fixed by three arrays (a source c now hears under a louder one) does.
    expect(near(locateWindow(bs, { speedOfSoundMps: C, windowUtcMs: T0, hints: [hint(true)] }))).toBe(1);
  });

  it('two arrays, two sources: both fixes flagged ambiguous; the level at 1 m picks the consistent pairing', () => {
    const two = THREE.slice(0, 2);
    const src = [still('p', 20, 30, 90), still('q', 42, 22, 76)];
    const located = locateWindow(sceneBearings(null, two, src, 0, 1, C), { speedOfSoundMps: C, windowUtcMs: T0 });
    expect(located).toHaveLength(2);
    for (const s of located) expect(s.ambiguous).toBe(true);
    // The ghost pairing would put a 90 dB and a 76 dB source together: its levels at 1 m disagree.
    const found = located.map((s) => [s.xM, s.yM, s.levelDb]).sort((a, b) => a[0] - b[0]);
    expect(found[0][0]).toBeCloseTo(20, 6);
    expect(found[0][1]).toBeCloseTo(30, 6);
    expect(found[0][2]).toBeCloseTo(90, 6);
    expect(found[1][0]).toBeCloseTo(42, 6);
    expect(found[1][2]).toBeCloseTo(76, 6);
    // One source seen by two arrays is not ambiguous.
    const one = locateWindow(sceneBearings(null, two, src.slice(0, 1), 0, 1, C), { speedOfSoundMps: C, windowUtcMs: T0 });
    expect(one).toHaveLength(1);
    expect(one[0].ambiguous).toBe(false);
  });

  it('a crossing of two arrays that a third array, hearing something else, does not support is refused as a ghost', () => {
    // a and b hear p; c hears only a source far from p. Without c's support, p's crossing is a ghost.
    const bs = [
      ...sceneBearings(null, THREE.slice(0, 2), [still('p', 20, 30)], 0, 1, C),
      bearing('c', 30, 50, 10),
    ];
    expect(locateWindow(bs, { speedOfSoundMps: C, windowUtcMs: T0 })).toEqual([]);
    // A track predicting a source there supports it (and then it is not ambiguous).
    const hint: TrackHint = { id: 's1', xM: 20.3, yM: 29.6, vxMps: 0, vyMps: 0, covXY: [0.25, 0, 0.25], speedSigmaMps: 0.1 };
    const kept = locateWindow(bs, { speedOfSoundMps: C, windowUtcMs: T0, hints: [hint] });
    expect(kept).toHaveLength(1);
    expect(kept[0].nodes).toEqual(['a', 'b']);
    expect(kept[0].ambiguous).toBe(false);
    // A third array that heard nothing this window does not refuse it.
    expect(locateWindow(bs.slice(0, 2), { speedOfSoundMps: C, windowUtcMs: T0 })).toHaveLength(1);
  });

  it('a source too weak for the third array to hear is not refuted by its silence (the yard fan: −44.2 dB at west, west hears down to −36.0 dB)', () => {
    // Issue 15's yard (config/scenes/eastgate-yard.json, config/arrays/yard-*.json): west is 51.5 m
    // from the fan (−10 dB at 1 m → −44.2 dB there, 29.1° from west), which a 0.2 m ring cannot
    // resolve beside the cart (here at (40, 20): 31.6 m, 18.4°, −36.0 dB): west reports no fan
    // direction, while east and north hear it at 123.1° and 306.9°. The weakest direction west
    // reports is the cart's, −36.0 dB (pump −35.0, generator −33.7): the fan would be 8.2 dB below it.
    const yard: SceneArray[] = [{ node: 'west', xM: 10, yM: 10 }, { node: 'east', xM: 70, yM: 12 }, { node: 'north', xM: 40, yM: 55 }];
    const sources = [still('pump', 20, 30, -8), still('generator', 40, 5, -4), still('cart', 40, 20, -6), still('fan', 55, 35, -10)];
    const all = sceneBearings(null, yard, sources, 0, 1, C);
    const westFan = all.findIndex((b) => b.node === 'west' && Math.abs(b.azimuthDeg - 29.1) < 0.1);
    expect(westFan).toBeGreaterThanOrEqual(0);
    expect(all[westFan].levelDb).toBeCloseTo(-10 - 20 * Math.log10(Math.hypot(45, 25)), 6);
    const bs = all.filter((_, i) => i !== westFan);
    const out = locateWindow(bs, { speedOfSoundMps: C, windowUtcMs: T0 });
    expect(out).toHaveLength(4);
    const fan = out.find((l) => Math.hypot(l.xM - 55, l.yM - 35) < 0.5);
    expect(fan?.nodes).toEqual(['east', 'north']);
    // West reporting a direction as weak as −50 dB (pointing at nothing here) shows it would have
    // heard the fan: the crossing is then refused as a ghost.
    const faint = bearing('west', 10, 10, 300, { levelDb: -50 });
    const refused = locateWindow([...bs, faint], { speedOfSoundMps: C, windowUtcMs: T0 });
    expect(refused.find((l) => Math.hypot(l.xM - 55, l.yM - 35) < 0.5)).toBeUndefined();
    expect(refused).toHaveLength(3);
  });

  it('refuses crossings behind an array, beyond 2 km, and of nearly parallel bearings', () => {
    const w = { speedOfSoundMps: C, windowUtcMs: T0 };
    // Rays pointing away from each other cross behind both arrays.
    expect(locateWindow([bearing('a', 0, 0, 225), bearing('b', 100, 0, 315)], w)).toEqual([]);
    // 89.5° and 90.5° from arrays 100 m apart cross about 5.7 km away.
    expect(locateWindow([bearing('a', 0, 0, 89.5), bearing('b', 100, 0, 90.5)], w)).toEqual([]);
    // 2° apart: nearly parallel (less than 3°).
    expect(locateWindow([bearing('a', 0, 0, 60), bearing('b', 10, 0, 62)], w)).toEqual([]);
    // Bad input: non-finite numbers are left out, not thrown on.
    expect(locateWindow([bearing('a', 0, 0, Number.NaN), bearing('b', 100, 0, 135), bearing('c', 50, 0, 90, { sigmaDeg: 0 })], w)).toEqual([]);
  });

  it('several rows of one node in a window become one bearing per direction', () => {
    const rows = [0, 1, 2, 3].flatMap((k) => [
      bearing('a', 0, 0, 45 + (k % 2 ? 0.4 : -0.4), { utcMs: T0 + k * 20, levelDb: -40, sigmaDeg: 1 + k * 0.1 }),
      bearing('a', 0, 0, 120, { utcMs: T0 + k * 20, levelDb: -50 }),
    ]);
    const merged = condenseRows(rows);
    expect(merged).toHaveLength(2);
    const first = merged.find((b) => Math.abs(b.azimuthDeg - 45) < 1)!;
    expect(first.azimuthDeg).toBeCloseTo(45, 9);
    expect(first.utcMs).toBeCloseTo(T0 + 30, 9);
    expect(first.sigmaDeg).toBeCloseTo(1.2, 9);
    // One row passes through unchanged.
    expect(condenseRows(rows.slice(0, 2))).toEqual(rows.slice(0, 2));
    // Through locate: two still sources seen over four rows by three arrays give two fixes.
    const src = [still('p', 50, 32), still('r', 6, 26)];
    const many = [0, 0.05, 0.1, 0.15].flatMap((t) => sceneBearings(null, THREE, src, t, 1, C));
    expect(locateWindow(many, { speedOfSoundMps: C, windowUtcMs: T0 + 150 })).toHaveLength(2);
  });

  it('height from elevations: z = z_array + ρ·tan(elevation), weighted', () => {
    const src = [12, 18, 4];
    const arrays = [[0, 0, 1], [40, 0, 2], [20, 40, 0]];
    const bs = arrays.map(([x, y, z], i) => {
      const rho = Math.hypot(src[0] - x, src[1] - y);
      return bearing(`n${i}`, x, y, Math.atan2(src[1] - y, src[0] - x) / RAD, { originM: [x, y, z], elevationDeg: Math.atan2(src[2] - z, rho) / RAD });
    });
    const [s] = locateWindow(bs, { speedOfSoundMps: C, windowUtcMs: T0 });
    expect(s.xM).toBeCloseTo(12, 9);
    expect(s.yM).toBeCloseTo(18, 9);
    expect(s.zM).toBeCloseTo(4, 9);
    expect(locateWindow(bs.map((b) => ({ ...b, elevationDeg: null })), { speedOfSoundMps: C, windowUtcMs: T0 })[0].zM).toBeNull();
  });

  it('level at 1 m: the mean of levelDb + 20·log10(r) over the supporting arrays (spherical spreading)', () => {
    const bs = sceneBearings(null, THREE, [still('p', 20, 25, 94)], 0, 1, C).map((b, i) => ({ ...b, levelDb: b.levelDb + [1, -1, 3][i] }));
    const [s] = locateWindow(bs, { speedOfSoundMps: C, windowUtcMs: T0 });
    expect(s.levelDb).toBeCloseTo(94 + 1, 9);
  });
});

describe('travel time', () => {
  it('a source moving at 2 m/s heard at 10 m and at ~50 m: located where it is at the window with travel time, 0.2–0.3 m off without', () => {
    // Array a is 10 m from the source, b and c about 50 m: the sound they hear left it 0.03 s and 0.15 s earlier.
    const results: string[] = [];
    for (const v of [[2, 0], [0, 2], [-2, 0], [1.41, 1.41]]) {
      const src = moving('m', 8 - v[0] * 10, 6 - v[1] * 10, v[0], v[1]);
      const bs = sceneBearings(null, THREE, [src], 10, 1, C);
      const t = T0 + 10_000;
      const hint: TrackHint = { id: 's1', xM: 8.1, yM: 5.9, vxMps: v[0], vyMps: v[1], covXY: [0.25, 0, 0.25], speedSigmaMps: 0.1 };
      const [withT] = locateWindow(bs, { speedOfSoundMps: C, windowUtcMs: t, hints: [hint] });
      // Ignoring travel time: the same bearings compared at their rows' UTC (c taken as infinite).
      const [without] = locateWindow(bs, { speedOfSoundMps: 1e12, windowUtcMs: t, hints: [hint] });
      const eWith = Math.hypot(withT.xM - 8, withT.yM - 6);
      const eWithout = Math.hypot(without.xM - 8, without.yM - 6);
      expect(eWith).toBeLessThan(1e-6);
      expect(withT.atUtcMs).toBe(t);
      expect(eWithout).toBeGreaterThan(0.15);
      expect(eWithout).toBeLessThan(0.4);
      // A young track's loose velocity is not used to place bearings: the fix stays at its emission time.
      const [loose] = locateWindow(bs, { speedOfSoundMps: C, windowUtcMs: t, hints: [{ ...hint, speedSigmaMps: 2 }] });
      expect(loose.atUtcMs).toBeLessThan(t - 30);
      results.push(`v (${v}) m/s: ${eWith.toExponential(1)} m with, ${eWithout.toFixed(3)} m without`);
    }
    console.log(`site-locate travel time: ${results.join('; ')}`);
  });

  it('without a track the fix is referred to the mean emission time of its bearings', () => {
    const bs = sceneBearings(null, THREE, [still('p', 20, 25)], 0, 1, C);
    const [s] = locateWindow(bs, { speedOfSoundMps: C, windowUtcMs: T0 });
    const meanRangeM = THREE.reduce((p, a) => p + Math.hypot(20 - a.xM, 25 - a.yM), 0) / 3;
    expect(s.atUtcMs).toBeCloseTo(T0 - (meanRangeM / C) * 1000, 6);
  });
});
