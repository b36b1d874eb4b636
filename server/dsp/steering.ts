/**
 * Steering vectors: the one place where nullsteer's geometric sign convention is written down.
 *
 * Convention (array conventions follow H. L. Van Trees, Optimum Array Processing, Wiley 2002, ch. 2):
 * - Sensor positions p_m in metres, in the array's own frame, relative to its origin.
 * - Direction: unit vector u pointing from the array origin TOWARD the source,
 *     u = (cos el · cos az, cos el · sin az, sin el),
 *   azimuth az counter-clockwise from +x in the x–y plane, elevation el up from that plane.
 *   The API takes degrees; everything in this file works in radians.
 * - Far field: the wave from direction u reaches sensor m at
 *     τ_m = −(p_m · u) / c            (seconds, relative to its arrival at the origin),
 *   so a sensor displaced toward the source hears it earlier (τ_m < 0).
 * - Steering vector v_m(f) = exp(−j 2π f τ_m). With the STFT convention of dsp/stft.ts
 *   (X[k] = Σ w[n] x[n] e^{−j2πkn/N}), the plane wave x_m(t) = s(t − τ_m) gives
 *   X_m(f) ≈ S(f) · v_m(f). test/unit/steering.test.ts checks this end to end with a simulated wave.
 * - Near-field focus (optional) at range r: the source is the point r·u, and
 *     τ_m = (|r·u − p_m| − r) / c,   v_m(f) = (r / |r·u − p_m|) · exp(−j 2π f τ_m),
 *   i.e. the spherical-wavefront delay relative to the origin and the 1/distance spreading loss
 *   normalised to 1 at the origin. As r → ∞ this tends to the far-field vector.
 */
import { degToRad } from './units.ts';

/** Sensor positions: an array of [x, y, z] in metres, or a flat array x0, y0, z0, x1, … (3·M). */
export type PositionsInput = ReadonlyArray<readonly [number, number, number]> | ArrayLike<number>;

/** Most directions a grid may hold (bounds table memory and spectrum work). */
export const MAX_GRID_DIRECTIONS = 100_000;
/** Largest steering table accepted, in bytes. */
export const MAX_STEERING_TABLE_BYTES = 512 * 1024 * 1024;

/**
 * Copy sensor positions into a flat Float64Array of length 3·M (x, y, z per sensor, metres).
 * @throws RangeError for no sensors, a flat length not divisible by 3, or non-finite coordinates
 */
export function flattenPositions(positions: PositionsInput): Float64Array {
  let flat: Float64Array;
  const first = (positions as ArrayLike<unknown>)[0];
  if (positions.length > 0 && typeof first !== 'number') {
    const rows = positions as ReadonlyArray<readonly [number, number, number]>;
    flat = new Float64Array(3 * rows.length);
    for (let m = 0; m < rows.length; m++) {
      const p = rows[m];
      if (!p || p.length !== 3) throw new RangeError(`positions[${m}] must be [x, y, z] in metres`);
      flat[3 * m] = p[0];
      flat[3 * m + 1] = p[1];
      flat[3 * m + 2] = p[2];
    }
  } else {
    const src = positions as ArrayLike<number>;
    if (src.length % 3 !== 0) throw new RangeError(`flat positions must have length 3·M, got ${src.length}`);
    flat = Float64Array.from(src);
  }
  if (flat.length === 0) throw new RangeError('positions must hold at least one sensor');
  for (let i = 0; i < flat.length; i++) {
    if (!Number.isFinite(flat[i])) throw new RangeError(`positions: coordinate ${i} is not finite (${flat[i]})`);
  }
  return flat;
}

/** A set of look directions, azimuth varying fastest: index d = iEl·nAz + iAz. */
export interface DirectionGrid {
  /** Number of directions D = nAz·nEl. */
  count: number;
  nAz: number;
  nEl: number;
  /** Azimuth of each direction in degrees, length D. */
  azimuthDeg: Float64Array;
  /** Elevation of each direction in degrees, length D. */
  elevationDeg: Float64Array;
}

/** An inclusive range of angles in degrees. */
export interface AngleRangeDeg {
  startDeg: number;
  stopDeg: number;
  stepDeg: number;
}

