/** The PNG writer: CRC-32 against its published check value, chunk layout, pixels back through zlib. */
import { inflateSync } from 'node:zlib';
import { describe, expect, it } from 'vitest';
import { crc32, encodePng } from '../../server/io/png.ts';

describe('PNG writer', () => {
  it('CRC-32 gives the standard check value and the well-known IEND CRC', () => {
    // "123456789" → 0xCBF43926: the check value of CRC-32 (ISO 3309 / ITU-T V.42), common practice.
    expect(crc32(new TextEncoder().encode('123456789'))).toBe(0xcbf43926);
    // Every PNG ends with the same IEND chunk, CRC AE 42 60 82 (from memory).
    expect(crc32(new TextEncoder().encode('IEND'))).toBe(0xae426082);
  });

  it('writes signature, IHDR (8-bit truecolour), one IDAT with filter-0 scanlines, IEND', () => {
    const rgb = Uint8Array.from({ length: 3 * 2 * 3 }, (_, i) => (i * 37) & 255);
    const png = Buffer.from(encodePng(3, 2, rgb));
    expect([...png.subarray(0, 8)]).toEqual([0x89, 0x50, 0x4e, 0x47, 0x0d, 0x0a, 0x1a, 0x0a]);
    expect(png.readUInt32BE(8)).toBe(13);
    expect(png.toString('latin1', 12, 16)).toBe('IHDR');
    expect([png.readUInt32BE(16), png.readUInt32BE(20), png[24], png[25], png[26], png[27], png[28]]).toEqual([3, 2, 8, 2, 0, 0, 0]);
    expect(png.readUInt32BE(29)).toBe(crc32(png, 12, 29));
    const idatLen = png.readUInt32BE(33);
    expect(png.toString('latin1', 37, 41)).toBe('IDAT');
    const raw = inflateSync(png.subarray(41, 41 + idatLen));
    expect([...raw]).toEqual([0, ...rgb.subarray(0, 9), 0, ...rgb.subarray(9)]);
    expect([...png.subarray(png.length - 12)]).toEqual([0, 0, 0, 0, 0x49, 0x45, 0x4e, 0x44, 0xae, 0x42, 0x60, 0x82]);
    expect(() => encodePng(3, 2, new Uint8Array(5))).toThrow(RangeError);
  });
});
