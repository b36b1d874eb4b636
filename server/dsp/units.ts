/**
 * Unit conversions shared by the DSP stages and the API: power decibels, the covariance forgetting
 * factor λ ↔ time constant τ, the speed of sound from air temperature, and degrees ↔ radians.
 *
 * Every function validates its arguments and throws a RangeError that names the argument and its
 * allowed range, so a bad value from config or REST is explained where it enters, not as a NaN
 * several stages later.
 */

/** The value db10() returns for a power of exactly 0, instead of −Infinity (keeps JSON and plots finite). */
export const DB10_FLOOR_DB = -300;

function requireFinite(name: string, value: number): void {
  if (!Number.isFinite(value)) throw new RangeError(`${name} must be a finite number, got ${value}`);
}

/**
 * Power ratio to decibels, 10·log10(x), floored at {@link DB10_FLOOR_DB} (so 0 → −300 dB).
 * @param x power ratio, finite, ≥ 0
 * @returns level in dB, ≥ −300
 */
export function db10(x: number): number {
  if (!(x >= 0) || x === Infinity) throw new RangeError(`x must be a finite power ratio ≥ 0, got ${x}`);
  const db = 10 * Math.log10(x);
  return db > DB10_FLOOR_DB ? db : DB10_FLOOR_DB;
}

/**
 * Decibels to a power ratio, 10^(db/10).
 * @param db level in dB, finite
 */
export function fromDb10(db: number): number {
  requireFinite('db', db);
  return Math.pow(10, db / 10);
}

function requireHopAndRate(hopSamples: number, sampleRateHz: number): void {
  if (!Number.isInteger(hopSamples) || hopSamples < 1) {
    throw new RangeError(`hopSamples must be an integer ≥ 1, got ${hopSamples}`);
  }
  if (!Number.isFinite(sampleRateHz) || sampleRateHz <= 0) {
    throw new RangeError(`sampleRateHz must be a finite number > 0, got ${sampleRateHz}`);
  }
}

/**
 * Forgetting factor per hop for a recursive covariance R_k = λ R_{k−1} + (1−λ) x xᴴ, from its time
 * constant: λ = 1 − hop/(fs·τ), the inverse of τ = hop/(fs·(1−λ)). The effective memory is
 * 1/(1−λ) snapshots, each hop/fs seconds apart (common practice; recursive least squares,
 * S. Haykin, Adaptive Filter Theory, from memory).
 * @param tauS time constant in seconds, ≥ hopSamples/sampleRateHz (so that λ ≥ 0)
 * @param hopSamples hop between snapshots in samples, integer ≥ 1
 * @param sampleRateHz sample rate in Hz, > 0
 * @returns λ in [0, 1)
 */
export function lambdaFromTau(tauS: number, hopSamples: number, sampleRateHz: number): number {
  requireHopAndRate(hopSamples, sampleRateHz);
  const hopS = hopSamples / sampleRateHz;
  if (!Number.isFinite(tauS) || tauS < hopS) {
    throw new RangeError(`tauS must be finite and ≥ hop/fs = ${hopS} s, got ${tauS}`);
  }
  return 1 - hopS / tauS;
}

/**
 * Time constant τ = hop/(fs·(1−λ)) in seconds of a forgetting factor λ per hop (see
 * {@link lambdaFromTau} for the source).
 * @param lambda forgetting factor in [0, 1)
 * @param hopSamples hop between snapshots in samples, integer ≥ 1
 * @param sampleRateHz sample rate in Hz, > 0
 * @returns τ in seconds, ≥ hop/fs
 */
export function tauFromLambda(lambda: number, hopSamples: number, sampleRateHz: number): number {
  requireHopAndRate(hopSamples, sampleRateHz);
  if (!(lambda >= 0 && lambda < 1)) throw new RangeError(`lambda must be in [0, 1), got ${lambda}`);
  return hopSamples / (sampleRateHz * (1 - lambda));
}

/**
 * Speed of sound in dry air, c = 331.3·√(1 + T/273.15) m/s (ideal-gas dependence on absolute
 * temperature; common practice). 20 °C → 343.2 m/s.
 * @param tempC air temperature in °C, in (−273.15, 1000]
 * @returns speed of sound in m/s
 */
export function speedOfSoundFromTemperature(tempC: number): number {
  if (!(tempC > -273.15 && tempC <= 1000)) {
    throw new RangeError(`tempC must be in (−273.15, 1000] °C, got ${tempC}`);
  }
  return 331.3 * Math.sqrt(1 + tempC / 273.15);
}

/** Degrees to radians. @param deg angle in degrees, finite */
export function degToRad(deg: number): number {
  requireFinite('deg', deg);
  return (deg * Math.PI) / 180;
}

/** Radians to degrees. @param rad angle in radians, finite */
export function radToDeg(rad: number): number {
  requireFinite('rad', rad);
  return (rad * 180) / Math.PI;
}
