/**
 * FastMvdrScanner (server/dsp/fast/mvdr-scan.ts) against the plain path, SpectrumScanner's MVDR
 * output (spectrum.ts: HermitianSolver factor + forward substitution per direction), over a grid
 * of channel counts, bin slices, direction counts (including counts that are not a multiple of the
 * block size), loading modes and channel masks; the WebAssembly and JavaScript backends against
 * each other; and InverseCholesky's W = L⁻¹ against HermitianSolver.forward on unit vectors.
 * Covariances are recursive sample covariances of 3M random snapshots (well conditioned:
 * Marchenko–Pastur, see test/helpers/random.ts), so float64 paths agree to rounding (1e-9).
 */
import { describe, expect, it } from 'vitest';
import { CovarianceBank } from '../../server/dsp/covariance.ts';
import { InverseCholesky } from '../../server/dsp/fast/inverse-factor.ts';
import { FastMvdrScanner } from '../../server/dsp/fast/mvdr-scan.ts';
import { HermitianSolver, NotPositiveDefiniteError } from '../../server/dsp/hermitian.ts';
import type { LoadingSpec } from '../../server/dsp/loading.ts';
import { SpectrumScanner } from '../../server/dsp/spectrum.ts';
import { SteeringTable, directionGrid } from '../../server/dsp/steering.ts';
import { TestRandom, sampleCovariance } from '../helpers/random.ts';

const C = 343.2;

/** Random sensor positions inside a 0.3 m cube: a general geometry with no symmetry to hide behind. */
function randomPositions(rng: TestRandom, m: number): [number, number, number][] {
  return Array.from({ length: m }, () => [0.3 * rng.uniform(), 0.3 * rng.uniform(), 0.1 * rng.uniform()] as [number, number, number]);
}

function makeTable(positions: [number, number, number][], freqsHz: number[], directions: number): SteeringTable {
  const grid = directionGrid({ azimuthDeg: { startDeg: 0, stopDeg: 360 - 360 / directions, stepDeg: 360 / directions } });
  expect(grid.count).toBe(directions);
  return new SteeringTable({ positions, grid, freqsHz, speedOfSoundMps: C });
}

function filledBank(rng: TestRandom, m: number, bins: number): CovarianceBank {
  const bank = new CovarianceBank(m, bins);
  const snap = new Float64Array(2 * m * bins);
  for (let k = 0; k < 3 * m + 4; k++) bank.update(rng.complexGaussian(snap), 0.995);
  return bank;
}

function maxRelativeError(a: Float64Array, b: Float64Array): number {
  let e = 0;
  for (let i = 0; i < b.length; i++) e = Math.max(e, Math.abs(a[i] - b[i]) / Math.abs(b[i]));
  return e;
}

/** Plain MVDR of table bins [start, start + count) through SpectrumScanner on a table of just those bins. */
function plainMvdr(
  positions: [number, number, number][], freqs: number[], directions: number, bank: CovarianceBank,
  loading: LoadingSpec, look: number | null = null,
): { mvdr: Float64Array; delta: Float64Array } {
  const table = makeTable(positions, freqs, directions);
  const mvdr = new Float64Array(freqs.length * directions);
  const delta = new Float64Array(freqs.length);
  new SpectrumScanner(table).scan(bank, { loading, wngLookDirection: look }, { conventional: null, mvdr, loadingDelta: delta });
  return { mvdr, delta };
}

const LOADINGS: LoadingSpec[] = [
  { mode: 'relative', ratio: 0.01 },
  { mode: 'relative-db', db: -30 },
  { mode: 'fixed', delta: 0 },
  { mode: 'fixed', delta: 0.5 },
];

