import { describe, expect, it } from 'vitest';
import { EigenvalueDecomposition, Matrix } from 'ml-matrix';
import { CovarianceBank } from '../../server/dsp/covariance.ts';
import { TestRandom, addOuterProduct } from '../helpers/random.ts';

/** Bin b's snapshot x_b out of the bank's layout snapshot[(b·M + m)·2 + {0, 1}]. */
function binVector(snapshot: Float64Array, b: number, m: number): Float64Array {
  return snapshot.slice(2 * b * m, 2 * (b + 1) * m);
}
function maxAbsDiff(x: ArrayLike<number>, y: ArrayLike<number>): number {
  let d = 0;
  for (let i = 0; i < y.length; i++) d = Math.max(d, Math.abs(x[i] - y[i]));
  return d;
}
function maxAbs(x: ArrayLike<number>): number {
  let d = 0;
  for (let i = 0; i < x.length; i++) d = Math.max(d, Math.abs(x[i]));
  return d;
}
/** Eigenvalues of a Hermitian M×M through its real symmetric embedding [[X, −Y], [Y, X]] (CHECKS.md). */
function eigenvalues(a: Float64Array, offset: number, m: number): number[] {
  const e = new Matrix(2 * m, 2 * m);
  for (let i = 0; i < m; i++) {
    for (let j = 0; j < m; j++) {
      const re = a[offset + (i * m + j) * 2];
      const im = a[offset + (i * m + j) * 2 + 1];
      e.set(i, j, re);
      e.set(i + m, j + m, re);
      e.set(i, j + m, -im);
      e.set(i + m, j, im);
    }
  }
  return new EigenvalueDecomposition(e, { assumeSymmetric: true }).realEigenvalues;
}

describe('CovarianceBank recursion against a naive weighted sum', () => {
  for (const m of [1, 3, 8]) {
    it(`M = ${m}: R_k = Σ λ^(k−i)(1−λ) x_i x_iᴴ / (1 − λᵏ) at every k, to 1e-12`, () => {
      const bins = 3;
      const lambda = 0.9;
      const rng = new TestRandom(20 + m);
      const bank = new CovarianceBank(m, bins);
      const history: Float64Array[] = [];
      for (let k = 1; k <= 60; k++) {
        const snapshot = rng.complexGaussian(new Float64Array(2 * bins * m));
        history.push(snapshot);
        bank.update(snapshot, lambda);
        expect(bank.updates).toBe(k);
        for (let b = 0; b < bins; b++) {
          // Naive O(k·M²) reference, written independently of the recursion.
          const ref = new Float64Array(2 * m * m);
          for (let i = 1; i <= k; i++) {
            const weight = (Math.pow(lambda, k - i) * (1 - lambda)) / (1 - Math.pow(lambda, k));
            addOuterProduct(ref, binVector(history[i - 1], b, m), m, weight);
          }
          const got = bank.data.subarray(bank.matrixOffset(b), bank.matrixOffset(b) + 2 * m * m);
          expect(maxAbsDiff(got, ref) / maxAbs(ref)).toBeLessThan(1e-12);
        }
      }
    });
  }

  it('the first update after reset is x xᴴ exactly (no bias toward zero)', () => {
    const m = 4;
    const bank = new CovarianceBank(m, 2);
    const rng = new TestRandom(3);
    bank.update(rng.complexGaussian(new Float64Array(16)), 0.5);
    bank.reset();
    expect(bank.updates).toBe(0);
    expect(maxAbs(bank.data)).toBe(0);
    const snapshot = rng.complexGaussian(new Float64Array(16));
    bank.update(snapshot, 0.999);
    const ref = new Float64Array(2 * m * m);
    addOuterProduct(ref, binVector(snapshot, 1, m), m, 1);
    expect(maxAbsDiff(bank.data.subarray(bank.matrixOffset(1)), ref)).toBeLessThan(1e-15);
  });

  it('λ may change between hops: R_k = S_k / c_k with S, c following each hop’s λ', () => {
    const m = 3;
    const rng = new TestRandom(4);
    const bank = new CovarianceBank(m, 1);
    const s = new Float64Array(2 * m * m);
    let c = 0;
    for (let k = 0; k < 40; k++) {
      const lambda = k < 20 ? 0.8 : 0.95;
      const x = rng.complexGaussian(new Float64Array(2 * m));
      bank.update(x, lambda);
      for (let i = 0; i < s.length; i++) s[i] *= lambda;
      addOuterProduct(s, x, m, 1 - lambda);
      c = lambda * c + (1 - lambda);
    }
    const ref = s.map((v) => v / c);
    expect(maxAbsDiff(bank.data, ref) / maxAbs(ref)).toBeLessThan(1e-12);
  });

  it('a Float32Array snapshot gives the same result as its float64 copy', () => {
    const m = 5;
    const rng = new TestRandom(5);
    const a = new CovarianceBank(m, 2);
    const b = new CovarianceBank(m, 2);
    for (let k = 0; k < 10; k++) {
      const x32 = Float32Array.from(rng.complexGaussian(new Float64Array(4 * m)));
      a.update(x32, 0.9);
      b.update(Float64Array.from(x32), 0.9);
    }
    expect(a.data).toEqual(b.data);
  });
});

