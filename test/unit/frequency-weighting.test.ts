/**
 * shared/frequency-weighting.ts against IEC 61672-1:2013, Table 3 ("Frequency weightings and
 * acceptance limits"): the A and C design goals at the one-third-octave nominal frequencies 10 Hz …
 * 20 kHz, rounded to 0.1 dB, and the class 1 acceptance limits. All table values from memory; the
 * weighting values were recomputed here with numpy from the Annex E expressions and agree with the
 * recalled table to its rounding. The table's values belong to the exact base-ten mid-band
 * frequencies 1000·10^(n/10) Hz (the nominal frequency is a rounded label: "31.5 Hz" is 31.62 Hz).
 */
import { describe, expect, it } from 'vitest';
import {
  A1000_DB,
  C1000_DB,
  F1_HZ,
  F2_HZ,
  F3_HZ,
  F4_HZ,
  weightingDb,
  weightingPowerGains,
} from '../../shared/frequency-weighting.ts';

// [nominal Hz, A dB, C dB, class 1 limit +dB, class 1 limit −dB (Infinity = no lower limit)]
// IEC 61672-1:2013 Table 3, from memory.
const TABLE3: readonly (readonly [number, number, number, number, number])[] = [
  [10, -70.4, -14.3, 3.0, Infinity],
  [12.5, -63.4, -11.2, 2.5, Infinity],
  [16, -56.7, -8.5, 2.0, 4.0],
  [20, -50.5, -6.2, 2.0, 2.0],
  [25, -44.7, -4.4, 2.0, 1.5],
  [31.5, -39.4, -3.0, 1.5, 1.5],
  [40, -34.6, -2.0, 1.0, 1.0],
  [50, -30.2, -1.3, 1.0, 1.0],
  [63, -26.2, -0.8, 1.0, 1.0],
  [80, -22.5, -0.5, 1.0, 1.0],
  [100, -19.1, -0.3, 1.0, 1.0],
  [125, -16.1, -0.2, 1.0, 1.0],
  [160, -13.4, -0.1, 1.0, 1.0],
  [200, -10.9, 0.0, 1.0, 1.0],
  [250, -8.6, 0.0, 1.0, 1.0],
  [315, -6.6, 0.0, 1.0, 1.0],
  [400, -4.8, 0.0, 1.0, 1.0],
  [500, -3.2, 0.0, 1.0, 1.0],
  [630, -1.9, 0.0, 1.0, 1.0],
  [800, -0.8, 0.0, 0.7, 0.7],
  [1000, 0.0, 0.0, 0.7, 0.7],
  [1250, 0.6, 0.0, 0.7, 0.7],
  [1600, 1.0, -0.1, 1.0, 1.0],
  [2000, 1.2, -0.2, 1.0, 1.0],
  [2500, 1.3, -0.3, 1.0, 1.0],
  [3150, 1.2, -0.5, 1.0, 1.0],
  [4000, 1.0, -0.8, 1.0, 1.0],
  [5000, 0.5, -1.3, 1.5, 1.5],
  [6300, -0.1, -2.0, 1.5, 2.0],
  [8000, -1.1, -3.0, 1.5, 2.5],
  [10000, -2.5, -4.4, 2.0, 3.0],
  [12500, -4.3, -6.2, 2.0, 5.0],
  [16000, -6.6, -8.5, 2.5, 16.0],
  [20000, -9.3, -11.2, 3.0, Infinity],
];

/** Exact base-ten mid-band frequency of table row i (row 20 is 1 kHz): 1000·10^((i − 20)/10) Hz. */
function exactHz(i: number): number {
  return 1000 * 10 ** ((i - 20) / 10);
}

