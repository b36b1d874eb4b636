/**
 * SpectrumScanner, combineBroadband and powerToDb against published closed forms: the uniform line
 * array response (first null, half-power width, highest sidelobe) for the conventional scan, and the
 * Capon spectrum of one plane wave in white noise (matrix inversion lemma) for MVDR. Masked channels
 * are checked against an array built without them. Reference values: ../shared/CHECKS.md.
 */
import { describe, expect, it } from 'vitest';
import { CovarianceBank } from '../../server/dsp/covariance.ts';
import type { LoadingSpec } from '../../server/dsp/loading.ts';
import { SpectrumScanner, combineBroadband, powerToDb } from '../../server/dsp/spectrum.ts';
import { SteeringTable, directionGrid, type DirectionGrid } from '../../server/dsp/steering.ts';
import { TestRandom, addOuterProduct, sampleCovariance } from '../helpers/random.ts';

const C = 343.2;
const FREQ_HZ = 1000;
/** Half-wavelength spacing d = λ/2 = c/(2f) at FREQ_HZ. */
const HALF_WAVELENGTH_M = C / (2 * FREQ_HZ);

/*
 * Mapping to the textbook variable: sensors at p_m = (m·d, 0, 0) and a source at azimuth az in the
 * x–y plane give τ_m = −(p_m·u)/c = −m·d·cos(az)/c (steering.ts), so with d = λ/2
 *   v_m = exp(−j2πfτ_m) = exp(jπ m cos az),
 * i.e. the line array's u = sin θ (θ from broadside) is u = cos(az): broadside is az = 90°, and
 * u increases as az falls below 90°.
 */

/** N sensors on the x axis at d = λ/2 (metres). */
function lineArray(n: number): [number, number, number][] {
  return Array.from({ length: n }, (_, m) => [m * HALF_WAVELENGTH_M, 0, 0] as [number, number, number]);
}

/** B(u) = sin(Nπu/2) / (N sin(πu/2)) (Van Trees 2002 ch. 2, from memory); 1 at u = 0. */
function ulaResponse(n: number, u: number): number {
  const den = n * Math.sin((Math.PI * u) / 2);
  return den === 0 ? 1 : Math.sin((n * Math.PI * u) / 2) / den;
}

/** A 1-D azimuth grid holding exactly these azimuths (elevation 0). */
function azimuthList(azimuthsDeg: ArrayLike<number>): DirectionGrid {
  const azimuthDeg = Float64Array.from(azimuthsDeg);
  return { count: azimuthDeg.length, nAz: azimuthDeg.length, nEl: 1, azimuthDeg, elevationDeg: new Float64Array(azimuthDeg.length) };
}

/** One-bin bank holding R = v₀v₀ᴴ for a broadside source: v₀ = 1 on every sensor, so R is all ones. */
function broadsideBank(n: number): CovarianceBank {
  const bank = new CovarianceBank(n, 1);
  const o = bank.matrixOffset(0);
  for (let i = 0; i < n * n; i++) bank.data[o + 2 * i] = 1;
  return bank;
}

/** The scanner's conventional power at these azimuths (one bin, FREQ_HZ). */
function conventionalAt(n: number, bank: CovarianceBank, azimuthsDeg: ArrayLike<number>): Float64Array {
  const table = new SteeringTable({ positions: lineArray(n), grid: azimuthList(azimuthsDeg), freqsHz: [FREQ_HZ], speedOfSoundMps: C });
  const out = new Float64Array(table.directions);
  new SpectrumScanner(table).scan(bank, { loading: { mode: 'fixed', delta: 0 } }, { conventional: out, mvdr: null });
  return out;
}

const cosDeg = (deg: number): number => Math.cos((deg * Math.PI) / 180);

/** Bisection for a sign change of f on [a, b], to |b − a| ≤ tol. */
function bisect(f: (x: number) => number, a: number, b: number, tol: number): number {
  let fa = f(a);
  expect(Math.sign(fa)).not.toBe(Math.sign(f(b)));
  while (Math.abs(b - a) > tol) {
    const mid = 0.5 * (a + b);
    const fm = f(mid);
    if (Math.sign(fm) === Math.sign(fa)) {
      a = mid;
      fa = fm;
    } else {
      b = mid;
    }
  }
  return 0.5 * (a + b);
}

