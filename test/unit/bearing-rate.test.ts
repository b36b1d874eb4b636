/**
 * shared/bearing-rate.ts: the least-squares slope of a synthetic straight bearing track (the exact
 * slope is known by construction), wrap-around at 0°/360°, gating and time from sample indices.
 */
import { describe, expect, it } from 'vitest';
import { BearingRateTracker, wrapDeg180 } from '../../shared/bearing-rate.ts';
import { mulberry32 } from '../helpers/random.ts';

const FS = 48000;

describe('BearingRateTracker', () => {
  it('recovers a constant rate through 0°/360° from the rows\' sample indices, with a distractor peak', () => {
    const t = new BearingRateTracker({ sampleRateHz: FS, windowS: 5 });
    // −4°/s from 10° downwards: crosses 0° into 350°…; rows at irregular sample spacing.
    let s = 1_000_000;
    const rnd = mulberry32(3);
    for (let k = 0; k < 80; k++) {
      s += 2400 + Math.floor(rnd() * 2000);
      const az = (((10 - (4 * (s - 1_000_000)) / FS) % 360) + 360) % 360;
      t.push(s, [{ azimuthDeg: az, levelDb: -20 }, { azimuthDeg: 200, levelDb: -25 }]);
    }
    const r = t.rate()!;
    expect(r.rateDegPerS).toBeCloseTo(-4, 6);
    expect(r.spanS).toBeLessThanOrEqual(5);
    expect(r.points).toBeGreaterThan(40);
  });
  it('least squares over noisy bearings: slope within the known bound', () => {
    const t = new BearingRateTracker({ sampleRateHz: FS, windowS: 10, capacity: 4096 });
    const rnd = mulberry32(9);
    for (let k = 0; k < 200; k++) t.push(k * 2400, [{ azimuthDeg: 100 + 2 * (k * 0.05) + (rnd() - 0.5), levelDb: 0 }]);
    // 200 points at 0.05 s, uniform ±0.5° noise: σ_slope = σ/√Σ(t−t̄)² ≈ 0.29/√(200·0.05²·(200²−1)/12) ≈ 0.0035 °/s
    expect(Math.abs(t.rate()!.rateDegPerS - 2)).toBeLessThan(0.02);
  });
  it('follows the strongest peak, not a weaker one that appears later; drops the track after maxMisses', () => {
    const t = new BearingRateTracker({ sampleRateHz: FS, maxMisses: 2, minPoints: 2 });
    t.push(0, [{ azimuthDeg: 50, levelDb: -10 }, { azimuthDeg: 120, levelDb: -30 }]);
    t.push(4800, [{ azimuthDeg: 51, levelDb: -40 }, { azimuthDeg: 121, levelDb: -5 }]);
    expect(t.rate()!.azimuthDeg).toBeCloseTo(51, 9);
    for (let k = 2; k <= 4; k++) t.push(4800 * k, [{ azimuthDeg: 121, levelDb: -5 }]);
    expect(t.rate()).toBeNull(); // dropped; the next row starts afresh
    t.push(4800 * 5, [{ azimuthDeg: 121, levelDb: -5 }]);
    t.push(4800 * 6, [{ azimuthDeg: 122, levelDb: -5 }]);
    expect(t.rate()!.rateDegPerS).toBeCloseTo(10, 9);
  });
  it('a row going back in time resets; a repeated index is ignored', () => {
    const t = new BearingRateTracker({ sampleRateHz: FS, minPoints: 2 });
    t.push(100_000, [{ azimuthDeg: 10, levelDb: 0 }]);
    t.push(100_000, [{ azimuthDeg: 12, levelDb: 0 }]);
    expect(t.rate()).toBeNull();
    t.push(50_000, [{ azimuthDeg: 10, levelDb: 0 }]);
    t.push(98_000, [{ azimuthDeg: 11, levelDb: 0 }]);
    expect(t.rate()!.rateDegPerS).toBeCloseTo(1, 9);
  });
  it('wrapDeg180', () => {
    expect(wrapDeg180(350)).toBe(-10);
    expect(wrapDeg180(-190)).toBe(170);
    expect(wrapDeg180(180)).toBe(180);
  });
});
