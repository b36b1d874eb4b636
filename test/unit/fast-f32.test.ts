/**
 * The single-precision fast paths against the plain float64 kernels:
 *  - FastMvdrScanner with precision 'f32' (f32x4 WebAssembly forward substitution, mvdr-scan.ts)
 *    against SpectrumScanner's MVDR output (HermitianSolver, float64): every bin within its own
 *    derived bound float32RelativeBound(m, tr R, δ) (Higham, Accuracy and Stability of Numerical
 *    Algorithms, 2nd ed., Thm 8.5 and §3.6; derivation in mvdr-scan.ts), and bins whose bound exceeds
 *    FLOAT32_RELATIVE_LIMIT scanned in float64 (1e-9 relative, as test/unit/fast-mvdr.test.ts);
 *  - ConventionalTracker with precision 'f32' against the plain vᴴRv/M'² of a bank fed the same
 *    snapshots: absolute error ≤ trackerF32Bound(M')·tr(R)/M' per bin (derivation in
 *    conventional-tracker.ts);
 *  - BinProcessor's fast path (single precision by default) against its plain path, with a mask;
 *  - the conventional spectrum per row from the covariance (FastMvdrScanner.conventional, f32x4)
 *    against the plain vᴴRv/M'²: |error| ≤ conventionalRowBound(M')·tr(R)/M' per bin; BinProcessor
 *    switching between per-row and tracked conventional spectra with the hops between rows;
 *  - PairedCholesky (wasm-cholesky.ts, two bins per f64x2 lane pair) bit for bit against
 *    InverseCholesky (the same float64 operations in the same order), its pivot failures, and the
 *    scanner's paired and per-bin factor giving identical spectra.
 * The measured worst errors are printed (console.info) beside the bounds: they are far below them
 * (rounding errors add up like a random walk; the bounds are worst cases).
 */
import { describe, expect, it } from 'vitest';
import { CovarianceBank } from '../../server/dsp/covariance.ts';
import { ConventionalTracker, trackerF32Bound } from '../../server/dsp/fast/conventional-tracker.ts';
import { InverseCholesky } from '../../server/dsp/fast/inverse-factor.ts';
import { conventionalRowBound, FastMvdrScanner, FLOAT32_RELATIVE_LIMIT, float32RelativeBound } from '../../server/dsp/fast/mvdr-scan.ts';
import { PairedCholesky } from '../../server/dsp/fast/wasm-cholesky.ts';
import { hermitianTrace, NotPositiveDefiniteError } from '../../server/dsp/hermitian.ts';
import { LoadingSolver, type LoadingSpec } from '../../server/dsp/loading.ts';
import { SpectrumScanner } from '../../server/dsp/spectrum.ts';
import { directionGrid, SteeringTable } from '../../server/dsp/steering.ts';
import { BinProcessor, SCAN_CONVENTIONAL, SCAN_MVDR } from '../../server/engine/bin-processor.ts';
import { sampleCovariance, TestRandom } from '../helpers/random.ts';

const C = 343.2;

function positionsOf(rng: TestRandom, m: number): [number, number, number][] {
  return Array.from({ length: m }, () => [0.3 * rng.uniform(), 0.3 * rng.uniform(), 0.05 * rng.uniform()] as [number, number, number]);
}

function tableOf(positions: [number, number, number][], freqs: number[], directions: number): SteeringTable {
  const grid = directionGrid({ azimuthDeg: { startDeg: 0, stopDeg: 360 - 360 / directions, stepDeg: 360 / directions } });
  return new SteeringTable({ positions, grid, freqsHz: freqs, speedOfSoundMps: C });
}

/**
 * A bank of `bins` bins: noise of power 1 in every channel plus, when `sourcePower` > 0, one plane
 * wave of that power from a direction of the table (bin b from direction 7b) — a strong source
 * makes R nearly rank one (λ_min(R + δI) near δ, the case the bound assumes).
 */