describe('CovarianceBank properties', () => {
  it('every stored matrix is exactly Hermitian and positive semi-definite (also rank-deficient)', () => {
    const m = 8;
    const bins = 4;
    const rng = new TestRandom(6);
    const bank = new CovarianceBank(m, bins);
    // 3 < M snapshots: rank 3, so five eigenvalues are ~0 and rounding could push them negative.
    for (let k = 0; k < 3; k++) bank.update(rng.complexGaussian(new Float64Array(2 * bins * m)), 0.7);
    for (let b = 0; b < bins; b++) {
      const o = bank.matrixOffset(b);
      for (let i = 0; i < m; i++) {
        expect(bank.data[o + (i * m + i) * 2 + 1]).toBe(0);
        for (let j = 0; j < m; j++) {
          expect(bank.data[o + (i * m + j) * 2]).toBe(bank.data[o + (j * m + i) * 2]);
          if (j !== i) expect(bank.data[o + (i * m + j) * 2 + 1]).toBe(-bank.data[o + (j * m + i) * 2 + 1]);
        }
      }
      const lambdas = eigenvalues(bank.data, o, m);
      const scale = Math.max(...lambdas);
      for (const l of lambdas) expect(l / scale).toBeGreaterThanOrEqual(-1e-12);
      // Rank 3: each complex eigenvalue appears twice in the embedding, so 6 are clearly > 0.
      expect(lambdas.filter((l) => l > 1e-9 * scale).length).toBe(6);
    }
  });

  it('stationary white input: E[R] → σ²I (Monte Carlo, within 3 %)', () => {
    const m = 4;
    const bins = 32;
    const power = 2;
    const rng = new TestRandom(7);
    const bank = new CovarianceBank(m, bins);
    const mean = new Float64Array(2 * m * m);
    const snapshot = new Float64Array(2 * bins * m);
    let terms = 0;
    for (let k = 0; k < 3000; k++) {
      bank.update(rng.complexGaussian(snapshot, power), 0.99);
      if (k < 500) continue; // past the start-up, averaged over the rest and over bins
      for (let b = 0; b < bins; b++) {
        const o = bank.matrixOffset(b);
        for (let i = 0; i < mean.length; i++) mean[i] += bank.data[o + i];
      }
      terms += bins;
    }
    for (let i = 0; i < m; i++) {
      for (let j = 0; j < m; j++) {
        const re = mean[(i * m + j) * 2] / terms;
        const im = mean[(i * m + j) * 2 + 1] / terms;
        if (i === j) expect(Math.abs(re - power) / power).toBeLessThan(0.03);
        else expect(Math.hypot(re, im) / power).toBeLessThan(0.03);
      }
    }
  });

  it('accumulate + finishAverage equals the sample mean (1/K) Σ x xᴴ', () => {
    const m = 6;
    const bins = 3;
    const rng = new TestRandom(8);
    const bank = new CovarianceBank(m, bins);
    const refs = Array.from({ length: bins }, () => new Float64Array(2 * m * m));
    const count = 25;
    for (let k = 0; k < count; k++) {
      const x = rng.complexGaussian(new Float64Array(2 * bins * m));
      bank.accumulate(x);
      for (let b = 0; b < bins; b++) addOuterProduct(refs[b], binVector(x, b, m), m, 1 / count);
    }
    expect(bank.updates).toBe(count);
    bank.finishAverage();
    for (let b = 0; b < bins; b++) {
      const got = bank.data.subarray(bank.matrixOffset(b), bank.matrixOffset(b) + 2 * m * m);
      expect(maxAbsDiff(got, refs[b]) / maxAbs(refs[b])).toBeLessThan(1e-12);
    }
  });

  it('mixing modes needs a reset; λ outside (0, 1) is refused', () => {
    const bank = new CovarianceBank(2, 1);
    const x = new Float64Array(4).fill(1);
    expect(() => bank.update(x, 1)).toThrow(/lambda must be in \(0, 1\).*accumulate\(\)/);
    expect(() => bank.update(x, 0)).toThrow(RangeError);
    expect(() => bank.update(x, Number.NaN)).toThrow(RangeError);
    expect(() => bank.finishAverage()).toThrow(/at least one accumulate/);
    bank.update(x, 0.5);
    expect(() => bank.accumulate(x)).toThrow(/reset/);
    bank.reset();
    bank.accumulate(x);
    expect(() => bank.update(x, 0.5)).toThrow(/reset/);
    bank.finishAverage();
    expect(() => bank.accumulate(x)).toThrow(/reset/);
  });

  it('a short or non-finite snapshot is refused before anything changes', () => {
    const bank = new CovarianceBank(3, 2);
    const x = new TestRandom(9).complexGaussian(new Float64Array(12));
    bank.update(x, 0.9);
    const before = bank.data.slice();
    expect(() => bank.update(new Float64Array(11), 0.9)).toThrow(/needs 2·bins·channels = 12/);
    const bad = x.slice();
    bad[2 * (1 * 3 + 2) + 1] = Number.POSITIVE_INFINITY;
    expect(() => bank.update(bad, 0.9)).toThrow(/bin 1, channel 2 is not finite/);
    expect(bank.data).toEqual(before);
    expect(bank.updates).toBe(1);
  });

  it('validates sizes', () => {
    expect(() => new CovarianceBank(0, 1)).toThrow(RangeError);
    expect(() => new CovarianceBank(1025, 1)).toThrow(RangeError);
    expect(() => new CovarianceBank(4, 0)).toThrow(RangeError);
    expect(() => new CovarianceBank(1024, 100)).toThrow(/exceeds the limit/);
    expect(() => new CovarianceBank(2, 2).matrixOffset(2)).toThrow(RangeError);
  });
});

