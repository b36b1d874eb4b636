/**
 * The figures of a peak that the site needs besides its direction (shared/site.ts SitePeak): its
 * width 3 dB below its top, measured on the row's MVDR spectrum along the azimuth axis (around the
 * circle when the grid covers it), and its level above the spectrum's floor, taken as the median
 * of the row's MVDR spectrum over all directions. Plain functions over typed arrays; the scratch
 * buffer for the median is the caller's, reused row after row.
 */
import { MAX_SITE_PEAKS, siteAzimuthDeg, type Pose, type SitePeak } from '../../shared/site.ts';
import type { RowPeak } from '../../shared/messages.ts';

/** The azimuth axis of a grid: first value, step, count, and whether it closes the circle. */
export interface AzimuthAxis {
  startDeg: number;
  stepDeg: number;
  nAz: number;
  /** nAz · step = 360°: the last direction's neighbour is the first. */
  wraps: boolean;
}

/** The azimuth axis of a direction grid (azimuth fastest, first nAz entries are one elevation's azimuths). */
export function azimuthAxis(azimuthDeg: ArrayLike<number>, nAz: number): AzimuthAxis {
  const startDeg = azimuthDeg[0];
  const stepDeg = nAz > 1 ? (azimuthDeg[nAz - 1] - startDeg) / (nAz - 1) : 360;
  return { startDeg, stepDeg, nAz, wraps: nAz > 1 && Math.abs(nAz * stepDeg - 360) < 1e-6 * 360 };
}

/**
 * Width of the peak at grid azimuth index `iAz` (elevation row `iEl`) where the spectrum falls
 * 3 dB below its value there, degrees. Each side walks outward to the first direction below the
 * threshold and places the crossing by linear interpolation in dB between it and its inner
 * neighbour. On a closed circle the walk wraps; on an open axis a side that reaches the end stops
 * there (the width is then a lower bound). A spectrum above the threshold all round gives 360°.
 * @param db D = nAz·nEl values, index iEl·nAz + iAz
 */
export function peakWidthDeg(db: ArrayLike<number>, axis: AzimuthAxis, iAz: number, iEl: number, dropDb = 3): number {
  const { nAz, stepDeg, wraps } = axis;
  if (nAz < 2) return 0;
  const base = iEl * nAz;
  const top = db[base + iAz];
  if (!Number.isFinite(top)) return 0;
  const t = top - dropDb;
  const side = (dir: 1 | -1): number => {
    let prev = top;
    for (let k = 1; k < nAz; k++) {
      let j = iAz + dir * k;
      if (wraps) j = ((j % nAz) + nAz) % nAz;
      else if (j < 0 || j >= nAz) return (k - 1) * stepDeg;
      const v = db[base + j];
      // A non-finite value (a flagged direction) counts as below the threshold.
      if (!(v >= t)) {
        const f = Number.isFinite(v) && prev > v ? (prev - t) / (prev - v) : 1;
        return (k - 1 + f) * stepDeg;
      }
      prev = v;
    }
    return wraps ? 180 : (nAz - 1) * stepDeg;
  };
  const w = side(1) + side(-1);
  return Math.min(w, wraps ? 360 : (nAz - 1) * stepDeg);
}

/**
 * Median of the finite values of `db` (the spectrum's floor), using `scratch` (length ≥ db.length).
 * Even counts: the mean of the two middle values. NaN when no value is finite.
 */
export function medianDb(db: ArrayLike<number>, scratch: Float64Array): number {
  let n = 0;
  for (let i = 0; i < db.length; i++) {
    const v = db[i];
    if (Number.isFinite(v)) scratch[n++] = v;
  }
  if (n === 0) return Number.NaN;
  const s = scratch.subarray(0, n).sort();
  return n % 2 === 1 ? s[(n - 1) >> 1] : 0.5 * (s[n / 2 - 1] + s[n / 2]);
}

/** Nearest grid index of an angle on an axis (wrapping on a closed circle, clamped on an open one). */
export function nearestIndex(angleDeg: number, startDeg: number, stepDeg: number, n: number, wraps: boolean): number {
  if (n < 2 || !(stepDeg > 0)) return 0;
  const i = Math.round((angleDeg - startDeg) / stepDeg);
  if (wraps) return ((i % n) + n) % n;
  return Math.min(n - 1, Math.max(0, i));
}

/** The grid the row was scanned on: azimuth and elevation of each direction (DirectionGrid's fields). */
export interface PeakGrid {
  nAz: number;
  nEl: number;
  azimuthDeg: ArrayLike<number>;
  elevationDeg: ArrayLike<number>;
}

/**
 * The site peaks of one row: its MVDR peaks (the strongest MAX_SITE_PEAKS) with width, level above
 * the floor and, with a pose, site azimuth (array azimuth + heading; arrays are level, so the
 * elevation is the same in both frames). Null when the spectrum does not match the grid.
 * @param mvdrDb the row's MVDR spectrum, D = nAz·nEl values
 * @param scratch length ≥ D (the median's work space)
 */
export function sitePeaks(mvdrDb: ArrayLike<number>, peaks: readonly RowPeak[], grid: PeakGrid, pose: Pose | null, scratch: Float64Array): SitePeak[] | null {
  const d = grid.nAz * grid.nEl;
  if (mvdrDb.length !== d || scratch.length < d) return null;
  const axis = azimuthAxis(grid.azimuthDeg, grid.nAz);
  const el0 = grid.elevationDeg[0];
  const elStep = grid.nEl > 1 ? (grid.elevationDeg[(grid.nEl - 1) * grid.nAz] - el0) / (grid.nEl - 1) : 1;
  const floor = medianDb(mvdrDb, scratch);
  const chosen = peaks.length <= MAX_SITE_PEAKS ? peaks : [...peaks].sort((a, b) => b.levelDb - a.levelDb).slice(0, MAX_SITE_PEAKS);
  const out: SitePeak[] = [];
  for (const p of chosen) {
    if (!Number.isFinite(p.azimuthDeg) || !Number.isFinite(p.elevationDeg) || !Number.isFinite(p.levelDb)) continue;
    const iAz = nearestIndex(p.azimuthDeg, axis.startDeg, axis.stepDeg, grid.nAz, axis.wraps);
    const iEl = nearestIndex(p.elevationDeg, el0, elStep, grid.nEl, false);
    const levelDb = Math.min(100, Math.max(-400, p.levelDb));
    out.push({
      azimuthDeg: p.azimuthDeg,
      elevationDeg: p.elevationDeg,
      siteAzimuthDeg: pose ? siteAzimuthDeg(p.azimuthDeg, pose) : null,
      siteElevationDeg: pose ? p.elevationDeg : null,
      levelDb,
      widthDeg: peakWidthDeg(mvdrDb, axis, iAz, iEl),
      aboveFloorDb: Number.isFinite(floor) ? Math.min(400, Math.max(0, levelDb - floor)) : 0,
    });
  }
  return out;
}