function bankOf(rng: TestRandom, table: SteeringTable, bins: number, sourcePower: number, snapshots: number): CovarianceBank {
  const m = table.channels;
  const bank = new CovarianceBank(m, bins);
  const snap = new Float64Array(2 * m * bins);
  const t = table.data;
  for (let k = 0; k < snapshots; k++) {
    rng.complexGaussian(snap, 1);
    for (let b = 0; b < bins; b++) {
      const sr = Math.sqrt(sourcePower / 2) * rng.gaussian();
      const si = Math.sqrt(sourcePower / 2) * rng.gaussian();
      const o = table.offset(b, (7 * b) % table.directions);
      for (let c = 0; c < m; c++) {
        const vr = t[o + 2 * c];
        const vi = t[o + 2 * c + 1];
        snap[2 * (b * m + c)] += sr * vr - si * vi;
        snap[2 * (b * m + c) + 1] += sr * vi + si * vr;
      }
    }
    bank.update(snap, 0.98);
  }
  return bank;
}

/** Per bin, the bound of mvdr-scan.ts for this bank and loading. */
function boundsOf(bank: CovarianceBank, loading: LoadingSpec): Float64Array {
  const m = bank.activeChannels.length;
  const sub = new Float64Array(2 * m * m);
  const solver = new LoadingSolver(m);
  const out = new Float64Array(bank.bins);
  for (let b = 0; b < bank.bins; b++) {
    bank.gather(b, sub);
    const delta = solver.level(sub, 0, loading);
    out[b] = float32RelativeBound(m, hermitianTrace(sub, 0, m), delta);
  }
  return out;
}

describe('float32RelativeBound', () => {
  it('is (1 + θ)²(1 + γ₂) − 1, θ = ερ/(1 − ερ), ε = √2·γ_{m+4}, ρ = √(tr(R + δI)/δ) (values worked by hand)', () => {
    const u = 2 ** -24;
    const g = (n: number) => (n * u) / (1 - n * u);
    // m = 64, relative loading 0.01 of tr R = 64: δ = 0.01, tr(R + δI) = 64.64, ρ = √6464 = 80.4.
    const eps = Math.SQRT2 * g(68);
    const rho = Math.sqrt(6464);
    const theta = (eps * rho) / (1 - eps * rho);
    expect(float32RelativeBound(64, 64, 0.01)).toBeCloseTo((1 + theta) ** 2 * (1 + g(2)) - 1, 15);
    // ≈ 2ερ = 9.2e-4: well below the limit. m = 96 at the same loading: ≈ 1.7e-3.
    expect(float32RelativeBound(64, 64, 0.01)).toBeGreaterThan(9.1e-4);
    expect(float32RelativeBound(64, 64, 0.01)).toBeLessThan(9.4e-4);
    expect(float32RelativeBound(96, 96, 0.01)).toBeLessThan(FLOAT32_RELATIVE_LIMIT);
    // No loading: no bound, the bin runs in float64.
    expect(float32RelativeBound(8, 8, 0)).toBe(Infinity);
  });
});

