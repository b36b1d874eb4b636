/**
 * Steering-vector convention, checked end to end with a simulated plane wave through the STFT,
 * against the closed-form uniform-line-array response, and against direct geometry for near-field
 * focusing. Also the unit conversions and aliasing limit whose values come from ../shared/CHECKS.md.
 */
import { describe, expect, it } from 'vitest';
import { Stft } from '../../server/dsp/stft.ts';
import {
  SteeringTable, aliasingCheck, aliasingLimitHz, directionGrid, flattenPositions, steeringVector,
} from '../../server/dsp/steering.ts';
import {
  db10, degToRad, fromDb10, lambdaFromTau, radToDeg, speedOfSoundFromTemperature, tauFromLambda,
} from '../../server/dsp/units.ts';

const C = 343.2;

/** An irregular 3-D array (metres), so no symmetry hides a sign error in any coordinate. */
const IRREGULAR: [number, number, number][] = [
  [0, 0, 0], [0.05, 0.01, 0], [-0.03, 0.04, 0.01], [0.02, -0.05, -0.02],
  [-0.04, -0.02, 0.03], [0.06, 0.05, 0.02], [-0.01, 0.07, -0.03],
];

/** Unit vector toward the source, written out here independently of steering.ts. */
function towardSource(azDeg: number, elDeg: number): [number, number, number] {
  const az = (azDeg * Math.PI) / 180;
  const el = (elDeg * Math.PI) / 180;
  return [Math.cos(el) * Math.cos(az), Math.cos(el) * Math.sin(az), Math.sin(el)];
}

/**
 * Simulate the plane wave x_m(t) = s(t − τ_m), τ_m = −(p_m·u)/c, for the complex tone
 * s(t) = e^{j(2πft + φ0)}, and analyse it. The real STFT is linear, so analysing the real and
 * imaginary parts separately and combining X_re + j·X_im gives the spectrum of the complex tone;
 * at a bin centre that is exactly W(0)·e^{jφ0}·e^{−j2πfτ_m}, with no leakage from the negative-
 * frequency image that a real tone would add (≈ 1/(16k²) relative at bin k: 8e-5 rad of phase
 * between channels at bin 40, far above the 1e-9 rad tolerance).
 */
function simulateSnapshot(positions: [number, number, number][], azDeg: number, elDeg: number, n: number, bin: number, fs: number) {
  const stft = new Stft(n);
  const f = stft.binFrequencyHz(bin, fs);
  const u = towardSource(azDeg, elDeg);
  const re = new Float64Array(n);
  const im = new Float64Array(n);
  const sRe = new Float64Array(2 * stft.bins);
  const sIm = new Float64Array(2 * stft.bins);
  const analytic = new Float64Array(2 * positions.length);
  const real = new Float64Array(2 * positions.length);
  positions.forEach(([x, y, z], m) => {
    const tauS = -(x * u[0] + y * u[1] + z * u[2]) / C;
    for (let i = 0; i < n; i++) {
      const phase = 2 * Math.PI * f * (i / fs - tauS) + 0.7;
      re[i] = Math.cos(phase);
      im[i] = Math.sin(phase);
    }
    stft.analyze(sRe, re);
    stft.analyze(sIm, im);
    analytic[2 * m] = sRe[2 * bin] - sIm[2 * bin + 1];
    analytic[2 * m + 1] = sRe[2 * bin + 1] + sIm[2 * bin];
    real[2 * m] = sRe[2 * bin];
    real[2 * m + 1] = sRe[2 * bin + 1];
  });
  return { f, analytic, real };
}

