/**
 * "Nightfield": the dashboard's colour scale for levels in dB, a 256-entry look-up table.
 *
 * Built in the OKLab space (B. Ottosson, "A perceptual color space for image processing", 2020,
 * https://bottosson.github.io/posts/oklab/), whose lightness L is close to perceived lightness:
 * L rises linearly from 0.20 (near black, violet-blue) to 0.95 (pale straw) while the hue turns
 * through blue, teal and green to yellow, so equal steps in level read as equal steps in
 * brightness and the order survives greyscale printing and most colour-vision deficiencies.
 * Chroma follows a gentle arch and is pulled in wherever a colour would leave the sRGB gamut, so
 * lightness is never bent to fit.
 */

export const COLORMAP_NAME = 'nightfield';
export const COLORMAP_SIZE = 256;

/** Colour for missing values (method off, no data yet): a neutral dark grey. */
export const NO_DATA_RGB: readonly [number, number, number] = [28, 31, 36];

const L0 = 0.2;
const L1 = 0.95;
const HUE0_DEG = 285;
const HUE1_DEG = 100;

function oklabToLinearSrgb(L: number, a: number, b: number, out: Float64Array): void {
  const l_ = L + 0.3963377774 * a + 0.2158037573 * b;
  const m_ = L - 0.1055613458 * a - 0.0638541728 * b;
  const s_ = L - 0.0894841775 * a - 1.291485548 * b;
  const l = l_ * l_ * l_;
  const m = m_ * m_ * m_;
  const s = s_ * s_ * s_;
  out[0] = 4.0767416621 * l - 3.3077115913 * m + 0.2309699292 * s;
  out[1] = -1.2684380046 * l + 2.6097574011 * m - 0.3413193965 * s;
  out[2] = -0.0041960863 * l - 0.7034186147 * m + 1.707614701 * s;
}

/** sRGB transfer function (IEC 61966-2-1). */
function encodeSrgb(x: number): number {
  const v = x <= 0.0031308 ? 12.92 * x : 1.055 * Math.pow(x, 1 / 2.4) - 0.055;
  return Math.round(Math.min(1, Math.max(0, v)) * 255);
}

function inGamut(rgb: Float64Array): boolean {
  const eps = 1e-4;
  return rgb[0] >= -eps && rgb[0] <= 1 + eps && rgb[1] >= -eps && rgb[1] <= 1 + eps && rgb[2] >= -eps && rgb[2] <= 1 + eps;
}

/** The scale as 256 [r, g, b] triples, darkest first. */
function buildRgb(): Uint8Array {
  const out = new Uint8Array(COLORMAP_SIZE * 3);
  const rgb = new Float64Array(3);
  for (let i = 0; i < COLORMAP_SIZE; i++) {
    const t = i / (COLORMAP_SIZE - 1);
    const L = L0 + (L1 - L0) * t;
    const h = ((HUE0_DEG + (HUE1_DEG - HUE0_DEG) * t) * Math.PI) / 180;
    let c = 0.05 + 0.09 * Math.sin(Math.PI * Math.min(1, t * 1.1));
    // Largest chroma ≤ c that stays in gamut (bisection; chroma 0 always is).
    oklabToLinearSrgb(L, c * Math.cos(h), c * Math.sin(h), rgb);
    if (!inGamut(rgb)) {
      let lo = 0;
      let hi = c;
      for (let k = 0; k < 24; k++) {
        const mid = (lo + hi) / 2;
        oklabToLinearSrgb(L, mid * Math.cos(h), mid * Math.sin(h), rgb);
        if (inGamut(rgb)) lo = mid;
        else hi = mid;
      }
      c = lo;
      oklabToLinearSrgb(L, c * Math.cos(h), c * Math.sin(h), rgb);
    }
    out[3 * i] = encodeSrgb(rgb[0]);
    out[3 * i + 1] = encodeSrgb(rgb[1]);
    out[3 * i + 2] = encodeSrgb(rgb[2]);
  }
  return out;
}

const LITTLE_ENDIAN = new Uint8Array(new Uint16Array([1]).buffer)[0] === 1;

function pack(r: number, g: number, b: number): number {
  // One pixel of ImageData.data read through a Uint32Array view: bytes r, g, b, a in memory order.
  return LITTLE_ENDIAN ? ((255 << 24) | (b << 16) | (g << 8) | r) >>> 0 : ((r << 24) | (g << 16) | (b << 8) | 255) >>> 0;
}

export const COLORMAP_RGB: Uint8Array = buildRgb();

/** The scale packed for a Uint32Array view over ImageData.data (host byte order), darkest first. */
export const COLORMAP_PACKED: Uint32Array = (() => {
  const out = new Uint32Array(COLORMAP_SIZE);
  for (let i = 0; i < COLORMAP_SIZE; i++) out[i] = pack(COLORMAP_RGB[3 * i], COLORMAP_RGB[3 * i + 1], COLORMAP_RGB[3 * i + 2]);
  return out;
})();

export const NO_DATA_PACKED = pack(NO_DATA_RGB[0], NO_DATA_RGB[1], NO_DATA_RGB[2]);

/** `rgb(…)` of scale position t ∈ [0, 1]. */
export function colormapCss(t: number): string {
  const i = Math.round(Math.min(1, Math.max(0, t)) * (COLORMAP_SIZE - 1));
  return `rgb(${COLORMAP_RGB[3 * i]}, ${COLORMAP_RGB[3 * i + 1]}, ${COLORMAP_RGB[3 * i + 2]})`;
}

/** A CSS gradient of the scale, bottom (low) to top (high) by default, for legends. */
export function colormapGradient(direction = 'to top', stops = 12): string {
  const parts: string[] = [];
  for (let k = 0; k <= stops; k++) parts.push(`${colormapCss(k / stops)} ${((100 * k) / stops).toFixed(1)}%`);
  return `linear-gradient(${direction}, ${parts.join(', ')})`;
}

/**
 * Colour `n` levels into packed pixels: `lo` maps to the first entry, `hi` to the last, values
 * outside clamp, NaN gets {@link NO_DATA_PACKED}.
 * @param out packed pixels, written from `outOffset`
 * @param src levels in dB, read from `srcOffset`
 */
export function colorize(out: Uint32Array, outOffset: number, src: Float32Array, srcOffset: number, n: number, lo: number, hi: number): void {
  const scale = hi > lo ? (COLORMAP_SIZE - 1) / (hi - lo) : 0;
  const lut = COLORMAP_PACKED;
  const top = COLORMAP_SIZE - 1;
  for (let i = 0; i < n; i++) {
    const v = src[srcOffset + i];
    if (v !== v) {
      out[outOffset + i] = NO_DATA_PACKED;
      continue;
    }
    out[outOffset + i] = v <= lo ? lut[0] : v >= hi ? lut[top] : lut[((v - lo) * scale) | 0];
  }
}