describe("FastMvdrScanner precision 'f32' against the plain float64 MVDR", () => {
  const cases: [m: number, directions: number, sourcePower: number, loading: LoadingSpec][] = [
    [8, 37, 0, { mode: 'relative', ratio: 0.01 }],
    [32, 90, 0, { mode: 'relative', ratio: 0.01 }],
    [32, 90, 1000, { mode: 'relative', ratio: 0.01 }],
    [64, 45, 1000, { mode: 'relative', ratio: 0.01 }],
    [21, 50, 100, { mode: 'relative-db', db: -20 }],
  ];
  it.each(cases)('M = %i, D = %i, source power %i: every bin within its bound, all in float32', async (m, directions, sourcePower, loading) => {
    const rng = new TestRandom(7 * m + directions);
    const freqs = [500, 1700, 3100, 5500];
    const positions = positionsOf(rng, m);
    const table = tableOf(positions, freqs, directions);
    const scanner = await FastMvdrScanner.create(table, 0, freqs.length, { precision: 'f32' });
    expect(scanner.precision).toBe('f32');
    const bank = bankOf(rng, table, freqs.length, sourcePower, 3 * m);
    const out = new Float64Array(freqs.length * directions);
    scanner.scan(bank, loading, out);
    const ref = new Float64Array(freqs.length * directions);
    new SpectrumScanner(table).scan(bank, { loading }, { conventional: null, mvdr: ref });
    const bounds = boundsOf(bank, loading);
    let worst = 0;
    for (let b = 0; b < freqs.length; b++) {
      let e = 0;
      for (let d = 0; d < directions; d++) e = Math.max(e, Math.abs(out[b * directions + d] - ref[b * directions + d]) / ref[b * directions + d]);
      expect(bounds[b]).toBeLessThanOrEqual(FLOAT32_RELATIVE_LIMIT);
      expect(e).toBeLessThanOrEqual(bounds[b]);
      worst = Math.max(worst, e / bounds[b]);
    }
    expect(scanner.float32Bins).toBe(freqs.length);
    expect(scanner.float64Bins).toBe(0);
    console.info(`f32 MVDR M=${m} D=${directions} P=${sourcePower}: worst error ${worst.toExponential(1)} of its bound (bounds ${Array.from(bounds, (x) => x.toExponential(1)).join(', ')})`);
  });

  it('bins whose bound exceeds the limit run in float64 (1e-9 relative); a mask is honoured', async () => {
    const rng = new TestRandom(99);
    const m = 48;
    const freqs = [800, 2900, 4400];
    const positions = positionsOf(rng, m);
    const table = tableOf(positions, freqs, 60);
    const scanner = await FastMvdrScanner.create(table, 0, 3, { precision: 'f32', blockSizeF32: 4 });
    // Loading 10⁻⁷ of the mean: ρ = √(m'(1 + r)/r) ≈ √(4.4·10⁸) ≈ 2.1·10⁴, bound ≈ 2ερ ≈ 0.19 > 0.01
    // (ε = √2·γ₄₈) — so these bins must not run in float32.
    const bank = bankOf(rng, table, 3, 100, 3 * m);
    bank.setMask(Array.from({ length: m }, (_, c) => c % 11 !== 4));
    const loading: LoadingSpec = { mode: 'relative', ratio: 1e-7 };
    const bounds = boundsOf(bank, loading);
    for (const x of bounds) expect(x).toBeGreaterThan(FLOAT32_RELATIVE_LIMIT);
    const out = new Float64Array(3 * 60);
    scanner.scan(bank, loading, out);
    const ref = new Float64Array(3 * 60);
    new SpectrumScanner(table).scan(bank, { loading }, { conventional: null, mvdr: ref });
    for (let i = 0; i < ref.length; i++) expect(Math.abs(out[i] - ref[i]) / ref[i]).toBeLessThan(1e-9);
    expect(scanner.float64Bins).toBe(3);
    expect(scanner.float32Bins).toBe(0);
    // The same masked bank at loading 0.01 runs in float32, within its bounds.
    const easy: LoadingSpec = { mode: 'relative', ratio: 0.01 };
    const b2 = boundsOf(bank, easy);
    scanner.scan(bank, easy, out);
    new SpectrumScanner(table).scan(bank, { loading: easy }, { conventional: null, mvdr: ref });
    for (let i = 0; i < ref.length; i++) expect(Math.abs(out[i] - ref[i]) / ref[i]).toBeLessThanOrEqual(b2[Math.floor(i / 60)]);
    expect(scanner.float32Bins).toBe(3);
  });

  it.each([4, 8, 12])('f32 block size %i (directions not a multiple of it)', async (k) => {
    const rng = new TestRandom(300 + k);
    const positions = positionsOf(rng, 13);
    const table = tableOf(positions, [900, 2500], 41);
    const scanner = await FastMvdrScanner.create(table, 0, 2, { precision: 'f32', blockSizeF32: k });
    const bank = bankOf(rng, table, 2, 10, 40);
    const loading: LoadingSpec = { mode: 'relative', ratio: 0.05 };
    const out = new Float64Array(2 * 41);
    scanner.scan(bank, loading, out);
    const ref = new Float64Array(2 * 41);
    new SpectrumScanner(table).scan(bank, { loading }, { conventional: null, mvdr: ref });
    const bounds = boundsOf(bank, loading);
    for (let i = 0; i < ref.length; i++) expect(Math.abs(out[i] - ref[i]) / ref[i]).toBeLessThanOrEqual(bounds[Math.floor(i / 41)]);
    await expect(FastMvdrScanner.create(table, 0, 2, { precision: 'f32', blockSizeF32: 6 })).rejects.toThrow(RangeError);
  });
});

