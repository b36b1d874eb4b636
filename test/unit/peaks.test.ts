/**
 * PeakFinder against synthetic spectra whose peaks are known in closed form, and against the peaks
 * test/fixtures/dsp/make_dsp_fixtures.py computes with its own numpy implementation of the same
 * definition (test/fixtures/dsp/README.md) on the fixture's broadband spectra.
 */
import { spawnSync } from 'node:child_process';
import { mkdtempSync, readFileSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { afterAll, describe, expect, it } from 'vitest';
import { PeakFinder, type Peak, type PeakFinderOptions } from '../../server/dsp/peaks.ts';
import { DSP_FIXTURE_DIR, loadDspFixture } from '../helpers/dsp-fixture.ts';

const FIXTURES = fileURLToPath(DSP_FIXTURE_DIR);

const fixture = loadDspFixture();

/** A 1-D azimuth grid 0…(nAz−1)·step, with overrides. */
function line(nAz: number, over: Partial<PeakFinderOptions> = {}): PeakFinder {
  return new PeakFinder({
    nAz,
    nEl: 1,
    azimuthStepDeg: 1,
    elevationStepDeg: 0,
    azimuthStartDeg: 0,
    elevationStartDeg: 0,
    circularAzimuth: false,
    thresholdDb: 3,
    maxPeaks: 8,
    ...over,
  });
}

/** Shortest signed distance a − b on a circle of n steps. */
function wrapSteps(a: number, b: number, n: number): number {
  let d = (a - b) % n;
  if (d > n / 2) d -= n;
  if (d < -n / 2) d += n;
  return d;
}

describe('PeakFinder on 1-D synthetic spectra', () => {
  it('locates a parabola in dB sampled off the grid exactly', () => {
    // Three-point parabolic interpolation is exact for a parabola, whatever the offset.
    const n = 61;
    const finder = line(n, { azimuthStartDeg: -15, azimuthStepDeg: 0.5 });
    for (const x0 of [20, 20.3, 20.5, 29.999, 30.25, 31.5 - 1e-9, 40.71]) {
      const y = new Float64Array(n);
      for (let i = 0; i < n; i++) y[i] = 12 - 0.8 * (i - x0) ** 2;
      const [p, ...rest] = finder.find(y);
      expect(rest).toHaveLength(0);
      expect(Math.abs(p.index + p.offsetSteps - x0)).toBeLessThan(1e-12);
      expect(Math.abs(p.azimuthDeg - (-15 + 0.5 * x0))).toBeLessThan(1e-12 * 0.5 * n);
      expect(Math.abs(p.levelDb - 12)).toBeLessThan(1e-12);
      expect(Math.abs(p.offsetSteps)).toBeLessThanOrEqual(0.5);
      expect(p.elevationDeg).toBe(0);
      expect(p.elevationOffsetSteps).toBe(0);
    }
  });

  it('locates a Gaussian-shaped dB peak within 0.05 steps', () => {
    // Not a parabola, so the three-point fit is biased: for a width σ of 2 steps the worst case
    // over offsets is about 0.012 steps in position and 0.12 dB in level on a 30 dB peak
    // (computed for this shape, not a published bound).
    const n = 101;
    const finder = line(n);
    for (let k = 0; k <= 20; k++) {
      const x0 = 50 - 0.5 + k / 20;
      const y = new Float64Array(n);
      for (let i = 0; i < n; i++) y[i] = 30 * Math.exp(-((i - x0) ** 2) / (2 * 2 ** 2));
      const peaks = finder.find(y);
      expect(peaks).toHaveLength(1);
      expect(Math.abs(peaks[0].azimuthDeg - x0)).toBeLessThan(0.05);
      expect(Math.abs(peaks[0].levelDb - 30)).toBeLessThan(0.15);
    }
  });

  it('wraps a circular azimuth grid: a peak at 359.6° is found across the 0/359 seam', () => {
    const n = 360;
    const y = new Float64Array(n);
    for (let i = 0; i < n; i++) y[i] = -0.1 * wrapSteps(i, 359.6, n) ** 2;
    const peaks = line(n, { circularAzimuth: true }).find(y);
    expect(peaks).toHaveLength(1);
    // The grid maximum is 0° (0.4° away); the refinement moves it back over the seam.
    expect(peaks[0].index).toBe(0);
    expect(peaks[0].offsetSteps).toBeCloseTo(-0.4, 12);
    expect(Math.abs(peaks[0].azimuthDeg - 359.6)).toBeLessThan(1e-9);
    expect(Math.abs(peaks[0].levelDb)).toBeLessThan(1e-12);

    // The same values on a non-circular grid: two edge maxima, unrefined, the higher first.
    const edge = line(n).find(y);
    expect(edge).toEqual([
      { index: 0, azimuthDeg: 0, elevationDeg: 0, levelDb: y[0], offsetSteps: 0, elevationOffsetSteps: 0 },
      { index: 359, azimuthDeg: 359, elevationDeg: 0, levelDb: y[359], offsetSteps: 0, elevationOffsetSteps: 0 },
    ]);
  });

  it('gives one peak for a plateau, also one that straddles the seam', () => {
    const y = new Float64Array(20);
    y.set([5, 5], 9);
    const [p, ...rest] = line(20).find(y);
    expect(rest).toHaveLength(0);
    // A two-sample plateau: found at its first sample, refined to its centre.
    expect(p.index).toBe(9);
    expect(p.azimuthDeg).toBe(9.5);
    expect(p.levelDb).toBe(5.625);

    const wide = new Float64Array(20);
    wide.fill(7, 4, 9);
    expect(line(20).find(wide).map((q) => q.index)).toEqual([4]);

    const seam = new Float64Array(24);
    seam[23] = 4;
    seam[0] = 4;
    seam[1] = 4;
    const ring = line(24, { azimuthStepDeg: 15, circularAzimuth: true });
    expect(ring.find(seam).map((q) => q.index)).toEqual([23]);
    // A constant spectrum on a ring has no maximum at all.
    expect(ring.find(new Float64Array(24).fill(-3))).toEqual([]);
  });

  it('applies the threshold relative to the median, strictly', () => {
    const n = 41;
    const make = (floorDb: number, heightDb: number) => {
      const y = new Float64Array(n).fill(floorDb);
      y[20] = floorDb + heightDb;
      return y;
    };
    const finder = line(n, { thresholdDb: 3 });
    for (const floorDb of [-80, 0, 94.5]) {
      expect(finder.find(make(floorDb, 2.9))).toEqual([]);
      expect(finder.find(make(floorDb, 3.25)).map((p) => p.index)).toEqual([20]);
    }
    // Exactly median + threshold is not enough.
    expect(finder.find(make(0, 3))).toEqual([]);
    // A negative threshold admits points below the median: the lone maximum of a ramp's end.
    const ramp = Float64Array.from({ length: n }, (_, i) => i * 0.01);
    expect(line(n, { thresholdDb: -1 }).find(ramp).map((p) => p.index)).toEqual([n - 1]);
    // Even count: the median is the mean of the two middle values (1 and 1.5 → 1.25), neither of
    // the middle values alone (dyadic values, so the sums are exact).
    const even = Float64Array.from([0, 1, 1.5, 2, 5.5, 0]);
    expect(line(6, { thresholdDb: 4.125 }).find(even).map((p) => p.index)).toEqual([4]); // 5.5 > 5.375
    expect(line(6, { thresholdDb: 4.375 }).find(even)).toEqual([]); // 5.5 < 5.625
  });

  it('sorts by refined level, keeps at most maxPeaks, and reuses the out array', () => {
    const n = 100;
    const heights: [number, number][] = [[10, 4], [30, 9], [50, 6], [70, 9], [90, 7.5]];
    const y = new Float64Array(n);
    for (const [at, h] of heights) {
      y[at - 1] = h - 1;
      y[at] = h;
      y[at + 1] = h - 1;
    }
    const all = line(n, { thresholdDb: 1, maxPeaks: 10 }).find(y);
    // Equal levels keep ascending index order.
    expect(all.map((p) => p.index)).toEqual([30, 70, 90, 50, 10]);
    for (let k = 1; k < all.length; k++) expect(all[k - 1].levelDb).toBeGreaterThanOrEqual(all[k].levelDb);

    const two = line(n, { thresholdDb: 1, maxPeaks: 2 });
    const out: Peak[] = [];
    const first = two.find(y, out);
    expect(first).toBe(out);
    expect(out.map((p) => p.index)).toEqual([30, 70]);
    const held = out[0];
    const quiet = new Float64Array(n);
    quiet[50] = 20;
    two.find(quiet, out);
    expect(out).toHaveLength(1);
    expect(out[0]).toBe(held);
    expect(out[0].index).toBe(50);
  });

  it('leaves its input unchanged', () => {
    const y = Float64Array.from({ length: 50 }, (_, i) => Math.sin(i * 0.7) * 10);
    const copy = y.slice();
    line(50, { thresholdDb: 0 }).find(y);
    expect(y).toEqual(copy);
  });
});

describe('PeakFinder on a 2-D azimuth × elevation grid', () => {
  const nAz = 72;
  const nEl = 19;
  const grid = (over: Partial<PeakFinderOptions> = {}) =>
    new PeakFinder({
      nAz,
      nEl,
      azimuthStepDeg: 5,
      elevationStepDeg: 5,
      azimuthStartDeg: 0,
      elevationStartDeg: 0,
      circularAzimuth: true,
      thresholdDb: 3,
      maxPeaks: 4,
      ...over,
    });
  /** A separable paraboloid in dB centred at (az0, el0) steps; azimuth distance wraps. */
  const paraboloid = (az0: number, el0: number, peakDb: number) => {
    const y = new Float64Array(nAz * nEl);
    for (let e = 0; e < nEl; e++) {
      for (let a = 0; a < nAz; a++) y[e * nAz + a] = peakDb - 0.3 * wrapSteps(a, az0, nAz) ** 2 - 0.7 * (e - el0) ** 2;
    }
    return y;
  };

  it('refines both axes exactly for a separable paraboloid, including across the seam', () => {
    for (const [az0, el0] of [[40.3, 6.2], [10, 9.5 - 1e-9], [71.8, 3.45], [0.2, 12]]) {
      const [p, ...rest] = grid().find(paraboloid(az0, el0, 5));
      expect(rest).toHaveLength(0);
      const e = Math.floor(p.index / nAz);
      const a = p.index % nAz;
      expect(Math.abs(wrapSteps(a + p.offsetSteps, az0, nAz))).toBeLessThan(1e-12);
      expect(Math.abs(e + p.elevationOffsetSteps - el0)).toBeLessThan(1e-12);
      expect(Math.abs(p.azimuthDeg - 5 * az0)).toBeLessThan(1e-9);
      expect(Math.abs(p.elevationDeg - 5 * el0)).toBeLessThan(1e-9);
      expect(Math.abs(p.levelDb - 5)).toBeLessThan(1e-12);
    }
  });

  it('does not refine elevation at the grid edge (90°) but still refines azimuth', () => {
    const [p] = grid().find(paraboloid(30.25, 18.4, 0));
    expect(Math.floor(p.index / nAz)).toBe(18);
    expect(p.elevationOffsetSteps).toBe(0);
    expect(p.elevationDeg).toBe(90);
    expect(p.offsetSteps).toBeCloseTo(0.25, 12);
  });

  it('uses the 8-neighbourhood: a diagonal neighbour that is higher suppresses a point', () => {
    const y = new Float64Array(nAz * nEl);
    y[5 * nAz + 10] = 10; // grid (el 5, az 10)
    y[6 * nAz + 11] = 11; // its diagonal neighbour
    y[12 * nAz + 40] = 9;
    y[12 * nAz + 41] = 9; // a two-cell plateau → one peak
    const peaks = grid().find(y);
    expect(peaks.map((p) => p.index)).toEqual([6 * nAz + 11, 12 * nAz + 40]);
    expect(peaks[1].azimuthDeg).toBe(202.5);
  });

  it('sorts several 2-D peaks and keeps maxPeaks', () => {
    const y = new Float64Array(nAz * nEl);
    const at = [[3, 5, 6], [60, 10, 12], [30, 15, 8], [45, 2, 12], [20, 8, 4]];
    for (const [a, e, h] of at) y[e * nAz + a] = h;
    const peaks = grid({ maxPeaks: 3, thresholdDb: 1 }).find(y);
    expect(peaks.map((p) => [p.index % nAz, Math.floor(p.index / nAz)])).toEqual([[45, 2], [60, 10], [30, 15]]);
  });
});

describe('PeakFinder argument checks', () => {
  const base: PeakFinderOptions = {
    nAz: 36,
    nEl: 1,
    azimuthStepDeg: 10,
    elevationStepDeg: 0,
    azimuthStartDeg: 0,
    elevationStartDeg: 0,
    circularAzimuth: true,
    thresholdDb: 3,
    maxPeaks: 4,
  };
  const cases: [Partial<PeakFinderOptions>, RegExp][] = [
    [{ nAz: 0 }, /nAz must be an integer in 1…/],
    [{ nAz: 2.5 }, /nAz must be an integer/],
    [{ nEl: 0 }, /nEl must be an integer in 1…/],
    [{ nAz: 4096, nEl: 4096, circularAzimuth: false }, /nAz·nEl must be at most/],
    [{ azimuthStepDeg: 0 }, /azimuthStepDeg must be > 0 when nAz > 1/],
    [{ azimuthStepDeg: Number.NaN }, /azimuthStepDeg must be a finite number/],
    [{ nEl: 3, elevationStepDeg: -5 }, /elevationStepDeg must be > 0 when nEl > 1/],
    [{ azimuthStartDeg: Infinity }, /azimuthStartDeg must be a finite number/],
    [{ thresholdDb: Number.NaN }, /thresholdDb must be a finite number/],
    [{ maxPeaks: 0 }, /maxPeaks must be an integer in 1…/],
    [{ azimuthStepDeg: 9 }, /circular azimuth grid must span 360°/],
    [{ nAz: 2, azimuthStepDeg: 180 }, /nAz must be ≥ 3 for a circular/],
  ];
  it.each(cases)('rejects %o', (over, message) => {
    expect(() => new PeakFinder({ ...base, ...over })).toThrow(RangeError);
    expect(() => new PeakFinder({ ...base, ...over })).toThrow(message);
  });

  it('rejects a non-boolean circular flag, and spectra of the wrong length, type or with NaN', () => {
    expect(() => new PeakFinder({ ...base, circularAzimuth: 1 as unknown as boolean })).toThrow(TypeError);
    const finder = new PeakFinder(base);
    expect(() => finder.find(new Float64Array(35))).toThrow(/spectrumDb must have nAz·nEl = 36 values, got 35/);
    expect(() => finder.find(new Float32Array(36) as unknown as Float64Array)).toThrow(TypeError);
    const y = new Float64Array(36);
    y[7] = Number.NaN;
    expect(() => finder.find(y)).toThrow(/spectrumDb\[7\] is NaN/);
  });

  it('accepts −∞ levels and never reports them', () => {
    const y = new Float64Array(36).fill(-Infinity);
    y[4] = -20;
    const peaks = new PeakFinder({ ...base, thresholdDb: 0 }).find(y);
    expect(peaks).toHaveLength(1);
    // Neighbours at −∞: no refinement.
    expect(peaks[0]).toMatchObject({ index: 4, azimuthDeg: 40, levelDb: -20, offsetSteps: 0 });
  });
});

describe('PeakFinder against the numpy fixture (test/fixtures/dsp/spectra.json)', () => {
  it('carries the generated note and the four scenarios', () => {
    expect(fixture.note).toBe('generated by test/fixtures/dsp/make_dsp_fixtures.py — do not edit');
    expect(fixture.scenarios.length).toBeGreaterThanOrEqual(4);
  });

  const spectra = ['conventional', 'mvdr', 'conventionalNormalised', 'mvdrNormalised'] as const;
  for (const sc of fixture.scenarios) {
    it.each(spectra)(`${sc.name}: %s broadband dB peaks match`, (key) => {
      const g = sc.grid;
      const finder = new PeakFinder({
        nAz: g.nAz,
        nEl: g.nEl,
        azimuthStepDeg: g.azimuthStepDeg,
        elevationStepDeg: g.elevationStepDeg,
        azimuthStartDeg: g.azimuthStartDeg,
        elevationStartDeg: g.elevationStartDeg,
        circularAzimuth: g.circularAzimuth,
        thresholdDb: sc.peaks.thresholdDb,
        maxPeaks: sc.peaks.maxPeaks,
      });
      const bb = key.startsWith('mvdr') ? sc.broadband.mvdr : sc.broadband.conventional;
      const db = Float64Array.from(key.endsWith('Normalised') ? bb.normalisedDb : bb.db);
      const got = finder.find(db);
      const want = sc.peaks[key];
      expect(want.length).toBeGreaterThan(0);
      expect(got.map((p) => p.index)).toEqual(want.map((p) => p.index));
      for (let k = 0; k < want.length; k++) {
        expect(Math.abs(got[k].azimuthDeg - want[k].azimuthDeg)).toBeLessThan(1e-9);
        expect(Math.abs(got[k].elevationDeg - want[k].elevationDeg)).toBeLessThan(1e-9);
        expect(Math.abs(got[k].levelDb - want[k].levelDb)).toBeLessThan(1e-9);
        expect(Math.abs(got[k].offsetSteps - want[k].offsetSteps)).toBeLessThan(1e-9);
        expect(Math.abs(got[k].elevationOffsetSteps - want[k].elevationOffsetSteps)).toBeLessThan(1e-9);
      }
    });
  }

  const python = spawnSync('python3', ['-c', 'import numpy, scipy'], { encoding: 'utf8' }).status === 0;
  const dir = mkdtempSync(join(tmpdir(), 'nullsteer-dsp-'));
  afterAll(() => rmSync(dir, { recursive: true, force: true }));

  it.skipIf(!python)('regenerating the fixture gives no difference', () => {
    const run = spawnSync('python3', [join(FIXTURES, 'make_dsp_fixtures.py'), dir], { encoding: 'utf8' });
    expect(run.status, run.stderr).toBe(0);
    const fresh = readFileSync(join(dir, 'spectra.json'), 'utf8');
    const committed = readFileSync(join(FIXTURES, 'spectra.json'), 'utf8');
    if (fresh === committed) return;
    // Another LAPACK build may round differently in the last bits; anything beyond that is a change.
    expectClose(JSON.parse(fresh), JSON.parse(committed), '$');
  });
});

/** Deep comparison: same structure and strings, numbers within 1e-9 relative (or absolute near 0). */
function expectClose(a: unknown, b: unknown, path: string): void {
  if (typeof a === 'number' && typeof b === 'number') {
    expect(Math.abs(a - b), path).toBeLessThanOrEqual(1e-9 * Math.max(1, Math.abs(a), Math.abs(b)));
  } else if (Array.isArray(a) && Array.isArray(b)) {
    expect(a.length, path).toBe(b.length);
    for (let i = 0; i < a.length; i++) expectClose(a[i], b[i], `${path}[${i}]`);
  } else if (a !== null && b !== null && typeof a === 'object' && typeof b === 'object') {
    expect(Object.keys(a).sort(), path).toEqual(Object.keys(b).sort());
    for (const k of Object.keys(a)) expectClose((a as Record<string, unknown>)[k], (b as Record<string, unknown>)[k], `${path}.${k}`);
  } else {
    expect(a, path).toEqual(b);
  }
}
