import { describe, expect, it } from 'vitest';
import { Matrix, determinant, inverse, solve } from 'ml-matrix';
import {
  HermitianSolver,
  NotPositiveDefiniteError,
  hermitianTrace,
  matVec,
  quadForm,
} from '../../server/dsp/hermitian.ts';
import { TestRandom, addOuterProduct, sampleCovariance } from '../helpers/random.ts';

// Independent reference: ml-matrix on the real embedding. A Hermitian A = X + jY acts on
// x = xr + j·xi as the real symmetric [[X, −Y], [Y, X]] acting on [xr; xi] (CHECKS.md).
function embed(a: Float64Array, m: number, loading = 0): Matrix {
  const e = new Matrix(2 * m, 2 * m);
  for (let i = 0; i < m; i++) {
    for (let j = 0; j < m; j++) {
      const re = a[(i * m + j) * 2] + (i === j ? loading : 0);
      const im = a[(i * m + j) * 2 + 1];
      e.set(i, j, re);
      e.set(i + m, j + m, re);
      e.set(i, j + m, -im);
      e.set(i + m, j, im);
    }
  }
  return e;
}
function embedVector(v: Float64Array, m: number): Matrix {
  const e = new Matrix(2 * m, 1);
  for (let i = 0; i < m; i++) {
    e.set(i, 0, v[2 * i]);
    e.set(i + m, 0, v[2 * i + 1]);
  }
  return e;
}
function unembedVector(e: Matrix, m: number): Float64Array {
  const v = new Float64Array(2 * m);
  for (let i = 0; i < m; i++) {
    v[2 * i] = e.get(i, 0);
    v[2 * i + 1] = e.get(i + m, 0);
  }
  return v;
}
function relativeError(x: ArrayLike<number>, ref: ArrayLike<number>): number {
  let num = 0;
  let den = 0;
  for (let i = 0; i < ref.length; i++) {
    num += (x[i] - ref[i]) ** 2;
    den += ref[i] ** 2;
  }
  return Math.sqrt(num / den);
}
/** Naive vᴴAv over the full matrix: Σ_ij conj(v_i) A_ij v_j, real part. */
function naiveQuadForm(a: Float64Array, v: Float64Array, m: number): number {
  let s = 0;
  for (let i = 0; i < m; i++) {
    for (let j = 0; j < m; j++) {
      const ar = a[(i * m + j) * 2];
      const ai = a[(i * m + j) * 2 + 1];
      const tr = ar * v[2 * j] - ai * v[2 * j + 1];
      const ti = ar * v[2 * j + 1] + ai * v[2 * j];
      s += v[2 * i] * tr + v[2 * i + 1] * ti;
    }
  }
  return s;
}
function identity(m: number, scale = 1): Float64Array {
  const a = new Float64Array(2 * m * m);
  for (let i = 0; i < m; i++) a[(i * m + i) * 2] = scale;
  return a;
}

const SIZES = [1, 2, 3, 8, 17, 32, 64];

interface Case {
  name: string;
  a: Float64Array;
  loading: number;
}
function cases(m: number, rng: TestRandom): Case[] {
  const rankOne = new Float64Array(2 * m * m);
  const u = rng.complexGaussian(new Float64Array(2 * m));
  addOuterProduct(rankOne, u, m, 5);
  let uu = 0;
  for (let i = 0; i < 2 * m; i++) uu += u[i] * u[i];
  const sample = sampleCovariance(rng, m, 2 * m + 3);
  return [
    { name: 'sample covariance, K = 2M + 3', a: sample, loading: 0 },
    { name: 'sample covariance, loaded 0.1·tr/M', a: sample, loading: 0.1 * (hermitianTrace(sample, 0, m) / m) },
    { name: 'identity', a: identity(m), loading: 0 },
    // Condition number ≈ 1 + 5‖u‖²/δ = 1001.
    { name: 'rank-1 plus loading', a: rankOne, loading: (5 * uu) / 1000 },
  ];
}

