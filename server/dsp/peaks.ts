/**
 * Peaks of a direction spectrum in dB, on a 1-D azimuth grid or a 2-D azimuth × elevation grid.
 *
 * Definition (the same one test/fixtures/dsp/make_dsp_fixtures.py implements independently in numpy;
 * test/fixtures/dsp/README.md spells it out):
 * - Grid: nAz × nEl directions, direction index = iEl·nAz + iAz; azimuth may wrap (circular),
 *   elevation never does.
 * - Candidate: grid level y₀ > median(spectrum) + thresholdDb. The median makes the threshold
 *   relative to the spectrum's floor, whatever its absolute level (numpy's convention for an even
 *   count: the mean of the two middle values).
 * - Local maximum over the azimuth neighbours (1-D) or the 8-neighbourhood (2-D); neighbours off a
 *   non-circular edge are ignored. y₀ must be strictly greater than the neighbours whose offset
 *   (dEl, dAz) comes first in raster order (dEl < 0, or dEl = 0 and dAz < 0) and ≥ the others, so a
 *   run of equal values yields one peak, at its first sample. (A plateau that is not convex in
 *   raster order, e.g. a "U" shape, can still yield more than one.)
 * - Refinement, each axis separately, by fitting a parabola through the dB values at −1, 0, +1
 *   (J. O. Smith, Spectral Audio Signal Processing, "quadratic interpolation of spectral peaks",
 *   from memory): δ = ½(y₋ − y₊)/(y₋ − 2y₀ + y₊), |δ| ≤ ½, level correction −¼(y₋ − y₊)δ; in 2-D
 *   the two corrections add, which is exact for a separable paraboloid. The strict/≥ rule above
 *   keeps the denominator strictly negative. No refinement on an axis at a non-circular edge, or
 *   when one of the three values is not finite (−∞ from 10·log10 0, say).
 * - Sorted by refined level, highest first, ties by ascending index; at most maxPeaks.
 *
 * Planned once: the constructor validates the grid and allocates the median scratch and the
 * top-maxPeaks buffers; find() allocates only Peak objects the caller's `out` array lacks.
 */

/** One spectral peak, refined off the grid. */
export interface Peak {
  /** Direction index of the grid maximum, iEl·nAz + iAz. */
  index: number;
  /** Refined azimuth, degrees (wrapped into [start, start + 360) on a circular grid). */
  azimuthDeg: number;
  /** Refined elevation, degrees (the grid's only elevation for a 1-D grid). */
  elevationDeg: number;
  /** Refined level, dB (same reference as the input spectrum). */
  levelDb: number;
  /** Azimuth refinement δ_az, in grid steps, |δ| ≤ ½. */
  offsetSteps: number;
  /** Elevation refinement δ_el, in grid steps, |δ| ≤ ½ (0 on a 1-D grid). */
  elevationOffsetSteps: number;
}

export interface PeakFinderOptions {
  /** Number of azimuths, integer ≥ 1 (≥ 3 when circular). */
  nAz: number;
  /** Number of elevations, integer ≥ 1 (1 for an azimuth-only grid). */
  nEl: number;
  /** Azimuth step, degrees, finite; > 0 when nAz > 1. */
  azimuthStepDeg: number;
  /** Elevation step, degrees, finite; > 0 when nEl > 1 (ignored when nEl = 1). */
  elevationStepDeg: number;
  /** Azimuth of iAz = 0, degrees. */
  azimuthStartDeg: number;
  /** Elevation of iEl = 0, degrees. */
  elevationStartDeg: number;
  /** The azimuth axis closes on itself (nAz·azimuthStepDeg = 360°). */
  circularAzimuth: boolean;
  /** A peak's grid level must exceed the spectrum's median by more than this, dB, finite. */
  thresholdDb: number;
  /** Most peaks returned, integer ≥ 1. */
  maxPeaks: number;
}

/** Largest grid accepted (directions), so a typo cannot allocate gigabytes of scratch. */
export const MAX_PEAK_GRID_POINTS = 1 << 22;

function requireInteger(name: string, value: number, min: number, max: number): void {
  if (!Number.isInteger(value) || value < min || value > max) {
    throw new RangeError(`${name} must be an integer in ${min}…${max}, got ${value}`);
  }
}

function requireFinite(name: string, value: number): void {
  if (typeof value !== 'number' || !Number.isFinite(value)) {
    throw new RangeError(`${name} must be a finite number, got ${value}`);
  }
}

/**
 * Parabolic-interpolation offset δ of the vertex from the middle sample, clamped to |δ| ≤ ½;
 * 0 when a value is not finite. Requires y₀ ≥ both neighbours with one strict (denominator < 0).
 */
function vertexOffset(yMinus: number, y0: number, yPlus: number): number {
  if (!Number.isFinite(yMinus) || !Number.isFinite(y0) || !Number.isFinite(yPlus)) return 0;
  const d = (0.5 * (yMinus - yPlus)) / (yMinus - 2 * y0 + yPlus);
  return d > 0.5 ? 0.5 : d < -0.5 ? -0.5 : d;
}

