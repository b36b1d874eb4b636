import { readFileSync } from 'node:fs';
import { describe, expect, it } from 'vitest';
import {
  decodeFrame,
  decodeInterleaved,
  decodeSamples,
  decodeSamplesChecked,
  decodeSamplesInto,
  encodeFrame,
  encodeFrameRaw,
  FRAME_HEADER_BYTES,
  frameBytes,
  maxSamplesPerFrame,
  MAX_FRAME_BYTES,
  SAMPLE_ENCODINGS,
  type DecodedFrame,
  type FrameHeader,
} from '../../shared/frame.ts';

const H: FrameHeader = { streamId: 7, sequence: 3, firstSample: 960, sampleRateHz: 48000, channels: 2, samplesPerChannel: 2, encoding: 'int16' };

function decoded(bytes: Uint8Array): DecodedFrame {
  const r = decodeFrame(bytes);
  if (!r.ok) throw new Error(`${r.reason}: ${r.detail}`);
  return r.frame;
}

describe('frame codec', () => {
  it('matches the worked example in docs/wire-format.md byte for byte', () => {
    const doc = readFileSync(new URL('../../docs/wire-format.md', import.meta.url), 'utf8');
    const block = doc.slice(doc.indexOf('```\n4e') + 4, doc.lastIndexOf('```'));
    const expected = Uint8Array.from(block.trim().split(/\s+/).map((h) => parseInt(h, 16)));
    expect(encodeFrame(H, [0.5, -0.25, 0, 1.0])).toEqual(expected);
  });

  it('round-trips header fields including a large sample index and wrapped sequence', () => {
    const h = { ...H, streamId: 0xffffffff, sequence: 0xfffffffe, firstSample: 2 ** 53 - 1 - 2, sampleRateHz: 384000, encoding: 'int32' as const };
    const f = decoded(encodeFrame(h, [0, 0, 0, 0]));
    expect({ ...f, payload: undefined, version: undefined }).toEqual({ ...h, payload: undefined, version: undefined });
    expect(f.version).toBe(1);
  });

  for (const enc of SAMPLE_ENCODINGS) {
    it(`${enc}: decodes to planar full-scale floats within half a step, extremes included`, () => {
      const m = 3;
      const n = 50;
      const x = new Float32Array(m * n);
      for (let k = 0; k < x.length; k++) x[k] = Math.sin(k * 0.37) * 0.999;
      x[0] = -1;
      x[1] = 32767 / 32768; // the largest int16 value: every encoding holds it exactly
      const bytes = encodeFrame({ ...H, channels: m, samplesPerChannel: n, encoding: enc }, x);
      expect(bytes.byteLength).toBe(frameBytes(m, n, enc));
      const out = new Float32Array(m * n);
      expect(decodeSamples(decoded(bytes), out)).toBe(true);
      const bits = { int16: 16, int24: 24, int32: 32, float32: 0 }[enc];
      const tol = bits ? 0.5 / 2 ** (bits - 1) + 6e-8 : 0;
      for (let i = 0; i < n; i++) for (let c = 0; c < m; c++) expect(Math.abs(out[c * n + i] - x[i * m + c])).toBeLessThanOrEqual(tol);
      expect(out[0]).toBe(-1);
    });
  }

  it('decodes the same from aligned and unaligned payloads, and finds NaN/Inf in both', () => {
    // The aligned case reads through typed-array views, the unaligned one through DataView.
    const m = 5;
    const n = 33;
    const f = new Float32Array(m * n);
    for (let k = 0; k < f.length; k++) f[k] = Math.cos(k * 1.3) * 0.9;
    const q = new Int16Array(m * n);
    for (let k = 0; k < q.length; k++) q[k] = Math.round(Math.sin(k * 0.7) * 32767);
    for (const [enc, src] of [['float32', new Uint8Array(f.buffer)], ['int16', new Uint8Array(q.buffer)]] as const) {
      const aligned = new Uint8Array(src.byteLength + 8);
      aligned.set(src, 4);
      const unaligned = new Uint8Array(src.byteLength + 8);
      unaligned.set(src, 1);
      const a = new Float32Array(m * n);
      const b = new Float32Array(m * n);
      expect(decodeInterleaved(aligned.subarray(4, 4 + src.byteLength), m, n, enc, a)).toBe(true);
      expect(decodeInterleaved(unaligned.subarray(1, 1 + src.byteLength), m, n, enc, b)).toBe(true);
      expect(b).toEqual(a);
      const ref = enc === 'float32' ? f : Float32Array.from(q, (v) => v / 32768);
      for (let i = 0; i < n; i++) for (let c = 0; c < m; c++) expect(a[c * n + i]).toBe(ref[i * m + c]);
    }
    for (const bad of [Number.NaN, Number.POSITIVE_INFINITY, Number.NEGATIVE_INFINITY]) {
      const g = f.slice();
      g[m * n - 2] = bad;
      const bytes = new Uint8Array(g.buffer);
      const unaligned = new Uint8Array(bytes.byteLength + 1);
      unaligned.set(bytes, 1);
      expect(decodeInterleaved(bytes, m, n, 'float32', new Float32Array(m * n))).toBe(false);
      expect(decodeInterleaved(unaligned.subarray(1), m, n, 'float32', new Float32Array(m * n))).toBe(false);
    }
  });

  it('refuses float32 samples beyond a level bound, and names which check failed', () => {
    // +60 dBFS as an amplitude: 10^(60/20) = 1000 full-scale units (dB of an amplitude ratio,
    // 20·log10; common practice). 1000 is exact in float32, so the bound itself is accepted.
    const bound = 10 ** (60 / 20);
    expect(bound).toBe(1000);
    const m = 3;
    const n = 7;
    const at = (v: number, k = m * n - 2) => {
      const x = new Float32Array(m * n).fill(0.25);
      x[k] = v;
      return x;
    };
    for (const aligned of [true, false]) {
      const check = (x: Float32Array) => {
        const bytes = encodeFrame({ ...H, channels: m, samplesPerChannel: n, encoding: 'float32' }, x);
        // An odd header length moves the payload off 4-byte alignment: the DataView path runs.
        const b = aligned ? bytes : Uint8Array.from([...bytes.subarray(0, FRAME_HEADER_BYTES), 0, ...bytes.subarray(FRAME_HEADER_BYTES)]);
        if (!aligned) new DataView(b.buffer).setUint16(6, FRAME_HEADER_BYTES + 1, true);
        return decodeSamplesChecked(decoded(b), new Float32Array(m * n), bound);
      };
      expect(check(at(3e38)), 'the frame of issue 12').toBe('beyond_bound');
      expect(check(at(-3e38))).toBe('beyond_bound');
      expect(check(at(1000))).toBe('ok');
      expect(check(at(-1000))).toBe('ok');
      expect(check(at(1000.001))).toBe('beyond_bound'); // float32 rounds it to 1000.0009765625
      expect(check(at(Number.NaN))).toBe('non_finite');
      expect(check(at(Number.NEGATIVE_INFINITY, 0))).toBe('non_finite');
      expect(check(at(0.5))).toBe('ok');
    }
    // Integers never exceed full scale: the bound does not apply to them.
    const q = decoded(encodeFrame({ ...H, channels: 1, samplesPerChannel: 2, encoding: 'int16' }, [-1, 32767 / 32768]));
    expect(decodeSamplesChecked(q, new Float32Array(2), 0.5)).toBe('ok');
    // Without a bound only non-finite values are refused (what decodeSamples checks).
    const big = decoded(encodeFrame({ ...H, channels: 1, samplesPerChannel: 2, encoding: 'float32' }, [3e38, -3e38]));
    expect(decodeSamplesChecked(big, new Float32Array(2))).toBe('ok');
    expect(decodeSamples(big, new Float32Array(2))).toBe(true);
  });

  it('decodes into a wider planar buffer at an offset exactly as into its own', () => {
    for (const enc of SAMPLE_ENCODINGS) {
      const m = 3;
      const n = 5;
      const x = Array.from({ length: m * n }, (_, k) => Math.sin(k) * 0.7);
      const f = decoded(encodeFrame({ ...H, channels: m, samplesPerChannel: n, encoding: enc }, x));
      const own = new Float32Array(m * n);
      expect(decodeSamplesChecked(f, own, 1000)).toBe('ok');
      const stride = 16;
      const wide = new Float32Array(m * stride).fill(-9);
      expect(decodeSamplesInto(f, wide, stride, 7, 1000)).toBe('ok');
      for (let c = 0; c < m; c++) {
        for (let i = 0; i < stride; i++) expect(wide[c * stride + i]).toBe(i >= 7 && i < 7 + n ? own[c * n + i - 7] : -9);
      }
      expect(() => decodeSamplesInto(f, wide, stride, 12, 1000)).toThrow(RangeError); // 12 + 5 > 16
    }
  });

  it('reads firstSample up to 2^53 − 1 exactly and refuses 2^53', () => {
    const at = (v: bigint) => {
      const b = encodeFrame(H, [0, 0, 0, 0]);
      new DataView(b.buffer).setBigUint64(16, v, true);
      return decodeFrame(b);
    };
    const ok = at(2n ** 53n - 1n);
    expect(ok.ok && ok.frame.firstSample).toBe(2 ** 53 - 1);
    const mid = at(2n ** 32n + 5n); // both halves of the field in use
    expect(mid.ok && mid.frame.firstSample).toBe(2 ** 32 + 5);
    const over = at(2n ** 53n);
    expect(over.ok).toBe(false);
    if (!over.ok) expect(over.detail).toMatch(/9007199254740992/);
  });

  it('sign-extends int24 and clips out-of-range input to the encoding range', () => {
    const f = decoded(encodeFrame({ ...H, channels: 1, samplesPerChannel: 4, encoding: 'int24' }, [-1 / 8388608, 2, -2, 0.5]));
    expect(Array.from(f.payload)).toEqual([0xff, 0xff, 0xff, 0xff, 0xff, 0x7f, 0x00, 0x00, 0x80, 0x00, 0x00, 0x40]);
    const out = new Float32Array(4);
    decodeSamples(f, out);
    expect(Array.from(out)).toEqual([-1 / 8388608, 8388607 / 8388608, -1, 0.5]);
  });

  it('passes raw payload bytes through unchanged', () => {
    const payload = Uint8Array.from([1, 2, 3, 4, 5, 6, 7, 8]);
    const f = decoded(encodeFrameRaw(H, payload));
    expect(Array.from(f.payload)).toEqual(Array.from(payload));
    expect(() => encodeFrameRaw(H, payload.subarray(1))).toThrow(RangeError);
  });

  it('names the reason for every kind of bad datagram', () => {
    const good = encodeFrame(H, [0, 0, 0, 0]);
    const mutate = (f: (b: Uint8Array, dv: DataView) => void) => {
      const b = good.slice();
      f(b, new DataView(b.buffer));
      return b;
    };
    const cases: [Uint8Array, string][] = [
      [good.subarray(0, 31), 'short_header'],
      [mutate((b) => (b[3] = 0)), 'bad_magic'],
      [mutate((b) => (b[4] = 2)), 'bad_version'],
      [mutate((b) => (b[5] = 9)), 'bad_encoding'],
      [mutate((_, dv) => dv.setUint16(6, 16, true)), 'bad_header_length'],
      [mutate((_, dv) => dv.setUint16(6, 400, true)), 'bad_header_length'],
      [mutate((_, dv) => dv.setUint32(24, 0, true)), 'bad_field'],
      [mutate((_, dv) => dv.setUint16(28, 0, true)), 'bad_field'],
      [mutate((_, dv) => dv.setUint16(30, 0, true)), 'bad_field'],
      [mutate((_, dv) => dv.setBigUint64(16, 2n ** 60n, true)), 'bad_field'],
      [good.subarray(0, good.length - 1), 'truncated'],
      [Uint8Array.from([...good, 0]), 'trailing_bytes'],
    ];
    for (const [bytes, reason] of cases) {
      const r = decodeFrame(bytes);
      expect(r.ok, reason).toBe(false);
      if (!r.ok) {
        expect(r.reason).toBe(reason);
        expect(r.detail.length).toBeGreaterThan(3);
      }
    }
    const nan = decoded(encodeFrame({ ...H, encoding: 'float32' }, [0, Number.NaN, 0, 0]));
    expect(decodeSamples(nan, new Float32Array(4))).toBe(false);
  });

  it('skips header bytes it does not know (forward compatibility)', () => {
    const good = encodeFrame(H, [0.5, -0.25, 0, 0.75]);
    const longer = new Uint8Array(good.length + 8);
    longer.set(good.subarray(0, FRAME_HEADER_BYTES));
    longer.set(good.subarray(FRAME_HEADER_BYTES), FRAME_HEADER_BYTES + 8);
    new DataView(longer.buffer).setUint16(6, FRAME_HEADER_BYTES + 8, true);
    const out = new Float32Array(4);
    decodeSamples(decoded(longer), out);
    expect(Array.from(out)).toEqual([0.5, 0, -0.25, 0.75]);
  });

  it('sizes frames for the MTU and refuses frames beyond the UDP limit', () => {
    expect(maxSamplesPerFrame(24, 'int16')).toBe(30); // (1472 − 32) / 48
    expect(frameBytes(24, 30, 'int16')).toBeLessThanOrEqual(1472);
    expect(frameBytes(24, 31, 'int16')).toBeGreaterThan(1472);
    expect(maxSamplesPerFrame(1024, 'float32')).toBe(1);
    expect(() => encodeFrame({ ...H, channels: 64, samplesPerChannel: 256, encoding: 'float32' }, new Float32Array(64 * 256))).toThrow(RangeError);
    expect(frameBytes(64, 255, 'float32')).toBeLessThanOrEqual(MAX_FRAME_BYTES);
    expect(() => encodeFrame({ ...H, sequence: -1 }, [0, 0, 0, 0])).toThrow(/sequence/);
    expect(() => encodeFrame({ ...H, firstSample: 1.5 }, [0, 0, 0, 0])).toThrow(/firstSample/);
  });
});
