import { describe, expect, it } from 'vitest';
import { Matrix, solve } from 'ml-matrix';
import { HermitianSolver } from '../../server/dsp/hermitian.ts';
import {
  LoadingSolver,
  createLoadingResult,
  validateLoading,
  whiteNoiseGain,
  type LoadingSpec,
} from '../../server/dsp/loading.ts';
import { TestRandom, addOuterProduct, sampleCovariance } from '../helpers/random.ts';

/** Half-wavelength uniform line array: v_m = exp(−jπ m u), u = sin θ (written here, not imported). */
function ulaSteering(m: number, u: number): Float64Array {
  const v = new Float64Array(2 * m);
  for (let i = 0; i < m; i++) {
    v[2 * i] = Math.cos(-Math.PI * i * u);
    v[2 * i + 1] = Math.sin(-Math.PI * i * u);
  }
  return v;
}
function trace(a: Float64Array, m: number): number {
  let t = 0;
  for (let i = 0; i < m; i++) t += a[(i * m + i) * 2];
  return t;
}
/** MVDR weights (R + δI)⁻¹v / (vᴴ(R + δI)⁻¹v) by ml-matrix on the real embedding (CHECKS.md). */
function referenceMvdrWeights(a: Float64Array, m: number, delta: number, v: Float64Array): Float64Array {
  const e = new Matrix(2 * m, 2 * m);
  for (let i = 0; i < m; i++) {
    for (let j = 0; j < m; j++) {
      const re = a[(i * m + j) * 2] + (i === j ? delta : 0);
      const im = a[(i * m + j) * 2 + 1];
      e.set(i, j, re);
      e.set(i + m, j + m, re);
      e.set(i, j + m, -im);
      e.set(i + m, j, im);
    }
  }
  const rhs = new Matrix(2 * m, 1);
  for (let i = 0; i < m; i++) {
    rhs.set(i, 0, v[2 * i]);
    rhs.set(i + m, 0, v[2 * i + 1]);
  }
  const z = solve(e, rhs);
  let q = 0;
  for (let i = 0; i < m; i++) q += v[2 * i] * z.get(i, 0) + v[2 * i + 1] * z.get(i + m, 0);
  const w = new Float64Array(2 * m);
  for (let i = 0; i < m; i++) {
    w[2 * i] = z.get(i, 0) / q;
    w[2 * i + 1] = z.get(i + m, 0) / q;
  }
  return w;
}
function referenceWngDb(a: Float64Array, m: number, delta: number, v: Float64Array): number {
  return 10 * Math.log10(whiteNoiseGain(referenceMvdrWeights(a, m, delta, v), v, m));
}

/**
 * M = 10 half-wavelength line, look u = 0, a 40 dB interferer at u = 0.05 (inside the main beam,
 * first null at 2/M = 0.2), unit white noise, only K = 12 snapshots: unloaded WNG is low (≈ 0.3 dB).
 */
function closeInterfererScenario(): { r: Float64Array; look: Float64Array; m: number } {
  const m = 10;
  const rng = new TestRandom(11);
  const vI = ulaSteering(m, 0.05);
  const r = new Float64Array(2 * m * m);
  const x = new Float64Array(2 * m);
  const noise = new Float64Array(2 * m);
  const s = new Float64Array(2);
  const snapshots = 12;
  for (let k = 0; k < snapshots; k++) {
    rng.complexGaussian(noise, 1);
    rng.complexGaussian(s, 1e4);
    for (let i = 0; i < m; i++) {
      x[2 * i] = noise[2 * i] + s[0] * vI[2 * i] - s[1] * vI[2 * i + 1];
      x[2 * i + 1] = noise[2 * i + 1] + s[0] * vI[2 * i + 1] + s[1] * vI[2 * i];
    }
    addOuterProduct(r, x, m, 1 / snapshots);
  }
  return { r, look: ulaSteering(m, 0), m };
}