describe('IEC 61672-1 frequency weightings', () => {
  it('has the Annex E pole frequencies and 1 kHz normalisations (IEC 61672-1:2013 Annex E, from memory)', () => {
    // Standard's rounded values: f1 = 20.598 997, f2 = 107.652 65, f3 = 737.862 23, f4 = 12 194.217 Hz.
    expect(F1_HZ).toBeCloseTo(20.598997, 5);
    expect(F2_HZ).toBeCloseTo(107.65265, 4);
    expect(F3_HZ).toBeCloseTo(737.86223, 4);
    expect(F4_HZ).toBeCloseTo(12194.217, 2);
    // A1000 = −2.000 dB, C1000 = −0.062 dB (rounded in the standard).
    expect(Math.abs(A1000_DB - -2.0)).toBeLessThan(0.0005);
    expect(Math.abs(C1000_DB - -0.062)).toBeLessThan(0.0005);
  });

  it('is 0 dB at 1 kHz for A and C, and Z is 0 dB everywhere', () => {
    expect(weightingDb('A', 1000)).toBeCloseTo(0, 12);
    expect(weightingDb('C', 1000)).toBeCloseTo(0, 12);
    for (const f of [0, 1, 10, 31.5, 1000, 12345.6, 20000, 96000]) expect(weightingDb('Z', f)).toBe(0);
    expect(weightingDb('A', 0)).toBe(-Infinity);
    expect(weightingDb('C', 0)).toBe(-Infinity);
  });

  it('matches Table 3 of IEC 61672-1:2013 to its 0.1 dB rounding at the exact mid-band frequencies', () => {
    TABLE3.forEach(([, aDb, cDb], i) => {
      const f = exactHz(i);
      // Rounded to 0.1 dB in the table: at most 0.05 dB away (plus a hair for the table's own rounding).
      expect(Math.abs(weightingDb('A', f) - aDb), `A at ${f.toFixed(2)} Hz`).toBeLessThanOrEqual(0.051);
      expect(Math.abs(weightingDb('C', f) - cDb), `C at ${f.toFixed(2)} Hz`).toBeLessThanOrEqual(0.051);
    });
  });

  it('lies within the class 1 acceptance limits of Table 3 at the nominal and the exact frequencies', () => {
    TABLE3.forEach(([nominalHz, aDb, cDb, plusDb, minusDb], i) => {
      for (const f of [nominalHz, exactHz(i)]) {
        const a = weightingDb('A', f) - aDb;
        const c = weightingDb('C', f) - cDb;
        expect(a, `A at ${f} Hz`).toBeLessThanOrEqual(plusDb);
        expect(a, `A at ${f} Hz`).toBeGreaterThanOrEqual(-minusDb);
        expect(c, `C at ${f} Hz`).toBeLessThanOrEqual(plusDb);
        expect(c, `C at ${f} Hz`).toBeGreaterThanOrEqual(-minusDb);
      }
    });
  });

  it('gives the values of shared/CHECKS.md at the nominal frequencies (recomputed with numpy there)', () => {
    const a: [number, number][] = [[31.5, -39.5], [63, -26.2], [125, -16.2], [250, -8.7], [500, -3.2], [2000, 1.2], [4000, 1.0], [8000, -1.1], [16000, -6.7]];
    const c: [number, number][] = [[31.5, -3.0], [63, -0.8], [4000, -0.8], [8000, -3.0], [16000, -8.6]];
    for (const [f, db] of a) expect(Math.abs(weightingDb('A', f) - db), `A at ${f} Hz`).toBeLessThanOrEqual(0.05);
    for (const [f, db] of c) expect(Math.abs(weightingDb('C', f) - db), `C at ${f} Hz`).toBeLessThanOrEqual(0.05);
  });

  it('gives per-bin power gains 10^(dB/10) at k·fs/N', () => {
    const n = 1024;
    const fs = 48000;
    for (const kind of ['A', 'C', 'Z'] as const) {
      const gains = weightingPowerGains(kind, n, fs, 0, n / 2 + 1);
      expect(gains.length).toBe(n / 2 + 1);
      for (let k = 0; k <= n / 2; k++) {
        const expected = 10 ** (weightingDb(kind, (k * fs) / n) / 10);
        expect(Math.abs(gains[k] - expected)).toBeLessThanOrEqual(1e-12 * Math.max(1, expected));
      }
      const part = weightingPowerGains(kind, n, fs, 10, 20);
      expect(Array.from(part)).toEqual(Array.from(gains.subarray(10, 30)));
    }
    expect(weightingPowerGains('A', n, fs, 0, 1)[0]).toBe(0); // DC
    expect(weightingPowerGains('Z', n, fs, 5, 0).length).toBe(0);
  });

  it('refuses unknown kinds and out-of-range sizes with clear errors', () => {
    expect(() => weightingDb('B' as never, 1000)).toThrow(TypeError);
    expect(() => weightingDb('A', -1)).toThrow(RangeError);
    expect(() => weightingDb('A', Number.NaN)).toThrow(RangeError);
    expect(() => weightingDb('C', Infinity)).toThrow(RangeError);
    expect(() => weightingPowerGains('A', 0, 48000, 0, 1)).toThrow(RangeError);
    expect(() => weightingPowerGains('A', 1024.5, 48000, 0, 1)).toThrow(RangeError);
    expect(() => weightingPowerGains('A', 1024, 0, 0, 1)).toThrow(RangeError);
    expect(() => weightingPowerGains('A', 1024, 48000, -1, 1)).toThrow(RangeError);
    expect(() => weightingPowerGains('A', 1024, 48000, 0, 514)).toThrow(RangeError);
    expect(() => weightingPowerGains('A', 1024, 48000, 500, 13)).not.toThrow();
    expect(() => weightingPowerGains('A', 1024, 48000, 500, 14)).toThrow(RangeError);
    expect(() => weightingPowerGains('X' as never, 1024, 48000, 0, 1)).toThrow(TypeError);
  });
});

describe('IEC 61672-1 frequency weightings at extreme frequencies', () => {
  it('stays finite and falls off without overflow far above the audio band', () => {
    // Above f4 both weightings fall at 12 dB per octave (two poles at f4; from the Annex E form).
    const drop = weightingDb('A', 2e6) - weightingDb('A', 1e6);
    expect(drop).toBeCloseTo(-12.04, 1);
    for (const f of [1e9, 1e30, 1e200, Number.MAX_VALUE]) {
      expect(Number.isNaN(weightingDb('A', f))).toBe(false);
      expect(Number.isNaN(weightingDb('C', f))).toBe(false);
      expect(weightingDb('A', f)).toBeLessThan(-100);
    }
    expect(weightingDb('A', 1e-9)).toBeLessThan(-300); // rises at 24 dB per octave from DC
  });
});