describe('sign convention: simulated plane wave through the STFT', () => {
  const fs = 48000;
  const n = 1024;
  const bin = 40; // 1875 Hz
  for (const [azDeg, elDeg] of [[30, 0], [120, 40], [250, -25]]) {
    it(`az ${azDeg}° el ${elDeg}°: X_m(f) ∝ v_m(f) to < 1e-9 rad`, () => {
      const { f, analytic } = simulateSnapshot(IRREGULAR, azDeg, elDeg, n, bin, fs);
      const v = new Float64Array(2 * IRREGULAR.length);
      steeringVector(v, flattenPositions(IRREGULAR), degToRad(azDeg), degToRad(elDeg), f, C);
      // Ratio X_m / v_m must be the same complex number for every m; compare with m = 0.
      const ratio = (m: number) => {
        const [xr, xi, vr, vi] = [analytic[2 * m], analytic[2 * m + 1], v[2 * m], v[2 * m + 1]];
        return [xr * vr + xi * vi, xi * vr - xr * vi]; // x · conj(v), |v| = 1
      };
      const [r0, i0] = ratio(0);
      for (let m = 1; m < IRREGULAR.length; m++) {
        const [rm, im] = ratio(m);
        const phaseErr = Math.atan2(im * r0 - rm * i0, rm * r0 + im * i0);
        expect(Math.abs(phaseErr)).toBeLessThan(1e-9);
        expect(Math.hypot(rm, im) / Math.hypot(r0, i0)).toBeCloseTo(1, 9);
      }
    });
  }

  it('delay-and-sum power |vᴴx|² over azimuth 0–359° peaks exactly at the source, 30°', () => {
    const ring: [number, number, number][] = Array.from({ length: 8 }, (_, m) => [
      0.06 * Math.cos((2 * Math.PI * m) / 8), 0.06 * Math.sin((2 * Math.PI * m) / 8), 0,
    ]);
    const { f, analytic, real } = simulateSnapshot(ring, 30, 0, n, bin, fs);
    const grid = directionGrid({ azimuthDeg: { startDeg: 0, stopDeg: 359, stepDeg: 1 } });
    const table = new SteeringTable({ positions: ring, grid, freqsHz: [f], speedOfSoundMps: C });
    for (const x of [analytic, real]) {
      let best = -1;
      let bestPower = -Infinity;
      for (let d = 0; d < grid.count; d++) {
        const o = table.offset(0, d);
        let re = 0;
        let im = 0;
        for (let m = 0; m < ring.length; m++) {
          const [vr, vi] = [table.data[o + 2 * m], table.data[o + 2 * m + 1]];
          re += vr * x[2 * m] + vi * x[2 * m + 1]; // conj(v)·x
          im += vr * x[2 * m + 1] - vi * x[2 * m];
        }
        const power = re * re + im * im;
        if (power > bestPower) [best, bestPower] = [d, power];
      }
      expect(grid.azimuthDeg[best]).toBe(30);
    }
  });
});

describe('uniform line array conventional response', () => {
  // B(u) = sin(Nπu/2)/(N sin(πu/2)) at d = λ/2 (H. L. Van Trees, Optimum Array Processing,
  // Wiley 2002, ch. 2, from memory). Array along x, so u = cos(az) is the direction cosine
  // along the axis (sin of the angle from broadside).
  const f = 2000;
  const spacingM = C / f / 2;
  const closedForm = (du: number, n: number) =>
    Math.abs(Math.sin(Math.PI * du / 2)) < 1e-14 ? 1 : Math.abs(Math.sin((n * Math.PI * du) / 2) / (n * Math.sin((Math.PI * du) / 2)));

  for (const n of [8, 10, 16]) {
    it(`N = ${n}: |v(u0)ᴴv(u)|/N matches the closed form to 1e-12`, () => {
      const positions = new Float64Array(3 * n);
      for (let m = 0; m < n; m++) positions[3 * m] = m * spacingM;
      const v0 = new Float64Array(2 * n);
      const v = new Float64Array(2 * n);
      for (const u0 of [0, 0.3]) {
        steeringVector(v0, positions, Math.acos(u0), 0, f, C);
        let worst = 0;
        for (let i = 0; i <= 2000; i++) {
          const u = -1 + i / 1000;
          steeringVector(v, positions, Math.acos(u), 0, f, C);
          let re = 0;
          let im = 0;
          for (let m = 0; m < n; m++) {
            re += v0[2 * m] * v[2 * m] + v0[2 * m + 1] * v[2 * m + 1];
            im += v0[2 * m] * v[2 * m + 1] - v0[2 * m + 1] * v[2 * m];
          }
          worst = Math.max(worst, Math.abs(Math.hypot(re, im) / n - closedForm(u - u0, n)));
        }
        expect(worst).toBeLessThan(1e-12);
      }
      // First null at u = 2/N (CHECKS.md).
      steeringVector(v0, positions, Math.PI / 2, 0, f, C);
      steeringVector(v, positions, Math.acos(2 / n), 0, f, C);
      let re = 0;
      let im = 0;
      for (let m = 0; m < n; m++) {
        re += v0[2 * m] * v[2 * m] + v0[2 * m + 1] * v[2 * m + 1];
        im += v0[2 * m] * v[2 * m + 1] - v0[2 * m + 1] * v[2 * m];
      }
      expect(Math.hypot(re, im) / n).toBeLessThan(1e-12);
    });
  }
});