describe('validateLoading', () => {
  it('accepts each mode in range', () => {
    const good: LoadingSpec[] = [
      { mode: 'relative', ratio: 0 },
      { mode: 'relative', ratio: 1e6 },
      { mode: 'relative-db', db: -200 },
      { mode: 'relative-db', db: 60 },
      { mode: 'fixed', delta: 0 },
      { mode: 'wng', floorDb: 3 },
      { mode: 'wng', floorDb: -10, maxRatio: 10 },
    ];
    for (const spec of good) expect(() => validateLoading(spec)).not.toThrow();
  });

  it('names the field and the range', () => {
    expect(() => validateLoading({ mode: 'relative', ratio: -1 })).toThrow(/loading\.ratio must be in 0…1000000, got -1/);
    expect(() => validateLoading({ mode: 'relative', ratio: 2e6 })).toThrow(RangeError);
    expect(() => validateLoading({ mode: 'relative', ratio: Number.NaN })).toThrow(RangeError);
    expect(() => validateLoading({ mode: 'relative-db', db: -201 })).toThrow(/loading\.db must be in -200…60/);
    expect(() => validateLoading({ mode: 'relative-db', db: 61 })).toThrow(RangeError);
    expect(() => validateLoading({ mode: 'relative-db', db: '3' })).toThrow(/loading\.db must be a number, got string/);
    expect(() => validateLoading({ mode: 'fixed', delta: -1e-9 })).toThrow(/loading\.delta/);
    expect(() => validateLoading({ mode: 'fixed', delta: Infinity })).toThrow(RangeError);
    expect(() => validateLoading({ mode: 'wng' })).toThrow(/loading\.floorDb must be a number/);
    expect(() => validateLoading({ mode: 'wng', floorDb: 0, maxRatio: 0 })).toThrow(/loading\.maxRatio/);
    expect(() => validateLoading({ mode: 'tikhonov' })).toThrow(/loading\.mode must be one of/);
    expect(() => validateLoading(null)).toThrow(TypeError);
    // Bounded so R + δI and the spectra stay finite in float64 (δ = 1.7e308 overflowed every MVDR value).
    expect(() => validateLoading({ mode: 'fixed', delta: 1.7e308 })).toThrow(/^loading\.delta must be in 0…1000000000000, got 1\.7e\+308$/);
    expect(() => validateLoading({ mode: 'fixed', delta: 1e12 })).not.toThrow();
    expect(() => validateLoading({ mode: 'wng', floorDb: 1e300 })).toThrow(/^loading\.floorDb must be in -100…100/);
    // A closed schema per mode: nothing else is kept.
    expect(() => validateLoading({ mode: 'relative', ratio: 0.01, note: 'x' })).toThrow(/^loading\.note: unknown field for mode 'relative'; known: mode, ratio$/);
    expect(() => validateLoading([])).toThrow(TypeError);
  });
});

describe('LoadingSolver closed-form levels', () => {
  const m = 6;
  const r = sampleCovariance(new TestRandom(1), m, 20);
  const solver = new LoadingSolver(m);

  it('relative: δ = ratio·tr(R)/M; relative-db: δ = 10^(db/10)·tr(R)/M; fixed: δ = delta', () => {
    const mean = trace(r, m) / m;
    const result = createLoadingResult();
    expect(solver.level(r, 0, { mode: 'relative', ratio: 0.05 }, undefined, 0, result)).toBeCloseTo(0.05 * mean, 14);
    expect(result.delta).toBeCloseTo(0.05 * mean, 14);
    expect(result.factorizations).toBe(0);
    expect(solver.level(r, 0, { mode: 'relative-db', db: -20 })).toBeCloseTo(0.01 * mean, 14);
    expect(solver.level(r, 0, { mode: 'relative-db', db: 10 })).toBeCloseTo(10 * mean, 12);
    expect(solver.level(r, 0, { mode: 'fixed', delta: 0.25 })).toBe(0.25);
  });

  it('honours aOffset', () => {
    const padded = new Float64Array(5 + r.length);
    padded.set(r, 5);
    const spec: LoadingSpec = { mode: 'relative', ratio: 0.1 };
    expect(solver.level(padded, 5, spec)).toBe(solver.level(r, 0, spec));
  });
});

describe('white noise gain', () => {
  for (const m of [1, 4, 8, 10, 32]) {
    it(`delay-and-sum w = v/M has WNG = M = ${(10 * Math.log10(m)).toFixed(2)} dB (M = ${m})`, () => {
      // Van Trees 2002 ch. 2, from memory (CHECKS.md).
      for (const u of [0, 0.3, -0.77]) {
        const v = ulaSteering(m, u);
        const w = v.map((x) => x / m);
        expect(Math.abs(whiteNoiseGain(w, v, m) - m) / m).toBeLessThan(1e-12);
      }
    });
  }

  it('matches the CHECKS.md worked example: one interferer, N = 10, INR 20 dB → 9.784 dB', () => {
    // S = I + INR·v_I v_Iᴴ, look u₀ = 0, u_I = 0.3 (Van Trees 2002 ch. 6, from memory; recomputed
    // in CHECKS.md): v₀ᴴS⁻¹v₀ = 9.5153007 and WNG 9.784 dB.
    const m = 10;
    const s = new Float64Array(2 * m * m);
    for (let i = 0; i < m; i++) s[(i * m + i) * 2] = 1;
    addOuterProduct(s, ulaSteering(m, 0.3), m, 100);
    const v0 = ulaSteering(m, 0);
    const h = new HermitianSolver(m);
    h.factor(s);
    expect(h.invQuadForm(v0)).toBeCloseTo(9.5153007, 6);
    expect(new LoadingSolver(m).wngDb(s, 0, 0, v0)).toBeCloseTo(9.784, 3);
  });
});