describe("ConventionalTracker precision 'f32' against the plain float64 vᴴRv/M'²", () => {
  it.each([
    [5, 9, 0],
    [32, 360, 100],
    [64, 90, 1000],
  ])('M = %i, D = %i, source power %i: |error| ≤ trackerF32Bound(M)·tr(R)/M per bin, also after a mask change', async (m, directions, sourcePower) => {
    const rng = new TestRandom(17 * m + directions);
    const freqs = [450, 2100, 5300];
    const positions = positionsOf(rng, m);
    const table = tableOf(positions, freqs, directions);
    const tracker = await ConventionalTracker.create(table, 0, freqs.length, 'f32');
    expect(tracker.precision).toBe('f32');
    const bank = new CovarianceBank(m, freqs.length);
    const snap = new Float64Array(2 * m * freqs.length);
    const check = () => {
      const ref = new Float64Array(freqs.length * directions);
      new SpectrumScanner(table).scan(bank, { loading: { mode: 'fixed', delta: 0 } }, { conventional: ref, mvdr: null });
      const ma = bank.activeChannels.length;
      const sub = new Float64Array(2 * ma * ma);
      let worst = 0;
      for (let b = 0; b < freqs.length; b++) {
        bank.gather(b, sub);
        const allowed = (trackerF32Bound(ma) * hermitianTrace(sub, 0, ma)) / ma;
        for (let d = 0; d < directions; d++) {
          const e = Math.abs(tracker.power[b * directions + d] - ref[b * directions + d]);
          expect(e).toBeLessThanOrEqual(allowed);
          worst = Math.max(worst, e / allowed);
        }
      }
      return worst;
    };
    const t = table.data;
    let worst = 0;
    for (let k = 0; k < 60; k++) {
      rng.complexGaussian(snap, 1);
      const s = Math.sqrt(sourcePower / 2);
      const sr = s * rng.gaussian();
      const si = s * rng.gaussian();
      for (let b = 0; b < freqs.length; b++) {
        const o = table.offset(b, 3);
        for (let c = 0; c < m; c++) {
          snap[2 * (b * m + c)] += sr * t[o + 2 * c] - si * t[o + 2 * c + 1];
          snap[2 * (b * m + c) + 1] += sr * t[o + 2 * c + 1] + si * t[o + 2 * c];
        }
      }
      bank.update(snap, 0.95);
      tracker.update(snap, 0.95);
      if (k === 0 || k === 29) worst = Math.max(worst, check());
      if (k === 30) {
        const mask = Array.from({ length: m }, (_, c) => c !== 1);
        bank.setMask(mask);
        tracker.setMask(mask);
        tracker.seedFrom(bank);
      }
    }
    worst = Math.max(worst, check());
    console.info(`f32 tracker M=${m} D=${directions} P=${sourcePower}: worst error ${worst.toExponential(1)} of its bound ${trackerF32Bound(m).toExponential(2)}·tr(R)/M`);
  });
});