/** Finds, refines and ranks the peaks of dB direction spectra on one fixed grid. */
export class PeakFinder {
  readonly nAz: number;
  readonly nEl: number;
  readonly azimuthStepDeg: number;
  readonly elevationStepDeg: number;
  readonly azimuthStartDeg: number;
  readonly elevationStartDeg: number;
  readonly circularAzimuth: boolean;
  readonly thresholdDb: number;
  readonly maxPeaks: number;

  readonly #sorted: Float64Array;
  readonly #topIndex: Int32Array;
  readonly #topLevelDb: Float64Array;
  readonly #topOffsetAz: Float64Array;
  readonly #topOffsetEl: Float64Array;

  constructor(options: PeakFinderOptions) {
    const o = options;
    requireInteger('nAz', o.nAz, 1, MAX_PEAK_GRID_POINTS);
    requireInteger('nEl', o.nEl, 1, MAX_PEAK_GRID_POINTS);
    if (o.nAz * o.nEl > MAX_PEAK_GRID_POINTS) {
      throw new RangeError(`nAz·nEl must be at most ${MAX_PEAK_GRID_POINTS} directions, got ${o.nAz * o.nEl}`);
    }
    requireFinite('azimuthStepDeg', o.azimuthStepDeg);
    requireFinite('elevationStepDeg', o.elevationStepDeg);
    requireFinite('azimuthStartDeg', o.azimuthStartDeg);
    requireFinite('elevationStartDeg', o.elevationStartDeg);
    requireFinite('thresholdDb', o.thresholdDb);
    if (o.nAz > 1 && !(o.azimuthStepDeg > 0)) {
      throw new RangeError(`azimuthStepDeg must be > 0 when nAz > 1, got ${o.azimuthStepDeg}`);
    }
    if (o.nEl > 1 && !(o.elevationStepDeg > 0)) {
      throw new RangeError(`elevationStepDeg must be > 0 when nEl > 1, got ${o.elevationStepDeg}`);
    }
    if (typeof o.circularAzimuth !== 'boolean') {
      throw new TypeError(`circularAzimuth must be a boolean, got ${typeof o.circularAzimuth}`);
    }
    if (o.circularAzimuth) {
      // Three distinct neighbours at least, and a grid that really closes: otherwise "wrapping"
      // would compare directions that are not adjacent.
      if (o.nAz < 3) throw new RangeError(`nAz must be ≥ 3 for a circular azimuth grid, got ${o.nAz}`);
      const spanDeg = o.nAz * o.azimuthStepDeg;
      if (Math.abs(spanDeg - 360) > 1e-9 * 360) {
        throw new RangeError(`a circular azimuth grid must span 360° (nAz·azimuthStepDeg), got ${spanDeg}°`);
      }
    }
    requireInteger('maxPeaks', o.maxPeaks, 1, MAX_PEAK_GRID_POINTS);

    this.nAz = o.nAz;
    this.nEl = o.nEl;
    this.azimuthStepDeg = o.azimuthStepDeg;
    this.elevationStepDeg = o.nEl > 1 ? o.elevationStepDeg : 0;
    this.azimuthStartDeg = o.azimuthStartDeg;
    this.elevationStartDeg = o.elevationStartDeg;
    this.circularAzimuth = o.circularAzimuth;
    this.thresholdDb = o.thresholdDb;
    this.maxPeaks = o.maxPeaks;

    this.#sorted = new Float64Array(o.nAz * o.nEl);
    const k = Math.min(o.maxPeaks, o.nAz * o.nEl);
    this.#topIndex = new Int32Array(k);
    this.#topLevelDb = new Float64Array(k);
    this.#topOffsetAz = new Float64Array(k);
    this.#topOffsetEl = new Float64Array(k);
  }