describe('LoadingSolver WNG floor', () => {
  it('finds the smallest δ meeting the floor (checked with ml-matrix), and 0.9δ misses it', () => {
    const { r, look, m } = closeInterfererScenario();
    const floorDb = 6;
    expect(referenceWngDb(r, m, 0, look)).toBeLessThan(1); // low without loading
    const solver = new LoadingSolver(m);
    const result = createLoadingResult();
    const rCopy = r.slice();
    const delta = solver.level(r, 0, { mode: 'wng', floorDb }, look, 0, result);
    expect(r).toEqual(rCopy);
    expect(delta).toBeGreaterThan(0);
    expect(result.floorMet).toBe(true);
    expect(result.delta).toBe(delta);
    const achievedDb = referenceWngDb(r, m, delta, look);
    expect(achievedDb).toBeGreaterThanOrEqual(floorDb - 1e-9);
    expect(achievedDb - floorDb).toBeLessThan(0.01);
    expect(Math.abs(result.wngDb - achievedDb)).toBeLessThan(1e-9);
    expect(referenceWngDb(r, m, 0.9 * delta, look)).toBeLessThan(floorDb);
    expect(result.factorizations).toBeLessThan(40);
  });

  it('WNG is non-decreasing in δ on this scenario', () => {
    const { r, look, m } = closeInterfererScenario();
    const solver = new LoadingSolver(m);
    const mean = trace(r, m) / m;
    let previous = -Infinity;
    for (let e = -9; e <= 3; e += 0.25) {
      const db = solver.wngDb(r, 0, mean * Math.pow(10, e), look);
      expect(db).toBeGreaterThanOrEqual(previous - 1e-9);
      expect(db).toBeLessThanOrEqual(10 * Math.log10(m) + 1e-12);
      previous = db;
    }
  });

  it('returns 0 when R already meets the floor', () => {
    const m = 8;
    const r = sampleCovariance(new TestRandom(2), m, 200);
    const look = ulaSteering(m, 0.2);
    const result = createLoadingResult();
    expect(new LoadingSolver(m).level(r, 0, { mode: 'wng', floorDb: 0 }, look, 0, result)).toBe(0);
    expect(result.floorMet).toBe(true);
    expect(result.wngDb).toBeCloseTo(referenceWngDb(r, m, 0, look), 9);
  });

  it('reports a floor above 10·log10(M), or beyond maxRatio, as unreachable and clamps δ', () => {
    const { r, look, m } = closeInterfererScenario();
    const solver = new LoadingSolver(m);
    const mean = trace(r, m) / m;
    const result = createLoadingResult();
    const above = solver.level(r, 0, { mode: 'wng', floorDb: 10 * Math.log10(m) + 0.5 }, look, 0, result);
    expect(result.floorMet).toBe(false);
    expect(above).toBeCloseTo(1e3 * mean, 8);
    expect(result.wngDb).toBeLessThan(10 * Math.log10(m));
    expect(result.wngDb).toBeCloseTo(referenceWngDb(r, m, above, look), 9);

    const clamped = solver.level(r, 0, { mode: 'wng', floorDb: 6, maxRatio: 1e-3 }, look, 0, result);
    expect(result.floorMet).toBe(false);
    expect(clamped).toBeCloseTo(1e-3 * mean, 14);
    expect(result.wngDb).toBeLessThan(6);
  });

  it('still works when R alone is singular (rank-1, δ = 0 does not factor)', () => {
    const m = 6;
    const r = sampleCovariance(new TestRandom(3), m, 1);
    const look = ulaSteering(m, 0);
    const solver = new LoadingSolver(m);
    const result = createLoadingResult();
    // As δ → 0⁺ the weights null the one source exactly, which costs little WNG here (≈ 7.25 dB of
    // at most 7.78): a floor of 7.5 dB needs real loading, and bisection must find its minimum.
    const delta = solver.level(r, 0, { mode: 'wng', floorDb: 7.5 }, look, 0, result);
    expect(result.floorMet).toBe(true);
    expect(referenceWngDb(r, m, delta, look)).toBeGreaterThanOrEqual(7.5 - 1e-9);
    expect(referenceWngDb(r, m, delta, look) - 7.5).toBeLessThan(0.01);
    expect(referenceWngDb(r, m, 0.9 * delta, look)).toBeLessThan(7.5);
    // A floor met already in the limit δ → 0⁺ gives the smallest level searched, 1e-9·tr(R)/M.
    const tiny = solver.level(r, 0, { mode: 'wng', floorDb: 5 }, look, 0, result);
    expect(result.floorMet).toBe(true);
    expect(Math.abs(tiny / ((1e-9 * trace(r, m)) / m) - 1)).toBeLessThan(1e-12);
  });

  it('needs a look vector and a positive trace', () => {
    const m = 3;
    const solver = new LoadingSolver(m);
    const r = sampleCovariance(new TestRandom(4), m, 9);
    expect(() => solver.level(r, 0, { mode: 'wng', floorDb: 0 })).toThrow(/needs a look/);
    expect(() => solver.level(r, 0, { mode: 'wng', floorDb: 0 }, new Float64Array(5))).toThrow(/look needs 6/);
    expect(() => solver.level(new Float64Array(18), 0, { mode: 'wng', floorDb: 0 }, ulaSteering(m, 0))).toThrow(
      /tr\(R\)\/M > 0/,
    );
  });
});