describe('BinProcessor fast path (single precision by default) against its plain path', () => {
  it('conventional within the tracker bound, MVDR within the per-bin bound, with a mask', async () => {
    const rng = new TestRandom(5);
    const m = 24;
    const positions = positionsOf(rng, m);
    const freqsHz = Float64Array.from([700, 1500, 2600, 3900, 5200]);
    const grid = directionGrid({ azimuthDeg: { startDeg: 0, stopDeg: 358, stepDeg: 2 } });
    const opts = { positions, freqsHz, grid, speedOfSoundMps: C, snapshotScale: 1 };
    const fast = await BinProcessor.create({ ...opts, fast: true });
    const fast64 = await BinProcessor.create({ ...opts, fast: true, precision: 'f64' });
    const plain = new BinProcessor(opts);
    const mask = Array.from({ length: m }, (_, c) => c !== 5);
    for (const p of [fast, fast64, plain]) p.setMask(mask);
    const snap = new Float64Array(2 * m * freqsHz.length);
    for (let k = 0; k < 80; k++) {
      rng.complexGaussian(snap, 1);
      for (const p of [fast, fast64, plain]) p.hop(Float64Array.from(snap), 0.97);
    }
    const D = grid.count;
    const loading: LoadingSpec = { mode: 'relative', ratio: 0.01 };
    const get = (p: BinProcessor) => {
      const conv = new Float64Array(D);
      const mvdr = new Float64Array(D);
      p.scan(SCAN_CONVENTIONAL | SCAN_MVDR, loading, conv, mvdr);
      return { conv, mvdr };
    };
    const a = get(fast);
    const a64 = get(fast64);
    const r = get(plain);
    expect(fast.float32Bins).toBe(freqsHz.length);
    // float64 fast path: equal to rounding (as test/unit/fast-conventional.test.ts).
    for (let d = 0; d < D; d++) {
      expect(Math.abs(a64.conv[d] - r.conv[d]) / r.conv[d]).toBeLessThan(1e-9);
      expect(Math.abs(a64.mvdr[d] - r.mvdr[d]) / r.mvdr[d]).toBeLessThan(1e-9);
    }
    // Sums over bins of terms each within its bound: the sum is within the largest bound (MVDR,
    // relative) and within the sum of the absolute bounds (conventional).
    const ma = m - 1;
    const sub = new Float64Array(2 * ma * ma);
    let traceSum = 0;
    for (let b = 0; b < freqsHz.length; b++) {
      plain.bank.gather(b, sub);
      traceSum += hermitianTrace(sub, 0, ma);
    }
    const mvdrBound = Math.max(...boundsOf(plain.bank, loading));
    for (let d = 0; d < D; d++) {
      expect(Math.abs(a.conv[d] - r.conv[d])).toBeLessThanOrEqual((trackerF32Bound(ma) * traceSum) / ma);
      expect(Math.abs(a.mvdr[d] - r.mvdr[d]) / r.mvdr[d]).toBeLessThanOrEqual(mvdrBound);
    }
  });
});