/** Golden-section search for the maximum of a unimodal f on [a, b], to |b − a| ≤ tol. */
function goldenMax(f: (x: number) => number, a: number, b: number, tol: number): number {
  const g = (Math.sqrt(5) - 1) / 2;
  let c = b - g * (b - a);
  let d = a + g * (b - a);
  let fc = f(c);
  let fd = f(d);
  while (Math.abs(b - a) > tol) {
    if (fc > fd) {
      b = d;
      d = c;
      fd = fc;
      c = b - g * (b - a);
      fc = f(c);
    } else {
      a = c;
      c = d;
      fc = fd;
      d = a + g * (b - a);
      fd = f(d);
    }
  }
  return 0.5 * (a + b);
}

describe('conventional scan of a uniform line array (Van Trees 2002 ch. 2, from memory)', () => {
  // Coarse grid: azimuth 0…180° in 0.01° (18 001 directions); broadside at index 9000.
  const COARSE_STEP_DEG = 0.01;
  const coarse = directionGrid({ azimuthDeg: { startDeg: 0, stopDeg: 180, stepDeg: COARSE_STEP_DEG } });
  const BROADSIDE = 9000;
  // Highest sidelobe, CHECKS.md (recomputed there from the closed form).
  const sidelobeDb: Record<number, number> = { 8: -12.8, 10: -12.97, 16: -13.15, 32: -13.23 };

  for (const n of [8, 10, 16, 32]) {
    describe(`N = ${n}`, () => {
      const bank = broadsideBank(n);
      const p = conventionalAt(n, bank, coarse.azimuthDeg);
      const scanAt = (azDeg: number): number => conventionalAt(n, bank, [azDeg])[0];

      it('equals |B(u)|² with u = cos(az) over the whole visible region (1e-12)', () => {
        expect(coarse.azimuthDeg[BROADSIDE]).toBe(90);
        let worst = 0;
        for (let d = 0; d < coarse.count; d++) {
          const b = ulaResponse(n, cosDeg(coarse.azimuthDeg[d]));
          worst = Math.max(worst, Math.abs(p[d] - b * b));
        }
        expect(worst).toBeLessThan(1e-12);
        expect(p[BROADSIDE]).toBeCloseTo(1, 12);
      });

      it('has its first nulls at u = ±2/N (1e-3 in u)', () => {
        for (const dir of [-1, 1]) {
          // Walk away from broadside down the main lobe to the first local minimum.
          let i = BROADSIDE;
          while (p[i + dir] < p[i]) i += dir;
          // Refine: a fine rescan ±1 coarse step around it (1e-5° steps), then a parabola through
          // the minimum and its neighbours (|B|² is quadratic about a simple zero).
          const az0 = coarse.azimuthDeg[i];
          const fineStepDeg = 1e-5;
          const fine = directionGrid({ azimuthDeg: { startDeg: az0 - COARSE_STEP_DEG, stopDeg: az0 + COARSE_STEP_DEG, stepDeg: fineStepDeg } });
          const q = conventionalAt(n, bank, fine.azimuthDeg);
          let k = 1;
          for (let j = 1; j < q.length - 1; j++) if (q[j] < q[k]) k = j;
          const offset = (0.5 * (q[k - 1] - q[k + 1])) / (q[k - 1] - 2 * q[k] + q[k + 1]);
          const nullAzDeg = fine.azimuthDeg[k] + offset * fineStepDeg;
          const u = cosDeg(nullAzDeg);
          // dir = −1 walks toward smaller azimuth, i.e. larger u.
          expect(Math.abs(u - (-dir * 2) / n)).toBeLessThan(1e-3);
          expect(scanAt(nullAzDeg)).toBeLessThan(1e-12);
        }
      });

      it('has a half-power width matching the exact closed-form value and ≈ 0.891·2/N (1e-3 in u)', () => {
        // Exact half-power point of the closed form, solved here: |B(u_h)|² = ½ on (0, 2/N).
        const uHalf = bisect((u) => ulaResponse(n, u) ** 2 - 0.5, 1e-9, 2 / n, 1e-15);
        expect(Math.abs(2 * uHalf - (0.891 * 2) / n)).toBeLessThan(1e-3);
        if (n === 10) expect(Math.abs(2 * uHalf - 0.178)).toBeLessThan(1e-3);
        // Measured: bisection on repeated one-direction scans, either side of broadside, bracketed
        // by the coarse grid.
        const edges: number[] = [];
        for (const dir of [-1, 1]) {
          let i = BROADSIDE;
          while (p[i + dir] >= 0.5) i += dir;
          const azDeg = bisect((az) => scanAt(az) - 0.5, coarse.azimuthDeg[i], coarse.azimuthDeg[i + dir], 1e-10);
          edges.push(cosDeg(azDeg));
        }
        const widthU = edges[0] - edges[1];
        expect(Math.abs(widthU - 2 * uHalf)).toBeLessThan(1e-3);
        expect(Math.abs(widthU - (0.891 * 2) / n)).toBeLessThan(1e-3);
      });

      it(`has its highest sidelobe at ${sidelobeDb[n]} dB (0.05 dB)`, () => {
        // Largest coarse value outside the main lobe (|u| > 2/N), refined by golden section on
        // repeated one-direction scans within ±1 coarse step.
        let best = -1;
        for (let d = 0; d < coarse.count; d++) {
          if (Math.abs(cosDeg(coarse.azimuthDeg[d])) <= 2 / n) continue;
          if (best < 0 || p[d] > p[best]) best = d;
        }
        const az0 = coarse.azimuthDeg[best];
        const peakAz = goldenMax(scanAt, az0 - COARSE_STEP_DEG, az0 + COARSE_STEP_DEG, 1e-9);
        const measuredDb = 10 * Math.log10(scanAt(peakAz));
        expect(Math.abs(measuredDb - sidelobeDb[n])).toBeLessThan(0.05);
        // And the closed form's own maximum on the first sidelobe (2/N < u < 4/N), found here.
        const uPeak = goldenMax((u) => ulaResponse(n, u) ** 2, 2 / n, 4 / n, 1e-12);
        const closedDb = 10 * Math.log10(ulaResponse(n, uPeak) ** 2);
        expect(Math.abs(measuredDb - closedDb)).toBeLessThan(1e-6);
        expect(Math.abs(Math.abs(cosDeg(peakAz)) - uPeak)).toBeLessThan(1e-6);
      });
    });
  }
});