describe('InverseCholesky', () => {
  it.each([1, 2, 5, 16, 33])('W = L⁻¹ matches HermitianSolver.forward of unit vectors (M = %i)', (m) => {
    const rng = new TestRandom(100 + m);
    const a = sampleCovariance(rng, m, 3 * m + 2);
    const solver = new HermitianSolver(m);
    solver.factor(a, 0, 0.01);
    const inv = new InverseCholesky(m);
    inv.factor(a, 0, 0.01);
    const e = new Float64Array(2 * m);
    const col = new Float64Array(2 * m);
    let worst = 0;
    for (let j = 0; j < m; j++) {
      e.fill(0);
      e[2 * j] = 1;
      solver.forward(col, e);
      for (let i = 0; i < m; i++) {
        const wr = i >= j ? inv.inverse[i * (i + 1) + 2 * j] : 0;
        const wi = i >= j ? inv.inverse[i * (i + 1) + 2 * j + 1] : 0;
        const scale = Math.abs(inv.inverse[i * (i + 1) + 2 * i]);
        worst = Math.max(worst, Math.abs(wr - col[2 * i]) / scale, Math.abs(wi - col[2 * i + 1]) / scale);
      }
    }
    expect(worst).toBeLessThan(1e-12);
  });

  it('fails on the same pivot as HermitianSolver for a rank-deficient matrix', () => {
    const m = 6;
    const a = sampleCovariance(new TestRandom(7), m, 3); // rank 3
    let plain: NotPositiveDefiniteError | null = null;
    try {
      new HermitianSolver(m).factor(a);
    } catch (error) {
      plain = error as NotPositiveDefiniteError;
    }
    expect(plain).toBeInstanceOf(NotPositiveDefiniteError);
    expect(() => new InverseCholesky(m).factor(a)).toThrow(NotPositiveDefiniteError);
    try {
      new InverseCholesky(m).factor(a);
    } catch (error) {
      expect((error as NotPositiveDefiniteError).pivotIndex).toBe(plain!.pivotIndex);
      expect((error as NotPositiveDefiniteError).code).toBe('ERR_DSP_NOT_POSITIVE_DEFINITE');
    }
  });
});

