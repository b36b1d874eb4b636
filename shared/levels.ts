/**
 * Sound pressure level from a level in dB re full scale, for server and dashboard.
 *
 * Levels in this project are powers re full scale 1.0: 10·log10(mean x²), x in full-scale units (a
 * full-scale sine reads −3 dB). With a microphone of sensitivity S (V/Pa) into a converter whose
 * full scale is Vfs volts (peak), x = 1 is Vfs volts = Vfs/S pascal, so
 *   L_p = 10·log10(mean x²) + 20·log10(Vfs / (S·p₀)),   p₀ = 20 µPa
 * (the reference pressure in air of ISO 80000-8 / IEC 61672-1; common practice: 1 Pa rms is
 * 93.98 dB SPL).
 */

/** Reference sound pressure in air, Pa. */
export const REFERENCE_PRESSURE_PA = 20e-6;

/** dB to add to a level re full scale to get dB SPL. */
export function splOffsetDb(sensitivityMvPerPa: number, fullScaleVolts: number): number {
  return 20 * Math.log10(fullScaleVolts / ((sensitivityMvPerPa / 1000) * REFERENCE_PRESSURE_PA));
}