describe('MVDR scan of one plane wave in white noise (Capon 1969; matrix inversion lemma)', () => {
  const n = 10;
  const sourceAzDeg = 60;
  const sourcePower = 1;
  const noisePower = 0.1;
  const grid = directionGrid({ azimuthDeg: { startDeg: 0, stopDeg: 180, stepDeg: 0.5 } });
  const SOURCE = 120; // 60° on the 0.5° grid
  const us = cosDeg(sourceAzDeg);

  /** R = σ_s² v_s v_sᴴ + σ_n² I, v_s,m = exp(jπ m u_s) written out here (mapping above). */
  function bank(): CovarianceBank {
    const b = new CovarianceBank(n, 1);
    const r = new Float64Array(2 * n * n);
    const v = new Float64Array(2 * n);
    for (let m = 0; m < n; m++) {
      v[2 * m] = Math.cos(Math.PI * m * us);
      v[2 * m + 1] = Math.sin(Math.PI * m * us);
    }
    addOuterProduct(r, v, n, sourcePower);
    for (let m = 0; m < n; m++) r[(m * n + m) * 2] += noisePower;
    b.data.set(r, b.matrixOffset(0));
    return b;
  }

  /**
   * Closed form with noise level σ² (σ_n² + δ): R⁻¹ = (1/σ²)[I − σ_s² v_s v_sᴴ / (σ² + Nσ_s²)], so
   * vᴴR⁻¹v = (1/σ²)[N − σ_s² N²|B(u − u_s)|² / (σ² + Nσ_s²)], and at the source 1/(v_sᴴR⁻¹v_s) = σ_s² + σ²/N.
   */
  function caponClosedForm(u: number, sigma2: number): number {
    const b = ulaResponse(n, u - us);
    return 1 / ((n - (sourcePower * n * n * b * b) / (sigma2 + n * sourcePower)) / sigma2);
  }

  function scan(loading: LoadingSpec): { mvdr: Float64Array; delta: Float64Array } {
    const table = new SteeringTable({ positions: lineArray(n), grid, freqsHz: [FREQ_HZ], speedOfSoundMps: C });
    const mvdr = new Float64Array(grid.count);
    const delta = new Float64Array(1);
    new SpectrumScanner(table).scan(bank(), { loading }, { conventional: null, mvdr, loadingDelta: delta });
    return { mvdr, delta };
  }

  it('peaks at the source with σ_s² + σ_n²/N and follows the closed form everywhere (1e-9 relative)', () => {
    expect(grid.azimuthDeg[SOURCE]).toBe(sourceAzDeg);
    const { mvdr, delta } = scan({ mode: 'fixed', delta: 0 });
    expect(delta[0]).toBe(0);
    let peak = 0;
    for (let d = 1; d < grid.count; d++) if (mvdr[d] > mvdr[peak]) peak = d;
    expect(peak).toBe(SOURCE);
    const expected = sourcePower + noisePower / n;
    expect(Math.abs(mvdr[SOURCE] - expected) / expected).toBeLessThan(1e-9);
    for (let d = 0; d < grid.count; d++) {
      const want = caponClosedForm(cosDeg(grid.azimuthDeg[d]), noisePower);
      expect(Math.abs(mvdr[d] - want) / want).toBeLessThan(1e-9);
    }
  });

  it('with relative loading ε uses δ = ε·tr(R)/M and peaks at σ_s² + (σ_n² + δ)/N (1e-9 relative)', () => {
    const ratio = 0.05;
    const { mvdr, delta } = scan({ mode: 'relative', ratio });
    const wantDelta = ratio * (sourcePower + noisePower); // tr(R)/M = σ_s² + σ_n²
    expect(Math.abs(delta[0] - wantDelta) / wantDelta).toBeLessThan(1e-12);
    const expected = sourcePower + (noisePower + wantDelta) / n;
    expect(Math.abs(mvdr[SOURCE] - expected) / expected).toBeLessThan(1e-9);
    for (let d = 0; d < grid.count; d++) {
      const want = caponClosedForm(cosDeg(grid.azimuthDeg[d]), noisePower + wantDelta);
      expect(Math.abs(mvdr[d] - want) / want).toBeLessThan(1e-9);
    }
  });
});