function axis(name: string, r: AngleRangeDeg, minDeg: number, maxDeg: number): Float64Array {
  const { startDeg, stopDeg, stepDeg } = r;
  if (!(stepDeg > 0) || !Number.isFinite(stepDeg)) throw new RangeError(`${name}.stepDeg must be finite and > 0, got ${stepDeg}`);
  if (!(startDeg >= minDeg && startDeg <= maxDeg)) {
    throw new RangeError(`${name}.startDeg must be in ${minDeg}…${maxDeg}, got ${startDeg}`);
  }
  if (!(stopDeg >= startDeg && stopDeg <= maxDeg)) {
    throw new RangeError(`${name}.stopDeg must be in ${startDeg}…${maxDeg}, got ${stopDeg}`);
  }
  // Inclusive of stopDeg when it lands on the grid, tolerant of decimal steps such as 0.1.
  const count = Math.floor((stopDeg - startDeg) / stepDeg + 1e-9) + 1;
  if (count > MAX_GRID_DIRECTIONS) throw new RangeError(`${name} would have ${count} values, at most ${MAX_GRID_DIRECTIONS}`);
  const values = new Float64Array(count);
  for (let i = 0; i < count; i++) values[i] = startDeg + i * stepDeg;
  return values;
}

/**
 * Build a direction grid. Azimuth in −360…720° (no wrapping is applied), elevation in −90…90°;
 * elevation defaults to the single value 0°. Stops are inclusive when they land on the grid:
 * azimuth 0–359 step 1 → 360 directions; az 0–355 step 5 × el 0–90 step 5 → 72 × 19.
 * @throws RangeError for a step ≤ 0, a range out of bounds, or more than 100 000 directions
 */
export function directionGrid(spec: { azimuthDeg: AngleRangeDeg; elevationDeg?: AngleRangeDeg }): DirectionGrid {
  const az = axis('azimuthDeg', spec.azimuthDeg, -360, 720);
  const el = axis('elevationDeg', spec.elevationDeg ?? { startDeg: 0, stopDeg: 0, stepDeg: 1 }, -90, 90);
  const count = az.length * el.length;
  if (count > MAX_GRID_DIRECTIONS) {
    throw new RangeError(`grid would have ${az.length}×${el.length} = ${count} directions, at most ${MAX_GRID_DIRECTIONS}`);
  }
  const azimuthDeg = new Float64Array(count);
  const elevationDeg = new Float64Array(count);
  for (let e = 0; e < el.length; e++) {
    for (let a = 0; a < az.length; a++) {
      azimuthDeg[e * az.length + a] = az[a];
      elevationDeg[e * az.length + a] = el[e];
    }
  }
  return { count, nAz: az.length, nEl: el.length, azimuthDeg, elevationDeg };
}

function requirePhysical(speedOfSoundMps: number, focusRangeM: number | null): void {
  if (!(speedOfSoundMps > 0) || !Number.isFinite(speedOfSoundMps)) {
    throw new RangeError(`speedOfSoundMps must be finite and > 0, got ${speedOfSoundMps}`);
  }
  if (focusRangeM !== null && (!(focusRangeM > 0) || !Number.isFinite(focusRangeM))) {
    throw new RangeError(`focusRangeM must be null (far field) or finite and > 0, got ${focusRangeM}`);
  }
}

/**
 * Delay τ_m (s) and amplitude a_m of sensors firstSensor … firstSensor + count − 1 for one
 * direction, written to delaysS/gains at `at`, `at + 1`, …. The only implementation of the
 * convention: steeringVector and SteeringTable both call it.
 */
function delaysForDirection(
  delaysS: Float64Array, gains: Float64Array, at: number, positions: ArrayLike<number>,
  firstSensor: number, count: number,
  azimuthRad: number, elevationRad: number, speedOfSoundMps: number, focusRangeM: number | null,
): void {
  const ce = Math.cos(elevationRad);
  const ux = ce * Math.cos(azimuthRad);
  const uy = ce * Math.sin(azimuthRad);
  const uz = Math.sin(elevationRad);
  for (let i = 0; i < count; i++) {
    const m = firstSensor + i;
    const px = positions[3 * m];
    const py = positions[3 * m + 1];
    const pz = positions[3 * m + 2];
    if (focusRangeM === null) {
      delaysS[at + i] = -(px * ux + py * uy + pz * uz) / speedOfSoundMps;
      gains[at + i] = 1;
    } else {
      const dx = focusRangeM * ux - px;
      const dy = focusRangeM * uy - py;
      const dz = focusRangeM * uz - pz;
      const distM = Math.sqrt(dx * dx + dy * dy + dz * dz);
      if (!(distM > 0)) throw new RangeError(`focusRangeM ${focusRangeM} puts the focus on sensor ${m}`);
      delaysS[at + i] = (distM - focusRangeM) / speedOfSoundMps;
      gains[at + i] = focusRangeM / distM;
    }
  }
}

const scratchDelay = new Float64Array(1);
const scratchGain = new Float64Array(1);

