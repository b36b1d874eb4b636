/**
 * A PNG reader for tests (ISO/IEC 15948, the PNG specification): 8-bit truecolour (type 2) or
 * truecolour with alpha (type 6), no interlace; the IDAT chunks concatenated and inflated, each
 * scanline unfiltered by its filter type (§9.2: None, Sub, Up, Average, Paeth, the Paeth predictor
 * as §9.4 gives it). Enough to read the server's own PNGs and the ones Chromium's canvas writes.
 */
import { inflateSync } from 'node:zlib';

export interface DecodedPng {
  width: number;
  height: number;
  /** Always RGBA, width × height × 4 bytes (alpha 255 for truecolour files). */
  rgba: Uint8Array;
}

const SIGNATURE = [0x89, 0x50, 0x4e, 0x47, 0x0d, 0x0a, 0x1a, 0x0a];

export function decodePng(bytes: Uint8Array): DecodedPng {
  const b = Buffer.from(bytes.buffer, bytes.byteOffset, bytes.byteLength);
  if (SIGNATURE.some((v, i) => b[i] !== v)) throw new Error('not a PNG (signature)');
  let off = 8;
  let width = 0;
  let height = 0;
  let colourType = -1;
  const idat: Buffer[] = [];
  while (off + 8 <= b.length) {
    const len = b.readUInt32BE(off);
    const type = b.toString('latin1', off + 4, off + 8);
    const data = b.subarray(off + 8, off + 8 + len);
    if (type === 'IHDR') {
      width = data.readUInt32BE(0);
      height = data.readUInt32BE(4);
      const depth = data[8];
      colourType = data[9];
      if (depth !== 8 || (colourType !== 2 && colourType !== 6) || data[12] !== 0) throw new Error(`unsupported PNG: depth ${depth}, colour type ${colourType}, interlace ${data[12]}`);
    } else if (type === 'IDAT') idat.push(data);
    else if (type === 'IEND') break;
    off += 12 + len;
  }
  const bpp = colourType === 6 ? 4 : 3;
  const stride = width * bpp;
  const raw = inflateSync(Buffer.concat(idat));
  if (raw.length !== height * (stride + 1)) throw new Error(`${raw.length} bytes inflated for ${width}×${height}×${bpp}`);
  const px = new Uint8Array(height * stride);
  for (let y = 0; y < height; y++) {
    const f = raw[y * (stride + 1)];
    const line = raw.subarray(y * (stride + 1) + 1, (y + 1) * (stride + 1));
    const o = y * stride;
    for (let i = 0; i < stride; i++) {
      const a = i >= bpp ? px[o + i - bpp] : 0;
      const up = y > 0 ? px[o - stride + i] : 0;
      const c = y > 0 && i >= bpp ? px[o - stride + i - bpp] : 0;
      let pred = 0;
      if (f === 1) pred = a;
      else if (f === 2) pred = up;
      else if (f === 3) pred = (a + up) >> 1;
      else if (f === 4) {
        const p = a + up - c;
        const pa = Math.abs(p - a);
        const pb = Math.abs(p - up);
        const pc = Math.abs(p - c);
        pred = pa <= pb && pa <= pc ? a : pb <= pc ? up : c;
      } else if (f !== 0) throw new Error(`row ${y}: filter type ${f}`);
      px[o + i] = (line[i] + pred) & 255;
    }
  }
  if (bpp === 4) return { width, height, rgba: px };
  const rgba = new Uint8Array(width * height * 4);
  for (let i = 0, j = 0; i < px.length; i += 3, j += 4) {
    rgba[j] = px[i];
    rgba[j + 1] = px[i + 1];
    rgba[j + 2] = px[i + 2];
    rgba[j + 3] = 255;
  }
  return { width, height, rgba };
}