describe('near-field focusing', () => {
  const flat = flattenPositions(IRREGULAR);
  const m = IRREGULAR.length;

  it('tends to the far-field vector as the range grows (difference < 1e-6 at 1e6 m)', () => {
    const far = new Float64Array(2 * m);
    const near = new Float64Array(2 * m);
    for (const [az, el] of [[0.3, 0.1], [2.5, -0.6]]) {
      steeringVector(far, flat, az, el, 4000, C);
      const diff = (r: number) => {
        steeringVector(near, flat, az, el, 4000, C, r);
        return Math.max(...Array.from(far, (x, i) => Math.abs(x - near[i])));
      };
      expect(diff(1e6)).toBeLessThan(1e-6);
      expect(diff(1e4)).toBeLessThan(diff(1e2));
    }
  });

  it('at 1 m: delays and spreading match the direct distances', () => {
    const grid = directionGrid({ azimuthDeg: { startDeg: 0, stopDeg: 300, stepDeg: 60 }, elevationDeg: { startDeg: -30, stopDeg: 30, stepDeg: 30 } });
    const table = new SteeringTable({ positions: IRREGULAR, grid, freqsHz: [500, 3000], speedOfSoundMps: C, focusRangeM: 1 });
    for (let d = 0; d < grid.count; d++) {
      const [ux, uy, uz] = towardSource(grid.azimuthDeg[d], grid.elevationDeg[d]);
      IRREGULAR.forEach(([x, y, z], i) => {
        const distM = Math.hypot(ux - x, uy - y, uz - z);
        const tauS = (distM - 1) / C;
        expect(table.delaysS[d * m + i]).toBeCloseTo(tauS, 15);
        expect(table.gains[d * m + i]).toBeCloseTo(1 / distM, 14);
        const o = table.offset(1, d) + 2 * i;
        expect(table.data[o]).toBeCloseTo(Math.cos(-2 * Math.PI * 3000 * tauS) / distM, 12);
        expect(table.data[o + 1]).toBeCloseTo(Math.sin(-2 * Math.PI * 3000 * tauS) / distM, 12);
      });
    }
    expect(() => steeringVector(new Float64Array(2 * m), flat, 0, 0, 1000, C, 0)).toThrow(/focusRangeM/);
  });
});

describe('SteeringTable', () => {
  it('holds the same vectors as steeringVector, in the ((b·D + d)·M + m)·2 layout', () => {
    const grid = directionGrid({ azimuthDeg: { startDeg: 0, stopDeg: 350, stepDeg: 10 }, elevationDeg: { startDeg: 0, stopDeg: 60, stepDeg: 30 } });
    const freqsHz = [375, 1000, 5812.5];
    const table = new SteeringTable({ positions: IRREGULAR, grid, freqsHz, speedOfSoundMps: C });
    const m = IRREGULAR.length;
    expect([table.bins, table.directions, table.channels]).toEqual([3, grid.count, m]);
    expect(table.data.length).toBe(3 * grid.count * m * 2);
    const v = new Float64Array(2 * m);
    for (let b = 0; b < 3; b++) {
      for (let d = 0; d < grid.count; d++) {
        steeringVector(v, table.positionsM, degToRad(grid.azimuthDeg[d]), degToRad(grid.elevationDeg[d]), freqsHz[b], C);
        expect(table.offset(b, d)).toBe(((b * grid.count + d) * m) * 2);
        for (let i = 0; i < 2 * m; i++) expect(table.data[table.offset(b, d) + i]).toBeCloseTo(v[i], 14);
      }
    }
  });

  it('refuses a table above 512 MiB before allocating it', () => {
    const grid = directionGrid({ azimuthDeg: { startDeg: 0, stopDeg: 359, stepDeg: 0.01 } });
    const positions = Array.from({ length: 64 }, (_, i) => [i * 0.01, 0, 0] as [number, number, number]);
    const freqsHz = new Float64Array(2049);
    expect(() => new SteeringTable({ positions, grid, freqsHz, speedOfSoundMps: C })).toThrow(/MiB/);
  });
});

