/**
 * The pieces of a site scene's emitted signals (site-scene.ts): counter-based hashing (a sample of
 * noise is a pure function of its index, never of a generator's state), the band-pass that shapes
 * broadband sources, and the fractional-delay filter run over a window of emitted samples.
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
 * out[outStart + i] += Σ_t g[t] · x[xStart + i + t], i = 0 … n−1: the fractional-delay filter over a
 * window of emitted samples (g oldest first, fractional-delay.ts convention). Each output sums its
 * taps in order t = 0 … taps−1, so the result does not depend on where a run starts.
 */
export function accumulateWindow(out: Float64Array, outStart: number, n: number, x: Float64Array, xStart: number, g: Float64Array, gStart: number, taps: number): void {
  let i = 0;
  for (; i + 4 <= n; i += 4) {
    const q = xStart + i;
    let a0 = 0;
    let a1 = 0;
    let a2 = 0;
    let a3 = 0;
    let x0 = x[q];
    let x1 = x[q + 1];
    let x2 = x[q + 2];
    for (let t = 0; t < taps; t++) {
      const h = g[gStart + t];
      const x3 = x[q + t + 3];
      a0 += h * x0;
      a1 += h * x1;
      a2 += h * x2;
      a3 += h * x3;
      x0 = x1;
      x1 = x2;
      x2 = x3;
    }
    const o = outStart + i;
    out[o] += a0;
    out[o + 1] += a1;
    out[o + 2] += a2;
    out[o + 3] += a3;
  }
  for (; i < n; i++) {
    const q = xStart + i;
    let acc = 0;
    for (let t = 0; t < taps; t++) acc += g[gStart + t] * x[q + t];
    out[outStart + i] += acc;
  }
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