/**
 * Steering vector for one direction and frequency: v_m = a_m·exp(−j2πfτ_m) (convention in the file
 * header; a_m = 1 in the far field).
 * @param out length ≥ 2·M, interleaved complex; receives v_0 … v_{M−1}
 * @param positions flat sensor positions, length 3·M, metres
 * @param azimuthRad azimuth, counter-clockwise from +x
 * @param elevationRad elevation above the x–y plane
 * @param freqHz frequency in Hz
 * @param speedOfSoundMps c in m/s, > 0
 * @param focusRangeM null for a plane wave, else the focus range in metres (> 0)
 */
export function steeringVector(
  out: Float64Array, positions: ArrayLike<number>, azimuthRad: number, elevationRad: number,
  freqHz: number, speedOfSoundMps: number, focusRangeM: number | null = null,
): void {
  const channels = positions.length / 3;
  if (!Number.isInteger(channels) || channels < 1) throw new RangeError(`positions must have length 3·M ≥ 3, got ${positions.length}`);
  if (out.length < 2 * channels) throw new RangeError(`out must have length ≥ 2·M = ${2 * channels}, got ${out.length}`);
  if (!Number.isFinite(freqHz)) throw new RangeError(`freqHz must be finite, got ${freqHz}`);
  requirePhysical(speedOfSoundMps, focusRangeM);
  const omega = 2 * Math.PI * freqHz;
  for (let m = 0; m < channels; m++) {
    // One sensor at a time through the shared formula, via 1-element module scratch (no allocation).
    delaysForDirection(scratchDelay, scratchGain, 0, positions, m, 1,
      azimuthRad, elevationRad, speedOfSoundMps, focusRangeM);
    const phase = -omega * scratchDelay[0];
    out[2 * m] = scratchGain[0] * Math.cos(phase);
    out[2 * m + 1] = scratchGain[0] * Math.sin(phase);
  }
}

/** Options of {@link SteeringTable}. */
export interface SteeringTableOptions {
  positions: PositionsInput;
  grid: DirectionGrid;
  /** Frequencies of the table's bins in Hz (e.g. the band's bin centres). */
  freqsHz: ArrayLike<number>;
  speedOfSoundMps: number;
  /** null or absent: far field; else the near-field focus range in metres. */
  focusRangeM?: number | null;
}

/**
 * Precomputed steering vectors for every (bin, direction) pair.
 * Layout: v_{b,d}[m] at data[((b·D + d)·M + m)·2] (re) and the next index (im), so the M-vector for
 * one (bin, direction) is contiguous. Size B·D·M·16 bytes (61 bins × 360 directions × 32 mics
 * ≈ 11 MB); tables above 512 MiB are refused.
 */
export class SteeringTable {
  /** M, sensors. */
  readonly channels: number;
  /** D, directions (grid.count). */
  readonly directions: number;
  /** B, frequencies (freqsHz.length). */
  readonly bins: number;
  readonly grid: DirectionGrid;
  readonly freqsHz: Float64Array;
  /** Flat sensor positions, 3·M, metres. */
  readonly positionsM: Float64Array;
  readonly speedOfSoundMps: number;
  readonly focusRangeM: number | null;
  /** The steering vectors, length B·D·M·2, layout above. Treat as read-only. */
  readonly data: Float64Array;
  /** τ_{d,m} in seconds at delaysS[d·M + m] (arrival time relative to the origin). */
  readonly delaysS: Float64Array;
  /** Amplitude a_{d,m} at gains[d·M + m]; all 1 in the far field. */
  readonly gains: Float64Array;

