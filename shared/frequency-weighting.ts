/**
 * Frequency weightings A, C and Z of IEC 61672-1 from the standard's analytic expressions, for the
 * per-direction levels (server) and their display (dashboard).
 *
 * Levels weighted with these functions are *indicative*: the array is no class-rated sound level
 * meter and its calibration is not traceable; the weightings only shape the spectrum the way the
 * standard's do.
 *
 * Source: IEC 61672-1:2013, Annex E (analytic expressions for the C and A weightings), from memory,
 * recomputed here with numpy:
 *   f_r = 1000 Hz, f_L = 10^1.5 Hz, f_H = 10^3.9 Hz, D = √(1/2), f_A = 10^2.45 Hz,
 *   b = (f_r² + f_L²·f_H²/f_r² − D·(f_L² + f_H²)) / (1 − D),  c = f_L²·f_H²,
 *   f_1 = √((−b − √(b² − 4c)) / 2) = 20.598 997 Hz,   f_4 = √((−b + √(b² − 4c)) / 2) = 12 194.217 Hz,
 *   f_2 = (3 − √5)/2 · f_A = 107.652 65 Hz,          f_3 = (3 + √5)/2 · f_A = 737.862 23 Hz,
 *   C(f) = 20·log10(f_4²·f² / ((f² + f_1²)(f² + f_4²))) − C_1000,
 *   A(f) = 20·log10(f_4²·f⁴ / ((f² + f_1²)·√(f² + f_2²)·√(f² + f_3²)·(f² + f_4²))) − A_1000.
 * The standard gives the normalisations rounded, C_1000 = −0.062 dB and A_1000 = −2.000 dB; here they
 * are the unnormalised functions evaluated at 1 kHz (−0.061 902 and −1.999 656 dB), so both
 * weightings are exactly 0 dB at 1 kHz; the difference from the rounded constants is below 0.001 dB.
 * Z is 0 dB at every frequency.
 */

/** The frequency weightings of IEC 61672-1. */
export type WeightingKind = 'A' | 'C' | 'Z';

/** The weightings accepted by this module, for validating input from outside. */
export const WEIGHTING_KINDS: readonly WeightingKind[] = ['A', 'C', 'Z'];

// Annex E design constants (IEC 61672-1:2013, from memory).
const F_R_HZ = 1000;
const F_L_HZ = 10 ** 1.5;
const F_H_HZ = 10 ** 3.9;
const D = Math.SQRT1_2;
const F_A_HZ = 10 ** 2.45;
const B_HZ2 = (F_R_HZ ** 2 + (F_L_HZ ** 2 * F_H_HZ ** 2) / F_R_HZ ** 2 - D * (F_L_HZ ** 2 + F_H_HZ ** 2)) / (1 - D);
const C_HZ4 = F_L_HZ ** 2 * F_H_HZ ** 2;

/** Pole frequency f_1 ≈ 20.6 Hz (IEC 61672-1:2013 Annex E). */
export const F1_HZ = Math.sqrt((-B_HZ2 - Math.sqrt(B_HZ2 * B_HZ2 - 4 * C_HZ4)) / 2);
/** Pole frequency f_2 ≈ 107.7 Hz (A weighting only). */
export const F2_HZ = ((3 - Math.sqrt(5)) / 2) * F_A_HZ;
/** Pole frequency f_3 ≈ 737.9 Hz (A weighting only). */
export const F3_HZ = ((3 + Math.sqrt(5)) / 2) * F_A_HZ;
/** Pole frequency f_4 ≈ 12 194 Hz. */
export const F4_HZ = Math.sqrt((-B_HZ2 + Math.sqrt(B_HZ2 * B_HZ2 - 4 * C_HZ4)) / 2);

const F1_2 = F1_HZ * F1_HZ;
const F2_2 = F2_HZ * F2_HZ;
const F3_2 = F3_HZ * F3_HZ;
const F4_2 = F4_HZ * F4_HZ;

// Written as products of ratios ≤ 1, so nothing overflows at any finite frequency.

/** Unnormalised C weighting as a power ratio |H_C(f)|² at f² = `f2` Hz². */
function cPowerRaw(f2: number): number {
  const h = (f2 / (f2 + F1_2)) * (F4_2 / (f2 + F4_2));
  return h * h;
}

/** Unnormalised A weighting as a power ratio |H_A(f)|² at f² = `f2` Hz² (0 at f = 0). */
function aPowerRaw(f2: number): number {
  const c = cPowerRaw(f2);
  // f²/√((f² + f2²)(f² + f3²)), squared; F2_2/0 = Infinity gives 0 at DC.
  return c / ((1 + F2_2 / f2) * (1 + F3_2 / f2));
}