describe('masked channels', () => {
  // An irregular 3-D array, so no symmetry hides a wrong channel index.
  const positions: [number, number, number][] = [
    [0, 0, 0], [0.05, 0.01, 0], [-0.03, 0.04, 0.01], [0.02, -0.05, -0.02],
    [-0.04, -0.02, 0.03], [0.06, 0.05, 0.02], [-0.01, 0.07, -0.03],
  ];
  const M = positions.length;
  const mask = [true, true, false, true, true, false, true];
  const kept = mask.flatMap((on, i) => (on ? [i] : []));
  const freqsHz = [500, 1500, 2500];
  const grid = directionGrid({ azimuthDeg: { startDeg: 0, stopDeg: 355, stepDeg: 5 }, elevationDeg: { startDeg: -30, stopDeg: 60, stepDeg: 15 } });
  const rng = new TestRandom(0x5eed);
  const matrices = freqsHz.map(() => sampleCovariance(rng, M, 3 * M));

  function fullBank(): CovarianceBank {
    const bank = new CovarianceBank(M, freqsHz.length);
    matrices.forEach((r, b) => bank.data.set(r, bank.matrixOffset(b)));
    return bank;
  }

  /** The same covariances with the masked rows and columns removed by hand. */
  function reducedBank(): CovarianceBank {
    const m = kept.length;
    const bank = new CovarianceBank(m, freqsHz.length);
    matrices.forEach((r, b) => {
      const o = bank.matrixOffset(b);
      for (let i = 0; i < m; i++) {
        for (let j = 0; j < m; j++) {
          bank.data[o + (i * m + j) * 2] = r[(kept[i] * M + kept[j]) * 2];
          bank.data[o + (i * m + j) * 2 + 1] = r[(kept[i] * M + kept[j]) * 2 + 1];
        }
      }
    });
    return bank;
  }

  const specs: [string, LoadingSpec, number | null | undefined][] = [
    ['relative 0.01', { mode: 'relative', ratio: 0.01 }, undefined],
    ['fixed 0', { mode: 'fixed', delta: 0 }, undefined],
    ['wng floor 3 dB, look at the conventional peak', { mode: 'wng', floorDb: 3 }, null],
    ['wng floor 3 dB, look at direction 40', { mode: 'wng', floorDb: 3 }, 40],
  ];

  it.each(specs)('scanning with channels masked equals an array built without them (%s, 1e-12)', (_name, loading, look) => {
    const B = freqsHz.length;
    const D = grid.count;
    const run = (table: SteeringTable, bank: CovarianceBank, scanner = new SpectrumScanner(table)) => {
      const conventional = new Float64Array(B * D);
      const mvdr = new Float64Array(B * D);
      const loadingDelta = new Float64Array(B);
      scanner.scan(bank, { loading, wngLookDirection: look }, { conventional, mvdr, loadingDelta });
      return { conventional, mvdr, loadingDelta };
    };
    const fullTable = new SteeringTable({ positions, grid, freqsHz, speedOfSoundMps: C });
    const scanner = new SpectrumScanner(fullTable);
    const bank = fullBank();
    const before = Float64Array.from(bank.data);
    const unmasked = run(fullTable, bank, scanner);
    bank.setMask(mask);
    const masked = run(fullTable, bank, scanner);
    const reduced = run(new SteeringTable({ positions: kept.map((i) => positions[i]), grid, freqsHz, speedOfSoundMps: C }), reducedBank());
    for (const key of ['conventional', 'mvdr', 'loadingDelta'] as const) {
      const a = masked[key];
      const b = reduced[key];
      for (let i = 0; i < a.length; i++) expect(Math.abs(a[i] - b[i]), `${key}[${i}]`).toBeLessThanOrEqual(1e-12 * Math.abs(b[i]));
    }
    // Unmasking again re-plans the same scanner back to the full array.
    bank.setMask(new Array<boolean>(M).fill(true));
    const again = run(fullTable, bank, scanner);
    expect(again.conventional).toEqual(unmasked.conventional);
    expect(again.mvdr).toEqual(unmasked.mvdr);
    expect(bank.data).toEqual(before);
  });
});