  constructor(options: SteeringTableOptions) {
    const { grid, speedOfSoundMps } = options;
    const focusRangeM = options.focusRangeM ?? null;
    requirePhysical(speedOfSoundMps, focusRangeM);
    const positions = flattenPositions(options.positions);
    const m = positions.length / 3;
    const d = grid.count;
    const b = options.freqsHz.length;
    if (!Number.isInteger(d) || d < 1 || grid.azimuthDeg.length < d || grid.elevationDeg.length < d) {
      throw new RangeError(`grid must hold count ≥ 1 directions with azimuthDeg/elevationDeg of that length`);
    }
    if (b < 1) throw new RangeError('freqsHz must hold at least one frequency');
    const freqsHz = Float64Array.from(options.freqsHz);
    for (let i = 0; i < b; i++) {
      if (!(freqsHz[i] >= 0) || !Number.isFinite(freqsHz[i])) throw new RangeError(`freqsHz[${i}] must be finite and ≥ 0, got ${freqsHz[i]}`);
    }
    const bytes = b * d * m * 16;
    if (bytes > MAX_STEERING_TABLE_BYTES) {
      throw new RangeError(`steering table of ${b} bins × ${d} directions × ${m} sensors needs ${(bytes / 2 ** 20).toFixed(0)} MiB, at most ${MAX_STEERING_TABLE_BYTES / 2 ** 20} MiB`);
    }
    this.channels = m;
    this.directions = d;
    this.bins = b;
    this.grid = grid;
    this.freqsHz = freqsHz;
    this.positionsM = positions;
    this.speedOfSoundMps = speedOfSoundMps;
    this.focusRangeM = focusRangeM;
    this.delaysS = new Float64Array(d * m);
    this.gains = new Float64Array(d * m);
    for (let j = 0; j < d; j++) {
      delaysForDirection(this.delaysS, this.gains, j * m, positions, 0, m,
        degToRad(grid.azimuthDeg[j]), degToRad(grid.elevationDeg[j]), speedOfSoundMps, focusRangeM);
    }
    const data = new Float64Array(b * d * m * 2);
    const tau = this.delaysS;
    const gain = this.gains;
    for (let k = 0; k < b; k++) {
      const omega = 2 * Math.PI * freqsHz[k];
      let o = k * d * m * 2;
      for (let i = 0; i < d * m; i++) {
        const phase = -omega * tau[i];
        data[o] = gain[i] * Math.cos(phase);
        data[o + 1] = gain[i] * Math.sin(phase);
        o += 2;
      }
    }
    this.data = data;
  }

  /** Index in {@link data} of v_{b,d}[0].re; the vector occupies the next 2·M doubles. */
  offset(b: number, d: number): number {
    return (b * this.directions + d) * this.channels * 2;
  }
}

/** Result of {@link aliasingCheck}. */
export interface AliasingCheck {
  /** c / (2·d_max); Infinity for a single sensor. */
  limitHz: number;
  /** Largest nearest-neighbour spacing d_max in metres. */
  largestSpacingM: number;
  /** True when the band top is above limitHz. */
  exceeded: boolean;
  /** A warning for status and logs when exceeded, else null. */
  message: string | null;
}

function largestNearestNeighbourM(flat: Float64Array): number {
  const m = flat.length / 3;
  let largest = 0;
  for (let i = 0; i < m; i++) {
    let nearest = Infinity;
    for (let j = 0; j < m; j++) {
      if (j === i) continue;
      const dx = flat[3 * i] - flat[3 * j];
      const dy = flat[3 * i + 1] - flat[3 * j + 1];
      const dz = flat[3 * i + 2] - flat[3 * j + 2];
      const dist = Math.sqrt(dx * dx + dy * dy + dz * dz);
      if (dist < nearest) nearest = dist;
    }
    if (nearest !== Infinity && nearest > largest) largest = nearest;
  }
  return largest;
}

/**
 * Frequency above which grating lobes may appear: c/(2·d), d the largest nearest-neighbour spacing.
 * For a uniform line array this is the exact no-grating-lobe condition d ≤ λ/2 over the whole
 * visible region (common practice); for rings, grids and irregular arrays it is an approximation
 * (a rule of thumb, not a guarantee in either direction). O(M²) — call at configuration time.
 * @param positions sensor positions in metres
 * @param speedOfSoundMps c in m/s, > 0
 * @returns limit in Hz; Infinity for one sensor or all sensors coincident
 */
export function aliasingLimitHz(positions: PositionsInput, speedOfSoundMps: number): number {
  requirePhysical(speedOfSoundMps, null);
  const d = largestNearestNeighbourM(flattenPositions(positions));
  return d > 0 ? speedOfSoundMps / (2 * d) : Infinity;
}

/**
 * Compare a processing band with {@link aliasingLimitHz}, for a warning in status.
 * @param bandTopHz upper edge of the processing band in Hz, ≥ 0
 */
export function aliasingCheck(positions: PositionsInput, speedOfSoundMps: number, bandTopHz: number): AliasingCheck {
  if (!(bandTopHz >= 0) || !Number.isFinite(bandTopHz)) throw new RangeError(`bandTopHz must be finite and ≥ 0, got ${bandTopHz}`);
  requirePhysical(speedOfSoundMps, null);
  const largestSpacingM = largestNearestNeighbourM(flattenPositions(positions));
  const limitHz = largestSpacingM > 0 ? speedOfSoundMps / (2 * largestSpacingM) : Infinity;
  const exceeded = bandTopHz > limitHz;
  const message = exceeded
    ? `band top ${bandTopHz.toFixed(0)} Hz is above the spatial-aliasing limit ${limitHz.toFixed(0)} Hz ` +
      `(c/2d with largest sensor spacing d = ${(largestSpacingM * 100).toFixed(2)} cm): grating lobes may appear`
    : null;
  return { limitHz, largestSpacingM, exceeded, message };
}
