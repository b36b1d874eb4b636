/**
 * The built-in scenario: what the simulator plays when no live source is configured. Pure data plus
 * the source trajectories; the array geometry is not part of it (any geometry can listen to it).
 *
 * Site (invented): the Tarnwick pump-house yard, a paved service yard beside a river pumping
 * station. The array sits on a mast in the middle of the yard, in the horizontal plane; all
 * directional sources are at ear height, so elevation 0.
 */

/** Direction of a source over time, in degrees (azimuth counter-clockwise from +x). */
export type AzimuthPath =
  | { kind: 'fixed'; azimuthDeg: number }
  /** azimuth(t) = centreDeg + halfSpanDeg · sin(2π t / periodS): smooth, peak rate halfSpan·2π/period. */
  | { kind: 'sweep'; centreDeg: number; halfSpanDeg: number; periodS: number };

export interface BroadbandSpec {
  kind: 'broadband';
  name: string;
  what: string;
  /** rms level at the array centre, dBFS. */
  levelDb: number;
  lowHz: number;
  highHz: number;
  path: AzimuthPath;
}

export interface TonalSpec {
  kind: 'tonal';
  name: string;
  what: string;
  /** rms level of all harmonics together at the array centre, dBFS. */
  levelDb: number;
  fundamentalHz: number;
  /** Harmonic numbers with their level relative to the fundamental (dB) and start phase (rad). */
  harmonics: { number: number; relativeDb: number; phaseRad: number }[];
  path: AzimuthPath;
}

export type SourceSpec = BroadbandSpec | TonalSpec;

export interface Scenario {
  site: string;
  siteDescription: string;
  sources: SourceSpec[];
  /** Diffuse background: uncorrelated band noise arriving from many fixed directions. */
  background: {
    /** Total rms level of all background directions at the array centre, dBFS. */
    levelDb: number;
    lowHz: number;
    highHz: number;
    directions: { azimuthDeg: number; elevationDeg: number }[];
  };
  /** Uncorrelated sensor self-noise, rms per channel, dBFS (white). */
  selfNoiseDb: number;
}

/** Eight background directions: every 45° in azimuth, alternating between the horizon and 25° up
 *  (reflections off the pump-house wall and the yard's open sky), offset 22.5° from a round grid.
 *  Eight keeps the cost at 8 · M integer-delay adds per sample while the summed field is already
 *  far less directional than any single source. */
const BACKGROUND_DIRECTIONS = Array.from({ length: 8 }, (_, k) => ({
  azimuthDeg: 22.5 + 45 * k,
  elevationDeg: k % 2 === 0 ? 0 : 25,
}));

export const TARNWICK_YARD: Scenario = deepFreeze({
  site: 'Tarnwick pump-house yard',
  siteDescription:
    'Paved service yard beside a river pumping station; the array is on a mast mid-yard. A service ' +
    'cart shuttles along the far side, an intake vent breathes by the gate, and a pump motor whines ' +
    'behind the pump-house wall.',
  sources: [
    {
      kind: 'broadband',
      name: 'service-cart',
      what: 'electric service cart (tyres and drive noise) shuttling along the yard, 100°–200°, at most 3.1°/s',
      levelDb: -24,
      lowHz: 200,
      highHz: 8000,
      path: { kind: 'sweep', centreDeg: 150, halfSpanDeg: 50, periodS: 100 },
    },
    {
      kind: 'broadband',
      name: 'intake-vent',
      what: 'louvred air intake by the gate (steady rushing noise)',
      levelDb: -30,
      lowHz: 300,
      highHz: 6000,
      path: { kind: 'fixed', azimuthDeg: 35 },
    },
    {
      kind: 'tonal',
      name: 'pump-whine',
      what: 'pump motor whine, 415 Hz and three harmonics, through the pump-house wall',
      levelDb: -27,
      fundamentalHz: 415,
      harmonics: [
        { number: 1, relativeDb: 0, phaseRad: 0 },
        { number: 2, relativeDb: -2, phaseRad: 1.1 },
        { number: 3, relativeDb: -4, phaseRad: 2.3 },
        { number: 4, relativeDb: -6, phaseRad: 0.4 },
      ],
      path: { kind: 'fixed', azimuthDeg: 285 },
    },
  ],
  background: { levelDb: -44, lowHz: 100, highHz: 5000, directions: BACKGROUND_DIRECTIONS },
  selfNoiseDb: -66,
});

/** The scenario is shared by every simulator instance; freezing it keeps one from altering another. */
function deepFreeze<T>(value: T): T {
  if (typeof value === 'object' && value !== null) {
    for (const v of Object.values(value)) deepFreeze(v);
    Object.freeze(value);
  }
  return value;
}

/** Azimuth of a path at time tS (seconds on the stream clock), degrees in [0, 360). */
export function azimuthAtDeg(path: AzimuthPath, tS: number): number {
  const deg =
    path.kind === 'fixed'
      ? path.azimuthDeg
      : path.centreDeg + path.halfSpanDeg * Math.sin((2 * Math.PI * tS) / path.periodS);
  return ((deg % 360) + 360) % 360;
}

/** Largest angular rate of a path, degrees per second. */
export function peakRateDegPerS(path: AzimuthPath): number {
  return path.kind === 'fixed' ? 0 : (Math.abs(path.halfSpanDeg) * 2 * Math.PI) / path.periodS;
}