describe('PairedCholesky (two bins per SIMD lane pair) against InverseCholesky', () => {
  it.each([1, 2, 7, 32])('M = %i: L and 1/L_ii identical to the float64 JavaScript factor, lane by lane', async (m) => {
    const rng = new TestRandom(40 + m);
    const chol = await PairedCholesky.create(m + 3); // a larger capacity than used
    const mats = [sampleCovariance(rng, m, 3 * m + 2), sampleCovariance(rng, m, 3 * m + 5)];
    const deltas = [0.01, 0.3];
    chol.load(0, mats[0], m, deltas[0]);
    chol.load(1, mats[1], m, deltas[1]);
    chol.run(m);
    for (const lane of [0, 1]) {
      expect(chol.ok(lane, m)).toBe(true);
      const inv = new InverseCholesky(m);
      inv.factor(mats[lane], 0, deltas[lane], false);
      const { f64, base, dBase } = chol.view(lane);
      for (let e = 0; e < (m * (m + 1)) / 2; e++) {
        expect(f64[base + 4 * e]).toBe(inv.lower[2 * e]);
        expect(f64[base + 4 * e + 2]).toBe(inv.lower[2 * e + 1]);
      }
      for (let i = 0; i < m; i++) expect(f64[dBase + 2 * i]).toBe(inv.invDiag[i]);
    }
  });

  it('a lane that fails the pivot rule is reported, the other lane is not affected; in the scanner, paired bins equal per-bin ones and an unloaded rank-deficient bin is flagged singular', async () => {
    const rng = new TestRandom(3);
    const m = 6;
    const chol = await PairedCholesky.create(m);
    const good = sampleCovariance(rng, m, 20);
    const rankTwo = sampleCovariance(rng, m, 2); // rank 2 < 6: no factor without loading
    chol.load(0, rankTwo, m, 0);
    chol.load(1, good, m, 0.1);
    chol.run(m);
    expect(chol.ok(0, m)).toBe(false);
    expect(() => new InverseCholesky(m).factor(rankTwo, 0, 0)).toThrow(NotPositiveDefiniteError);
    expect(chol.ok(1, m)).toBe(true);
    // Through the scanner: 3 bins (an odd count: the last waits alone), the middle one rank-deficient.
    const positions = positionsOf(rng, m);
    const table = tableOf(positions, [600, 1800, 3300], 20);
    const bank = new CovarianceBank(m, 3);
    bank.data.set(good, bank.matrixOffset(0));
    bank.data.set(rankTwo, bank.matrixOffset(1));
    bank.data.set(good, bank.matrixOffset(2));
    const scanner = await FastMvdrScanner.create(table, 0, 3, { precision: 'f32' });
    const plainScanner = await FastMvdrScanner.create(table, 0, 3, { precision: 'f32', pairedFactor: false });
    const loading: LoadingSpec = { mode: 'fixed', delta: 0 };
    const [out, out2] = [new Float64Array(60), new Float64Array(60)];
    const [flags, flags2] = [new Uint8Array(3), new Uint8Array(3)];
    // With δ > 0 all three bins pair (bound ≤ limit). δ = 0 has no bound: they run in float64, and
    // the rank-deficient one is flagged. (A bin within the bound always has δ ≥ 10⁻⁶·tr R/m, far
    // above the pivot tolerance: the paired path's pivot fallback guards only the unexpected.)
    scanner.scan(bank, { mode: 'fixed', delta: 1e-3 }, out, null, null, flags);
    plainScanner.scan(bank, { mode: 'fixed', delta: 1e-3 }, out2, null, null, flags2);
    expect(Array.from(out)).toEqual(Array.from(out2));
    expect(scanner.float32Bins).toBe(3);
    scanner.scan(bank, loading, out, null, null, flags);
    expect(Array.from(flags)).toEqual([0, 1, 0]);
    expect(out.subarray(20, 40).every((x) => x === 0)).toBe(true);
  });

  it('the paired and the per-bin factor give identical spectra (odd bin count, a mask)', async () => {
    const rng = new TestRandom(77);
    const m = 19;
    const freqs = [400, 900, 1500, 2600, 4700];
    const table = tableOf(positionsOf(rng, m), freqs, 33);
    const bank = bankOf(rng, table, freqs.length, 30, 60);
    bank.setMask(Array.from({ length: m }, (_, c) => c !== 7));
    const a = await FastMvdrScanner.create(table, 0, freqs.length, { precision: 'f32' });
    const b = await FastMvdrScanner.create(table, 0, freqs.length, { precision: 'f32', pairedFactor: false });
    const [x, y] = [new Float64Array(5 * 33), new Float64Array(5 * 33)];
    a.scan(bank, { mode: 'relative', ratio: 0.01 }, x);
    b.scan(bank, { mode: 'relative', ratio: 0.01 }, y);
    expect(Array.from(x)).toEqual(Array.from(y));
  });
});