describe('combineBroadband', () => {
  // Two bins × three directions, bin-major.
  const perBin = Float64Array.from([1, 2, 4, 3, 0, 1]);

  it('takes the plain mean over bins', () => {
    const out = new Float64Array(3);
    combineBroadband(out, perBin, 2, 3);
    // (1 + 3)/2, (2 + 0)/2, (4 + 1)/2
    expect(Array.from(out)).toEqual([2, 1, 2.5]);
  });

  it('normalises each bin by its maximum over directions before averaging', () => {
    const out = new Float64Array(3);
    combineBroadband(out, perBin, 2, 3, true);
    // bin 0 / 4 = [0.25, 0.5, 1], bin 1 / 3 = [1, 0, 1/3]; mean = [0.625, 0.25, 2/3]
    const want = [0.625, 0.25, 2 / 3];
    for (let d = 0; d < 3; d++) expect(out[d]).toBeCloseTo(want[d], 15);
  });

  it('gives an all-zero bin no weight when normalising, and overwrites stale output', () => {
    const out = Float64Array.from([9, 9, 9]);
    combineBroadband(out, Float64Array.from([0, 0, 0, 2, 4, 1]), 2, 3, true);
    // bin 0 contributes nothing; bin 1 / 4 = [0.5, 1, 0.25], divided by the bin count 2.
    const want = [0.25, 0.5, 0.125];
    for (let d = 0; d < 3; d++) expect(out[d]).toBeCloseTo(want[d], 15);
  });
});

describe('powerToDb', () => {
  it('is 10·log10 of each element with −300 dB for zero', () => {
    const out = new Float64Array(5);
    powerToDb(out, Float64Array.from([1, 10, 1e-3, 0, 2]));
    expect(out[0]).toBe(0);
    expect(out[1]).toBe(10);
    expect(out[2]).toBeCloseTo(-30, 12);
    expect(out[3]).toBe(-300);
    expect(out[4]).toBeCloseTo(3.010299956639812, 12);
  });

  it('may write in place', () => {
    const x = Float64Array.from([100, 0.5]);
    powerToDb(x, x);
    expect(x[0]).toBe(20);
    expect(x[1]).toBeCloseTo(-3.010299956639812, 12);
  });
});