describe('HermitianSolver against ml-matrix on the real embedding', () => {
  for (const m of SIZES) {
    it(`M = ${m}: solve, inverse, invQuadForm, logDet`, () => {
      const rng = new TestRandom(1000 + m);
      for (const c of cases(m, rng)) {
        const solver = new HermitianSolver(m);
        const aCopy = c.a.slice();
        solver.factor(c.a, 0, c.loading);
        expect(c.a, c.name).toEqual(aCopy);

        const ref = embed(c.a, m, c.loading);
        const b = rng.complexGaussian(new Float64Array(2 * m));
        const bCopy = b.slice();
        const x = new Float64Array(2 * m);
        solver.solve(x, b);
        expect(b).toEqual(bCopy);
        const xRef = unembedVector(solve(ref, embedVector(b, m)), m);
        expect(relativeError(x, xRef), c.name).toBeLessThan(1e-10);

        // In place (exact alias) gives the same answer.
        const inPlace = b.slice();
        solver.solve(inPlace, inPlace);
        expect(relativeError(inPlace, xRef), c.name).toBeLessThan(1e-10);

        // bᴴ(A + δI)⁻¹b from the reference solution.
        let qRef = 0;
        for (let i = 0; i < m; i++) qRef += b[2 * i] * xRef[2 * i] + b[2 * i + 1] * xRef[2 * i + 1];
        const q = solver.invQuadForm(b);
        expect(Math.abs(q - qRef) / qRef, c.name).toBeLessThan(1e-10);
        expect(q).toBeGreaterThan(0);

        const inv = new Float64Array(2 * m * m);
        solver.inverse(inv);
        const invRef = inverse(ref);
        const invRefComplex = new Float64Array(2 * m * m);
        for (let i = 0; i < m; i++) {
          for (let j = 0; j < m; j++) {
            invRefComplex[(i * m + j) * 2] = invRef.get(i, j);
            invRefComplex[(i * m + j) * 2 + 1] = invRef.get(i + m, j);
          }
        }
        expect(relativeError(inv, invRefComplex), c.name).toBeLessThan(1e-10);

        // det of the embedding = det(A)² for Hermitian A; ml-matrix's LU determinant stays in
        // range for these orders.
        if (m <= 17) {
          const logDetRef = 0.5 * Math.log(determinant(ref));
          expect(solver.logDet()).toBeCloseTo(logDetRef, 9);
        }
      }
    });
  }

  it('reads only the lower triangle and the real diagonal', () => {
    const m = 8;
    const a = sampleCovariance(new TestRandom(5), m, 20);
    const scrambled = a.slice();
    for (let i = 0; i < m; i++) {
      scrambled[(i * m + i) * 2 + 1] = 123;
      for (let j = i + 1; j < m; j++) scrambled[(i * m + j) * 2] = Number.NaN;
    }
    const s1 = new HermitianSolver(m);
    const s2 = new HermitianSolver(m);
    s1.factor(a);
    s2.factor(scrambled);
    const v = new TestRandom(6).complexGaussian(new Float64Array(2 * m));
    expect(s2.invQuadForm(v)).toBe(s1.invQuadForm(v));
  });

  it('honours aOffset and bOffset, and logDet of c·I is M·ln c', () => {
    const m = 5;
    const a = sampleCovariance(new TestRandom(9), m, 15);
    const padded = new Float64Array(7 + a.length);
    padded.set(a, 7);
    const b = new TestRandom(10).complexGaussian(new Float64Array(3 + 2 * m));
    const s1 = new HermitianSolver(m);
    const s2 = new HermitianSolver(m);
    s1.factor(a);
    s2.factor(padded, 7);
    const x1 = new Float64Array(2 * m);
    const x2 = new Float64Array(2 * m);
    s1.solve(x1, b.slice(3));
    s2.solve(x2, b, 3);
    expect(x2).toEqual(x1);
    s1.factor(identity(m, 3));
    expect(s1.logDet()).toBeCloseTo(m * Math.log(3), 12);
  });
});

describe('invQuadForms', () => {
  for (const m of [1, 2, 8, 32]) {
    it(`M = ${m}: equals invQuadForm per vector (odd count, non-zero offset)`, () => {
      const rng = new TestRandom(77 + m);
      const a = sampleCovariance(rng, m, 3 * m);
      const solver = new HermitianSolver(m);
      solver.factor(a, 0, 0.01);
      const count = 7;
      const offset = 4;
      const table = rng.complexGaussian(new Float64Array(offset + count * 2 * m));
      const tableCopy = table.slice();
      const out = new Float64Array(count);
      solver.invQuadForms(out, table, offset, count);
      expect(table).toEqual(tableCopy);
      for (let k = 0; k < count; k++) {
        const single = solver.invQuadForm(table, offset + k * 2 * m);
        expect(Math.abs(out[k] - single) / single).toBeLessThan(1e-14);
      }
    });
  }

  it('rejects a short table or output', () => {
    const solver = new HermitianSolver(4);
    solver.factor(identity(4));
    expect(() => solver.invQuadForms(new Float64Array(3), new Float64Array(23), 0, 3)).toThrow(/table needs 24/);
    expect(() => solver.invQuadForms(new Float64Array(2), new Float64Array(24), 0, 3)).toThrow(/out needs 3/);
  });
});

describe('free functions', () => {
  for (const m of [1, 3, 17]) {
    it(`M = ${m}: quadForm equals naive vᴴAv, matVec equals ml-matrix, trace`, () => {
      const rng = new TestRandom(300 + m);
      const a = sampleCovariance(rng, m, 2 * m);
      const v = rng.complexGaussian(new Float64Array(2 * m));
      const ref = naiveQuadForm(a, v, m);
      expect(Math.abs(quadForm(a, 0, v, 0, m) - ref) / ref).toBeLessThan(1e-12);

      const out = new Float64Array(2 * m);
      matVec(out, a, 0, v, 0, m);
      const outRef = unembedVector(embed(a, m).mmul(embedVector(v, m)), m);
      expect(relativeError(out, outRef)).toBeLessThan(1e-13);

      let tr = 0;
      for (let i = 0; i < m; i++) tr += a[(i * m + i) * 2];
      expect(hermitianTrace(a, 0, m)).toBe(tr);
    });
  }
});

