/**
 * Numbers as people read them: a value computed through floating point (τ from λ, say) carries
 * rounding noise in its last digits (2 s comes back as 1.9999999999999707). `tidy` keeps 12
 * significant digits, far beyond any measured quantity here and far above double precision's
 * noise (about 16 digits), so the noise goes and no real digit is lost.
 */
export function tidy(x: number): number {
  return Number.isFinite(x) && x !== 0 ? Number(x.toPrecision(12)) : x;
}

/** A number for a sentence: up to `digits` significant digits, no trailing zeros, no exponent below 1e21. */
export function plainNumber(x: number, digits = 6): string {
  if (!Number.isFinite(x)) return String(x);
  return String(Number(x.toPrecision(digits)));
}
