/**
 * The peak figures an edge publishes for the site (server/cluster/peak-figures.ts): the width 3 dB
 * below the top on the row's MVDR spectrum (wrapping round a closed azimuth circle), the floor as the
 * median of the spectrum, and the turn into the site frame by the array's pose.
 */
import { describe, expect, it } from 'vitest';
import { azimuthAxis, medianDb, nearestIndex, peakWidthDeg, sitePeaks } from '../../server/cluster/peak-figures.ts';

/** Uniform linear array power pattern |B(u)|², B(u) = sin(Nπu/2) / (N sin(πu/2)) (Van Trees 2002 ch. 2, from memory). */
function ulaPatternDb(n: number, u: number): number {
  const den = n * Math.sin((Math.PI * u) / 2);
  const b = Math.abs(den) < 1e-12 ? 1 : Math.sin((n * Math.PI * u) / 2) / den;
  return 10 * Math.log10(Math.max(b * b, 1e-30));
}

describe('peak width at −3 dB', () => {
  it('matches the half-power beamwidth of a 10-element ULA at broadside, 0.178 in u (CHECKS.md: 0.891·2/N, Van Trees 2002, from memory)', () => {
    // The axis is u from −1 to 1 in steps of 0.0005 (open: no wrap); the width comes out in u.
    const stepU = 0.0005;
    const nAz = Math.round(2 / stepU) + 1;
    const db = new Float64Array(nAz);
    for (let i = 0; i < nAz; i++) db[i] = ulaPatternDb(10, -1 + i * stepU);
    const axis = { startDeg: -1, stepDeg: stepU, nAz, wraps: false };
    const w = peakWidthDeg(db, axis, nearestIndex(0, -1, stepU, nAz, false), 0);
    expect(w).toBeCloseTo(0.178, 3);
  });

  it('reads a triangular dB peak exactly (slope s dB/°: width 6/s), and the same across the 0°/360° seam', () => {
    // By construction: linear interpolation in dB is exact on straight sides.
    const slope = 0.8;
    const make = (centre: number) => {
      const db = new Float64Array(360);
      for (let i = 0; i < 360; i++) {
        let k = Math.abs(i - centre) % 360;
        if (k > 180) k = 360 - k;
        db[i] = -10 - slope * k;
      }
      return db;
    };
    const axis = azimuthAxis(Float64Array.from({ length: 360 }, (_, i) => i), 360);
    expect(axis.wraps).toBe(true);
    expect(peakWidthDeg(make(180), axis, 180, 0)).toBeCloseTo(6 / slope, 9);
    expect(peakWidthDeg(make(0), axis, 0, 0)).toBeCloseTo(6 / slope, 9);
    expect(peakWidthDeg(make(358), axis, 358, 0)).toBeCloseTo(6 / slope, 9);
    // A flat spectrum is above the threshold all round.
    expect(peakWidthDeg(new Float64Array(360).fill(-20), axis, 10, 0)).toBe(360);
  });

  it('stops at the end of an open axis (a half-circle grid) and measures on the peak’s own elevation row', () => {
    const nAz = 181;
    const nEl = 2;
    const db = new Float64Array(nAz * nEl).fill(-60);
    for (let i = 0; i < nAz; i++) db[nAz + i] = -10 - 0.5 * i; // second row: top at 0°, falling 0.5 dB/°
    const axis = azimuthAxis(Float64Array.from({ length: nAz }, (_, i) => i), nAz);
    expect(axis.wraps).toBe(false);
    expect(peakWidthDeg(db, axis, 0, 1)).toBeCloseTo(6, 9); // one side only: 3 dB / 0.5 dB/°
  });
});

describe('floor and site frame', () => {
  it('takes the median of the finite values (even count: mean of the two middle ones)', () => {
    const s = new Float64Array(8);
    expect(medianDb([1, 5, 3, 2], s)).toBe(2.5);
    expect(medianDb([4, Number.NaN, 1, 9], s)).toBe(4);
    expect(Number.isNaN(medianDb([Number.NaN], s))).toBe(true);
  });

  it('gives level above the floor, width, and site azimuth = array azimuth + heading (elevation unchanged); no pose, no site angles', () => {
    const nAz = 72;
    const az = Float64Array.from({ length: nAz }, (_, i) => i * 5);
    const el = new Float64Array(nAz);
    const db = new Float64Array(nAz).fill(-40);
    // A triangular peak at 300° (index 60), 2 dB per 5° step: width 2·(3/2)·5 = 15°.
    for (let k = -5; k <= 5; k++) db[(60 + k + nAz) % nAz] = -20 - 2 * Math.abs(k);
    const pose = { positionM: [10, 20, 2] as [number, number, number], headingDeg: 90 };
    const peaks = [{ azimuthDeg: 300, elevationDeg: 0, levelDb: -20 }];
    const withPose = sitePeaks(db, peaks, { nAz, nEl: 1, azimuthDeg: az, elevationDeg: el }, pose, new Float64Array(nAz))!;
    expect(withPose).toHaveLength(1);
    expect(withPose[0].siteAzimuthDeg).toBe(30); // 300 + 90 − 360
    expect(withPose[0].siteElevationDeg).toBe(0);
    expect(withPose[0].widthDeg).toBeCloseTo(15, 9);
    expect(withPose[0].aboveFloorDb).toBe(20); // median −40
    const noPose = sitePeaks(db, peaks, { nAz, nEl: 1, azimuthDeg: az, elevationDeg: el }, null, new Float64Array(nAz))!;
    expect(noPose[0].siteAzimuthDeg).toBeNull();
    expect(noPose[0].siteElevationDeg).toBeNull();
    // A spectrum that does not fit the grid gives nothing.
    expect(sitePeaks(db.subarray(1), peaks, { nAz, nEl: 1, azimuthDeg: az, elevationDeg: el }, pose, new Float64Array(nAz))).toBeNull();
  });
});