describe('FastMvdrScanner equals SpectrumScanner (float64, 1e-9 relative)', () => {
  const cases: [m: number, directions: number, bins: number, start: number][] = [
    [4, 7, 3, 0],
    [8, 36, 4, 1],
    [13, 37, 3, 2],
    [32, 90, 3, 1],
    [64, 45, 2, 0],
  ];
  for (const backend of ['wasm', 'js'] as const) {
    it.each(cases)(`${backend}: M = %i, D = %i, %i bins from table bin %i, all loading modes`, async (m, directions, bins, start) => {
      const rng = new TestRandom(1000 * m + directions);
      const positions = randomPositions(rng, m);
      const freqs = [400, 1100, 2300, 3700, 5100, 5900].slice(0, start + bins + 1);
      const table = makeTable(positions, freqs, directions);
      const scanner = await FastMvdrScanner.create(table, start, bins, { backend });
      expect(scanner.backend).toBe(backend);
      const bank = filledBank(rng, m, bins);
      const sliceFreqs = freqs.slice(start, start + bins);
      const out = new Float64Array(bins * directions);
      const delta = new Float64Array(bins);
      for (const loading of LOADINGS) {
        const ref = plainMvdr(positions, sliceFreqs, directions, bank, loading);
        out.fill(Number.NaN);
        scanner.scan(bank, loading, out, delta);
        expect(maxRelativeError(out, ref.mvdr)).toBeLessThan(1e-9);
        expect(Array.from(delta)).toEqual(Array.from(ref.delta));
      }
    });
  }

  it.each([2, 4, 6, 8])('wasm block size %i', async (k) => {
    const rng = new TestRandom(50 + k);
    const positions = randomPositions(rng, 11);
    const table = makeTable(positions, [900, 2500], 41);
    const scanner = await FastMvdrScanner.create(table, 0, 2, { blockSize: k });
    expect(scanner.blockSize).toBe(k);
    const bank = filledBank(rng, 11, 2);
    const out = new Float64Array(2 * 41);
    const loading: LoadingSpec = { mode: 'relative', ratio: 0.05 };
    scanner.scan(bank, loading, out);
    expect(maxRelativeError(out, plainMvdr(positions, [900, 2500], 41, bank, loading).mvdr)).toBeLessThan(1e-9);
  });

  it("mode 'wng' with a look direction per bin, and requires it", async () => {
    const rng = new TestRandom(77);
    const m = 10;
    const positions = randomPositions(rng, m);
    const freqs = [700, 1900, 4200];
    const table = makeTable(positions, freqs, 24);
    const bank = filledBank(rng, m, 3);
    const loading: LoadingSpec = { mode: 'wng', floorDb: 9 };
    const look = 5;
    const ref = plainMvdr(positions, freqs, 24, bank, loading, look);
    for (const backend of ['wasm', 'js'] as const) {
      const scanner = await FastMvdrScanner.create(table, 0, 3, { backend });
      const out = new Float64Array(3 * 24);
      const delta = new Float64Array(3);
      scanner.scan(bank, loading, out, delta, Int32Array.of(look, look, look));
      expect(maxRelativeError(out, ref.mvdr)).toBeLessThan(1e-9);
      expect(Array.from(delta)).toEqual(Array.from(ref.delta));
      expect(() => scanner.scan(bank, loading, out)).toThrow(/needs look directions/);
      expect(() => scanner.scan(bank, loading, out, null, Int32Array.of(0, 24, 0))).toThrow(RangeError);
    }
  });

  it('masked channels: equals the plain scan of the same masked bank, before and after a mask change', async () => {
    const rng = new TestRandom(31);
    const m = 13;
    const positions = randomPositions(rng, m);
    const freqs = [800, 2600, 4400];
    const table = makeTable(positions, freqs, 50);
    const bank = filledBank(rng, m, 3);
    const loading: LoadingSpec = { mode: 'relative', ratio: 0.01 };
    const scanners = [await FastMvdrScanner.create(table, 0, 3), FastMvdrScanner.createJs(table, 0, 3)];
    const out = new Float64Array(3 * 50);
    for (const masked of [[], [0, 5, 12], [3], [1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11]]) {
      bank.setMask(Array.from({ length: m }, (_, i) => !masked.includes(i)));
      const ref = plainMvdr(positions, freqs, 50, bank, loading);
      for (const s of scanners) {
        s.scan(bank, loading, out);
        expect(maxRelativeError(out, ref.mvdr)).toBeLessThan(1e-9);
      }
    }
  });

  it('WASM and JS backends agree with each other', async () => {
    const rng = new TestRandom(5);
    const m = 32;
    const positions = randomPositions(rng, m);
    const table = makeTable(positions, [1000, 3000, 5000], 360);
    const bank = filledBank(rng, m, 3);
    const loading: LoadingSpec = { mode: 'relative-db', db: -20 };
    const a = new Float64Array(3 * 360);
    const b = new Float64Array(3 * 360);
    (await FastMvdrScanner.create(table, 0, 3, { blockSize: 4 })).scan(bank, loading, a);
    FastMvdrScanner.createJs(table, 0, 3, 4).scan(bank, loading, b);
    // Same layout and the same summation order per direction: equal to rounding, typically exactly.
    expect(maxRelativeError(a, b)).toBeLessThan(1e-12);
  });

  it('leaves the bank unchanged, rejects mismatched sizes and propagates NotPositiveDefiniteError', async () => {
    const rng = new TestRandom(9);
    const positions = randomPositions(rng, 6);
    const table = makeTable(positions, [500, 1500], 12);
    const scanner = await FastMvdrScanner.create(table);
    const bank = filledBank(rng, 6, 2);
    const before = Float64Array.from(bank.data);
    const out = new Float64Array(24);
    scanner.scan(bank, { mode: 'fixed', delta: 0.1 }, out);
    expect(Array.from(bank.data)).toEqual(Array.from(before));
    expect(() => scanner.scan(new CovarianceBank(6, 3), { mode: 'fixed', delta: 1 }, out)).toThrow(RangeError);
    expect(() => scanner.scan(bank, { mode: 'fixed', delta: 1 }, new Float64Array(23))).toThrow(RangeError);
    const rankOne = new CovarianceBank(6, 2);
    rankOne.update(rng.complexGaussian(new Float64Array(24)), 0.9);
    expect(() => scanner.scan(rankOne, { mode: 'fixed', delta: 0 }, out)).toThrow(NotPositiveDefiniteError);
    await expect(FastMvdrScanner.create(table, 2, 1)).rejects.toThrow(RangeError);
    await expect(FastMvdrScanner.create(table, 0, 2, { blockSize: 5 })).rejects.toThrow(RangeError);
    expect(() => FastMvdrScanner.createJs(table, 0, 2, 8)).toThrow(RangeError);
  });
});