/** Frequencies above this are taken as this (the weightings are far below −300 dB there). */
const MAX_FREQUENCY_HZ = 1e100;

/** 1 / |H(1 kHz)|²: the exact normalisations (the standard rounds them to −2.000 and −0.062 dB). */
const A_NORM = 1 / aPowerRaw(1e6);
const C_NORM = 1 / cPowerRaw(1e6);

/** A_1000 in dB as computed here (≈ −2.000 dB in the standard). */
export const A1000_DB = 10 * Math.log10(1 / A_NORM);
/** C_1000 in dB as computed here (≈ −0.062 dB in the standard). */
export const C1000_DB = 10 * Math.log10(1 / C_NORM);

function checkKind(kind: unknown): asserts kind is WeightingKind {
  if (kind !== 'A' && kind !== 'C' && kind !== 'Z') {
    throw new TypeError(`frequency weighting must be "A", "C" or "Z", got ${JSON.stringify(kind)}`);
  }
}

function checkFrequency(frequencyHz: number): void {
  if (typeof frequencyHz !== 'number' || !Number.isFinite(frequencyHz) || frequencyHz < 0) {
    throw new RangeError(`frequencyHz must be a finite number ≥ 0, got ${String(frequencyHz)}`);
  }
}

/** Power gain 10^(weighting/10) at one frequency (inputs already checked). */
function powerGain(kind: WeightingKind, frequencyHz: number): number {
  if (kind === 'Z') return 1;
  const f = frequencyHz < MAX_FREQUENCY_HZ ? frequencyHz : MAX_FREQUENCY_HZ;
  const f2 = f * f;
  return kind === 'A' ? aPowerRaw(f2) * A_NORM : cPowerRaw(f2) * C_NORM;
}

/**
 * The weighting in dB at one frequency (IEC 61672-1 Annex E expressions, normalised to 0 dB at
 * 1 kHz). A and C are −Infinity at 0 Hz; Z is 0 dB everywhere.
 * @param frequencyHz finite, ≥ 0
 * @throws TypeError for an unknown kind, RangeError for a negative or non-finite frequency
 */
export function weightingDb(kind: WeightingKind, frequencyHz: number): number {
  checkKind(kind);
  checkFrequency(frequencyHz);
  return 10 * Math.log10(powerGain(kind, frequencyHz));
}

/**
 * Power gains 10^(weighting dB / 10) of the FFT bins startBin … startBin + count − 1 of an FFT of
 * `fftSize` points at `sampleRateHz`, bin k taken at k·fs/N. Multiply a bin's power |X_k|² by its
 * gain to weight it. Computed once per configuration (plan once, run many), not per frame.
 * @param fftSize positive integer N
 * @param startBin integer ≥ 0
 * @param count integer ≥ 0, startBin + count ≤ N/2 + 1 (bins up to Nyquist)
 * @returns Float64Array of length `count`; element i belongs to bin startBin + i (0 for A and C at DC)
 * @throws TypeError for an unknown kind, RangeError for sizes out of range
 */
export function weightingPowerGains(
  kind: WeightingKind,
  fftSize: number,
  sampleRateHz: number,
  startBin: number,
  count: number,
): Float64Array {
  checkKind(kind);
  if (!Number.isInteger(fftSize) || fftSize < 1) {
    throw new RangeError(`fftSize must be a positive integer, got ${String(fftSize)}`);
  }
  if (typeof sampleRateHz !== 'number' || !Number.isFinite(sampleRateHz) || sampleRateHz <= 0) {
    throw new RangeError(`sampleRateHz must be a finite number > 0, got ${String(sampleRateHz)}`);
  }
  if (!Number.isInteger(startBin) || startBin < 0) {
    throw new RangeError(`startBin must be an integer ≥ 0, got ${String(startBin)}`);
  }
  if (!Number.isInteger(count) || count < 0 || startBin + count > Math.floor(fftSize / 2) + 1) {
    throw new RangeError(
      `count must be an integer ≥ 0 with startBin + count ≤ fftSize/2 + 1 = ${Math.floor(fftSize / 2) + 1}, got startBin ${startBin}, count ${String(count)}`,
    );
  }
  const out = new Float64Array(count);
  const binHz = sampleRateHz / fftSize;
  for (let i = 0; i < count; i++) out[i] = powerGain(kind, (startBin + i) * binHz);
  return out;
}