describe('CovarianceBank channel mask', () => {
  it('gather returns the active sub-matrix; masked channels keep updating; unmasking needs no reset', () => {
    const m = 5;
    const bins = 2;
    const rng = new TestRandom(10);
    const masked = new CovarianceBank(m, bins);
    const plain = new CovarianceBank(m, bins);
    masked.setMask([true, false, true, true, false]);
    expect(Array.from(masked.activeChannels)).toEqual([0, 2, 3]);
    for (let k = 0; k < 12; k++) {
      const x = rng.complexGaussian(new Float64Array(2 * bins * m));
      masked.update(x, 0.8);
      plain.update(x, 0.8);
    }
    expect(masked.data).toEqual(plain.data);

    const sub = new Float64Array(2 * 9);
    masked.gather(1, sub);
    const chosen = [0, 2, 3];
    const o = plain.matrixOffset(1);
    for (let r = 0; r < 3; r++) {
      for (let c = 0; c < 3; c++) {
        expect(sub[(r * 3 + c) * 2]).toBe(plain.data[o + (chosen[r] * m + chosen[c]) * 2]);
        expect(sub[(r * 3 + c) * 2 + 1]).toBe(plain.data[o + (chosen[r] * m + chosen[c]) * 2 + 1]);
      }
    }
    const v = Float64Array.from({ length: 2 * m + 1 }, (_, i) => i);
    const picked = new Float64Array(6);
    masked.gatherVector(picked, v, 1);
    expect(Array.from(picked)).toEqual([1, 2, 5, 6, 7, 8]);

    masked.setMask([true, true, true, true, true]);
    expect(Array.from(masked.activeChannels)).toEqual([0, 1, 2, 3, 4]);
    const full = new Float64Array(2 * m * m);
    masked.gather(1, full);
    expect(full).toEqual(plain.data.subarray(o, o + 2 * m * m));
  });

  it('refuses a mask with no active channel or the wrong length, and short outputs', () => {
    const bank = new CovarianceBank(3, 1);
    expect(() => bank.setMask([false, false, false])).toThrow(/at least one channel active/);
    expect(() => bank.setMask([true, true])).toThrow(/mask length must equal channels \(3\)/);
    expect(Array.from(bank.activeChannels)).toEqual([0, 1, 2]);
    expect(() => bank.gather(0, new Float64Array(17))).toThrow(RangeError);
    expect(() => bank.gatherVector(new Float64Array(6), new Float64Array(5))).toThrow(RangeError);
  });
});