  /**
   * The peaks of one spectrum, highest first.
   * @param spectrumDb levels in dB, length nAz·nEl, index iEl·nAz + iAz; not modified; no NaN
   *   (−∞ is allowed and never a peak)
   * @param out optional array to fill: its Peak objects are overwritten in place and its length set
   *   to the number of peaks, so a caller that keeps one array allocates nothing after warm-up
   * @returns `out` (or a new array), at most maxPeaks entries
   */
  find(spectrumDb: Float64Array, out: Peak[] = []): Peak[] {
    const nAz = this.nAz;
    const nEl = this.nEl;
    const n = nAz * nEl;
    if (!(spectrumDb instanceof Float64Array)) throw new TypeError('spectrumDb must be a Float64Array');
    if (spectrumDb.length !== n) {
      throw new RangeError(`spectrumDb must have nAz·nEl = ${n} values, got ${spectrumDb.length}`);
    }
    const sorted = this.#sorted;
    for (let i = 0; i < n; i++) {
      const v = spectrumDb[i];
      if (v !== v) throw new RangeError(`spectrumDb[${i}] is NaN`);
      sorted[i] = v;
    }
    sorted.sort();
    const mid = n >> 1;
    const median = n & 1 ? sorted[mid] : (sorted[mid - 1] + sorted[mid]) / 2;
    const limitDb = median + this.thresholdDb;
    const circular = this.circularAzimuth;

    let count = 0;
    for (let e = 0; e < nEl; e++) {
      const row = e * nAz;
      for (let a = 0; a < nAz; a++) {
        const i = row + a;
        const y0 = spectrumDb[i];
        if (!(y0 > limitDb) || !this.#isLocalMax(spectrumDb, e, a, y0)) continue;

        let dAz = 0;
        let levelDb = y0;
        if (circular || (a > 0 && a < nAz - 1)) {
          const yMinus = spectrumDb[row + (a === 0 ? nAz - 1 : a - 1)];
          const yPlus = spectrumDb[row + (a === nAz - 1 ? 0 : a + 1)];
          dAz = vertexOffset(yMinus, y0, yPlus);
          if (dAz !== 0) levelDb -= 0.25 * (yMinus - yPlus) * dAz;
        }
        let dEl = 0;
        if (e > 0 && e < nEl - 1) {
          const yMinus = spectrumDb[i - nAz];
          const yPlus = spectrumDb[i + nAz];
          dEl = vertexOffset(yMinus, y0, yPlus);
          if (dEl !== 0) levelDb -= 0.25 * (yMinus - yPlus) * dEl;
        }
        count = this.#keep(count, i, levelDb, dAz, dEl);
      }
    }

    const topIndex = this.#topIndex;
    const topLevelDb = this.#topLevelDb;
    const topOffsetAz = this.#topOffsetAz;
    const topOffsetEl = this.#topOffsetEl;
    for (let k = 0; k < count; k++) {
      const i = topIndex[k];
      const e = (i / nAz) | 0;
      let xAz = i - e * nAz + topOffsetAz[k];
      if (circular) {
        if (xAz < 0) xAz += nAz;
        else if (xAz >= nAz) xAz -= nAz;
      }
      const azimuthDeg = this.azimuthStartDeg + xAz * this.azimuthStepDeg;
      const elevationDeg = this.elevationStartDeg + (e + topOffsetEl[k]) * this.elevationStepDeg;
      const p = out[k];
      if (p === undefined) {
        out[k] = {
          index: i,
          azimuthDeg,
          elevationDeg,
          levelDb: topLevelDb[k],
          offsetSteps: topOffsetAz[k],
          elevationOffsetSteps: topOffsetEl[k],
        };
      } else {
        p.index = i;
        p.azimuthDeg = azimuthDeg;
        p.elevationDeg = elevationDeg;
        p.levelDb = topLevelDb[k];
        p.offsetSteps = topOffsetAz[k];
        p.elevationOffsetSteps = topOffsetEl[k];
      }
    }
    out.length = count;
    return out;
  }

  /** The strict-before / ≥-after neighbourhood test of the module comment. */
  #isLocalMax(y: Float64Array, e: number, a: number, y0: number): boolean {
    const nAz = this.nAz;
    const nEl = this.nEl;
    const circular = this.circularAzimuth;
    for (let de = -1; de <= 1; de++) {
      const ee = e + de;
      if (ee < 0 || ee >= nEl) continue;
      const row = ee * nAz;
      for (let da = -1; da <= 1; da++) {
        if (de === 0 && da === 0) continue;
        let aa = a + da;
        if (aa < 0 || aa >= nAz) {
          if (!circular) continue;
          aa = aa < 0 ? aa + nAz : aa - nAz;
        }
        const yn = y[row + aa];
        if (de < 0 || (de === 0 && da < 0)) {
          if (!(y0 > yn)) return false;
        } else if (!(y0 >= yn)) return false;
      }
    }
    return true;
  }

  /**
   * Inserts a candidate into the top-maxPeaks buffers (descending level; an equal level goes after
   * the ones already held, which came from lower indices). Returns the new count.
   */
  #keep(count: number, index: number, levelDb: number, offsetAz: number, offsetEl: number): number {
    const topIndex = this.#topIndex;
    const topLevelDb = this.#topLevelDb;
    const topOffsetAz = this.#topOffsetAz;
    const topOffsetEl = this.#topOffsetEl;
    const capacity = topIndex.length;
    let pos = count;
    while (pos > 0 && topLevelDb[pos - 1] < levelDb) pos--;
    if (pos >= capacity) return count;
    for (let j = count < capacity ? count : capacity - 1; j > pos; j--) {
      topIndex[j] = topIndex[j - 1];
      topLevelDb[j] = topLevelDb[j - 1];
      topOffsetAz[j] = topOffsetAz[j - 1];
      topOffsetEl[j] = topOffsetEl[j - 1];
    }
    topIndex[pos] = index;
    topLevelDb[pos] = levelDb;
    topOffsetAz[pos] = offsetAz;
    topOffsetEl[pos] = offsetEl;
    return count < capacity ? count + 1 : capacity;
  }
}