describe('direction grids', () => {
  it('counts inclusive stops and orders azimuth fastest', () => {
    expect(directionGrid({ azimuthDeg: { startDeg: 0, stopDeg: 359, stepDeg: 1 } }).count).toBe(360);
    expect(directionGrid({ azimuthDeg: { startDeg: 0, stopDeg: 180, stepDeg: 1 } }).count).toBe(181);
    const g = directionGrid({ azimuthDeg: { startDeg: 0, stopDeg: 355, stepDeg: 5 }, elevationDeg: { startDeg: 0, stopDeg: 90, stepDeg: 5 } });
    expect([g.nAz, g.nEl, g.count]).toEqual([72, 19, 72 * 19]);
    expect([g.azimuthDeg[73], g.elevationDeg[73]]).toEqual([5, 5]); // index = iEl·nAz + iAz
    expect(directionGrid({ azimuthDeg: { startDeg: 0, stopDeg: 1, stepDeg: 0.1 } }).count).toBe(11);
  });

  it('validates steps, elevation range and size', () => {
    expect(() => directionGrid({ azimuthDeg: { startDeg: 0, stopDeg: 10, stepDeg: 0 } })).toThrow(/azimuthDeg.stepDeg/);
    expect(() => directionGrid({ azimuthDeg: { startDeg: 0, stopDeg: 10, stepDeg: 1 }, elevationDeg: { startDeg: 0, stopDeg: 95, stepDeg: 5 } })).toThrow(/elevationDeg.stopDeg/);
    expect(() => directionGrid({ azimuthDeg: { startDeg: 0, stopDeg: 359, stepDeg: 0.001 } })).toThrow(RangeError);
  });
});

describe('spatial aliasing limit', () => {
  const line8 = Array.from({ length: 8 }, (_, i) => [i * 0.04, 0, 0] as [number, number, number]);
  it('8-mic line at 4 cm, c = 343.2 m/s → 4290 Hz; exceeded for a 6000 Hz band top', () => {
    expect(aliasingLimitHz(line8, C)).toBeCloseTo(4290, 9);
    const over = aliasingCheck(line8, C, 6000);
    expect(over.exceeded).toBe(true);
    expect(over.message).toMatch(/4290 Hz/);
    expect(aliasingCheck(line8, C, 4000)).toMatchObject({ exceeded: false, message: null });
    expect(aliasingLimitHz([[0, 0, 0]], C)).toBe(Infinity);
  });
});

describe('units', () => {
  it('speed of sound at 20 °C is 343.2 ± 0.05 m/s (CHECKS.md, common practice)', () => {
    expect(Math.abs(speedOfSoundFromTemperature(20) - 343.2)).toBeLessThan(0.05);
    expect(() => speedOfSoundFromTemperature(-300)).toThrow(/tempC/);
  });

  it('λ = 0.99, hop 256, fs 48 kHz ↔ τ = 0.5333 s (CHECKS.md)', () => {
    expect(tauFromLambda(0.99, 256, 48000)).toBeCloseTo(0.5333, 4);
    expect(lambdaFromTau(tauFromLambda(0.99, 256, 48000), 256, 48000)).toBeCloseTo(0.99, 14);
    expect(() => tauFromLambda(1, 256, 48000)).toThrow(/lambda/);
    expect(() => lambdaFromTau(0.001, 256, 48000)).toThrow(/tauS/);
  });

  it('dB and angle conversions', () => {
    expect(db10(100)).toBeCloseTo(20, 14);
    expect(db10(0)).toBe(-300);
    expect(fromDb10(-10)).toBeCloseTo(0.1, 15);
    expect(() => db10(-1)).toThrow(/x must be/);
    expect(radToDeg(degToRad(30))).toBeCloseTo(30, 13);
  });
});