describe('the conventional spectrum per row from the covariance (f32x4 quad kernel)', () => {
  it.each([
    [6, 20, 0],
    [32, 90, 100],
    [64, 45, 1000],
  ])('M = %i, D = %i, source power %i: |error| ≤ conventionalRowBound(M\')·tr(R)/M\' per bin; the same numbers from scan(…, conv); a mask', async (m, directions, sourcePower) => {
    const rng = new TestRandom(500 + m);
    const freqs = [450, 2100, 5300];
    const table = tableOf(positionsOf(rng, m), freqs, directions);
    const bank = bankOf(rng, table, freqs.length, sourcePower, 2 * m);
    const scanner = await FastMvdrScanner.create(table, 0, freqs.length, { precision: 'f32' });
    for (const mask of [null, Array.from({ length: m }, (_, c) => c % 5 !== 2)]) {
      if (mask) bank.setMask(mask);
      const ma = bank.activeChannels.length;
      const conv = new Float64Array(freqs.length * directions);
      scanner.conventional(bank, conv);
      const ref = new Float64Array(freqs.length * directions);
      new SpectrumScanner(table).scan(bank, { loading: { mode: 'fixed', delta: 0 } }, { conventional: ref, mvdr: null });
      const sub = new Float64Array(2 * ma * ma);
      let worst = 0;
      for (let b = 0; b < freqs.length; b++) {
        bank.gather(b, sub);
        const allowed = (conventionalRowBound(ma) * hermitianTrace(sub, 0, ma)) / ma;
        for (let d = 0; d < directions; d++) {
          const e = Math.abs(conv[b * directions + d] - ref[b * directions + d]);
          expect(e).toBeLessThanOrEqual(allowed);
          worst = Math.max(worst, e / allowed);
        }
      }
      const both = new Float64Array(freqs.length * directions);
      scanner.scan(bank, { mode: 'relative', ratio: 0.01 }, new Float64Array(freqs.length * directions), null, null, null, both);
      expect(Array.from(both)).toEqual(Array.from(conv));
      console.info(`per-row conventional M'=${ma} D=${directions}: worst error ${worst.toExponential(1)} of its bound`);
    }
    const f64Scanner = await FastMvdrScanner.create(table, 0, freqs.length);
    expect(() => f64Scanner.conventional(bank, new Float64Array(freqs.length * directions))).toThrow(/precision 'f32'/);
  });

  it("BinProcessor: 'rows' and 'auto' (switching both ways with the hops between rows) stay within the bounds of the plain spectrum", async () => {
    const rng = new TestRandom(8);
    const m = 20;
    const positions = positionsOf(rng, m);
    const freqsHz = Float64Array.from([900, 2200, 4100]);
    const grid = directionGrid({ azimuthDeg: { startDeg: 0, stopDeg: 355, stepDeg: 5 } });
    const opts = { positions, freqsHz, grid, speedOfSoundMps: C, snapshotScale: 1 };
    const rows = await BinProcessor.create({ ...opts, fast: true, conventional: 'rows' });
    const auto = await BinProcessor.create({ ...opts, fast: true });
    const plain = new BinProcessor(opts);
    const D = grid.count;
    const loading: LoadingSpec = { mode: 'relative', ratio: 0.01 };
    const snap = new Float64Array(2 * m * freqsHz.length);
    // Hops between rows: 15 > m/2 → per row; 3 < 0.4·m → tracker again; a mask change per row.
    const schedule = [15, 15, 15, 3, 3, 3, 15, 15];
    const modes: boolean[] = [];
    for (let k = 0; k < schedule.length; k++) {
      for (let h = 0; h < schedule[k]; h++) {
        rng.complexGaussian(snap, 1);
        for (const p of [rows, auto, plain]) p.hop(Float64Array.from(snap), 0.95);
      }
      if (k === 6) for (const p of [rows, auto, plain]) p.setMask(Array.from({ length: m }, (_, c) => c !== 4));
      const ma = plain.bank.activeChannels.length;
      const sub = new Float64Array(2 * ma * ma);
      let traceSum = 0;
      for (let b = 0; b < freqsHz.length; b++) {
        plain.bank.gather(b, sub);
        traceSum += hermitianTrace(sub, 0, ma);
      }
      // A tracker handed per-row values carries both errors: the sum of the two bounds.
      const allowed = ((trackerF32Bound(ma) + conventionalRowBound(ma)) * traceSum) / ma;
      const ref = new Float64Array(D);
      plain.scan(SCAN_CONVENTIONAL, loading, ref, new Float64Array(D));
      for (const p of [rows, auto]) {
        const conv = new Float64Array(D);
        const mvdr = new Float64Array(D);
        p.scan(SCAN_CONVENTIONAL | SCAN_MVDR, loading, conv, mvdr);
        for (let d = 0; d < D; d++) expect(Math.abs(conv[d] - ref[d])).toBeLessThanOrEqual(allowed);
      }
      modes.push(auto.conventionalPerRow);
      expect(rows.conventionalPerRow).toBe(true);
    }
    // The mode chosen after each row, from the hops before it.
    expect(modes).toEqual([true, true, true, false, false, false, true, true]);
  });
});
