/**
 * The pieces of a site scene's emitted signals (site-scene.ts): counter-based hashing (a sample of
 * noise is a pure function of its index, never of a generator's state), the band-pass that shapes
 * broadband sources (the fractional-delay filter over a window of emitted samples is
 * fractional-delay.ts accumulateWindow, shared with the built-in scene).
 */
import { besselI0 } from './fractional-delay.ts';

/** Band-pass FIR of the broadband sources: odd length, Kaiser β. Transition width ≈ 5.5 fs/L. */
export const BAND_FIR_TAPS = 255;
const BAND_FIR_BETA = 8;

/** C. Wellons' "lowbias32" integer hash (hash-prospector, constants from memory): uint32 → uint32. */
export function mix32(x: number): number {
  let z = x | 0;
  z ^= z >>> 16;
  z = Math.imul(z, 0x21f0aaad);
  z ^= z >>> 15;
  z = Math.imul(z, 0x735a2d97);
  z ^= z >>> 15;
  return z >>> 0;
}

/** FNV-1a of a string, uint32 (a stable key for a source's or an array's name). */
export function fnv1a(text: string): number {
  let h = 0x811c9dc5;
  for (let i = 0; i < text.length; i++) h = Math.imul(h ^ text.charCodeAt(i), 0x01000193);
  return h >>> 0;
}

/**
 * Linear-phase band-pass FIR by the window method: ideal band-pass (difference of two sinc
 * low-passes) times a Kaiser window (Kaiser 1974), scaled so that unit-variance white noise comes
 * out with unit variance (Σ h² = 1). Corners in cycles per sample.
 */
export function bandPass(lowCycles: number, highCycles: number, taps = BAND_FIR_TAPS, beta = BAND_FIR_BETA): Float64Array {
  const h = new Float64Array(taps);
  const mid = (taps - 1) / 2;
  const i0b = besselI0(beta);
  const lp = (f: number, k: number) => (k === 0 ? 2 * f : Math.sin(2 * Math.PI * f * k) / (Math.PI * k));
  let energy = 0;
  for (let l = 0; l < taps; l++) {
    const k = l - mid;
    const r = k / mid;
    const win = besselI0(beta * Math.sqrt(Math.max(0, 1 - r * r))) / i0b;
    h[l] = win * (lp(highCycles, k) - lp(lowCycles, k));
    energy += h[l] * h[l];
  }
  const s = 1 / Math.sqrt(energy);
  for (let l = 0; l < taps; l++) h[l] *= s;
  return h;
}