describe('not positive definite', () => {
  function expectNotPd(a: Float64Array, m: number, pivotIndex?: number): void {
    const solver = new HermitianSolver(m);
    let caught: unknown;
    try {
      solver.factor(a);
    } catch (error) {
      caught = error;
    }
    expect(caught).toBeInstanceOf(NotPositiveDefiniteError);
    const e = caught as NotPositiveDefiniteError;
    expect(e.code).toBe('ERR_DSP_NOT_POSITIVE_DEFINITE');
    expect(e.message).toMatch(/not positive definite: pivot \d+ = /);
    expect(e.message).toMatch(/diagonal loading/);
    expect(e.message).toMatch(/dead\/duplicate channels/);
    if (pivotIndex !== undefined) expect(e.pivotIndex).toBe(pivotIndex);
    // A failed factor leaves no factor behind.
    expect(() => solver.solve(new Float64Array(2 * m), new Float64Array(2 * m))).toThrow(/factor/);
  }

  /** Checks that loading makes the same matrix solvable and that the answer matches ml-matrix. */
  function expectLoadedMatches(a: Float64Array, m: number, rng: TestRandom): void {
    const loading = 0.01 * (hermitianTrace(a, 0, m) / m);
    const solver = new HermitianSolver(m);
    solver.factor(a, 0, loading);
    const b = rng.complexGaussian(new Float64Array(2 * m));
    const x = new Float64Array(2 * m);
    solver.solve(x, b);
    for (const value of x) expect(Number.isFinite(value)).toBe(true);
    const xRef = unembedVector(solve(embed(a, m, loading), embedVector(b, m)), m);
    expect(relativeError(x, xRef)).toBeLessThan(1e-10);
  }

  for (const m of [2, 3, 8, 17, 32, 64]) {
    it(`M = ${m}: duplicated channel, rank-1 and K = ⌈M/2⌉ snapshots throw; loading fixes them`, () => {
      const rng = new TestRandom(500 + m);
      const x = new Float64Array(2 * m);

      // Channel M−1 is an exact copy of channel 0 (K = 3M snapshots otherwise).
      const dup = new Float64Array(2 * m * m);
      for (let k = 0; k < 3 * m; k++) {
        rng.complexGaussian(x);
        x[2 * (m - 1)] = x[0];
        x[2 * (m - 1) + 1] = x[1];
        addOuterProduct(dup, x, m, 1 / (3 * m));
      }
      expectNotPd(dup, m, m - 1);
      expectLoadedMatches(dup, m, rng);

      const rankOne = new Float64Array(2 * m * m);
      addOuterProduct(rankOne, rng.complexGaussian(x), m, 1);
      expectNotPd(rankOne, m, 1);
      expectLoadedMatches(rankOne, m, rng);

      // K < M snapshots whose first K channels are orthogonal, so that the leading K×K block is
      // well conditioned and the deficiency shows at pivot K (random K×K blocks can be arbitrarily
      // ill-conditioned, which hides the deficiency in rounding; see PIVOT_TOLERANCE).
      const snapshots = Math.ceil(m / 2);
      const few = new Float64Array(2 * m * m);
      for (let k = 0; k < snapshots; k++) {
        rng.complexGaussian(x);
        for (let c = 0; c < snapshots; c++) {
          x[2 * c] = c === k ? 1 : 0;
          x[2 * c + 1] = 0;
        }
        addOuterProduct(few, x, m, 1 / snapshots);
      }
      expectNotPd(few, m, snapshots);
      expectLoadedMatches(few, m, rng);
    });
  }

  it('a dead (all-zero) channel, a NaN, and a negative diagonal throw', () => {
    const m = 4;
    const dead = sampleCovariance(new TestRandom(8), m, 12);
    for (let j = 0; j < m; j++) {
      dead[(2 * m + j) * 2] = dead[(2 * m + j) * 2 + 1] = 0;
      dead[(j * m + 2) * 2] = dead[(j * m + 2) * 2 + 1] = 0;
    }
    expectNotPd(dead, m, 2);
    const nan = sampleCovariance(new TestRandom(8), m, 12);
    nan[(3 * m + 1) * 2] = Number.NaN;
    expectNotPd(nan, m, 3);
    expectNotPd(identity(m, -1), m, 0);
    expectNotPd(new Float64Array(2 * m * m), m, 0);
  });
});

describe('validation', () => {
  it('rejects bad orders, spans and loading', () => {
    for (const m of [0, 1025, 1.5, Number.NaN]) expect(() => new HermitianSolver(m)).toThrow(RangeError);
    const solver = new HermitianSolver(3);
    expect(() => solver.factor(new Float64Array(17))).toThrow(/a needs 18 entries/);
    expect(() => solver.factor(identity(3), 0, -1)).toThrow(RangeError);
    expect(() => solver.factor(identity(3), 0, Number.NaN)).toThrow(RangeError);
    expect(() => new HermitianSolver(2).invQuadForm(new Float64Array(4))).toThrow(/factor\(\)/);
    solver.factor(identity(3));
    expect(() => solver.solve(new Float64Array(6), new Float64Array(6), 1)).toThrow(RangeError);
  });
});
