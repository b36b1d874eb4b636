import { describe, expect, it } from 'vitest';
import { directionGrid } from '../../server/dsp/steering.ts';
import type { ProcessingParams } from '../../server/engine/params.ts';
import {
  decodeRow,
  encodedRowBytes,
  encodeRow,
  encodeRowInto,
  liveGrid,
  MessageParseError,
  MESSAGES_VERSION,
  parseServerMessage,
  ROW_HEADER_BYTES,
  ROW_MAGIC,
  ROW_REJECT_REASONS,
  RowDecodeError,
  ROW_FLAG_PARTIAL,
  rowByteLength,
  tryDecodeRow,
  type HelloMessage,
  type RowRejectReason,
  type SpectrumRow,
} from '../../shared/messages.ts';

function spectrum(d: number, seed: number): Float32Array {
  const a = new Float32Array(d);
  for (let i = 0; i < d; i++) a[i] = -40 + 30 * Math.sin(0.1 * i + seed);
  return a;
}

const f32 = (x: number) => Math.fround(x);

function row(over: Partial<SpectrumRow> = {}): SpectrumRow {
  return {
    seq: 0xfffffffe,
    sampleIndex: 2 ** 53 - 257,
    emittedAtMs: 1_717_000_000_123.5,
    shedStep: 2,
    normalised: true,
    nAz: 181,
    nEl: 1,
    conventionalDb: spectrum(181, 0),
    mvdrDb: spectrum(181, 1),
    peaks: {
      conventional: [{ azimuthDeg: f32(30.25), elevationDeg: 0, levelDb: f32(-3.5) }],
      mvdr: [
        { azimuthDeg: f32(30.125), elevationDeg: 0, levelDb: f32(-1.25) },
        { azimuthDeg: f32(120.5), elevationDeg: 0, levelDb: f32(-9.75) },
      ],
    },
    // What the decoder always sets (a row written without the flag reads as not partial).
    partial: false,
    ...over,
  };
}

function plain(r: SpectrumRow) {
  return { ...r, conventionalDb: r.conventionalDb && Array.from(r.conventionalDb), mvdrDb: r.mvdrDb && Array.from(r.mvdrDb) };
}

describe('spectrum row codec', () => {
  it('round-trips a row with both methods and peaks, byte length as documented', () => {
    const r = row();
    const bytes = encodeRow(r);
    expect(bytes.byteLength).toBe(ROW_HEADER_BYTES + 2 * 4 * 181 + 3 * 12);
    expect(bytes.byteLength).toBe(rowByteLength(181, 2, 3));
    expect(bytes.byteLength % 4).toBe(0);
    expect(plain(decodeRow(bytes))).toEqual(plain(r));
  });

  it('writes the header fields at the documented offsets, little-endian', () => {
    const bytes = encodeRow(row());
    expect(Array.from(bytes.subarray(0, 4))).toEqual([0x4e, 0x53, 0x52, 0x57]); // "NSRW"
    const dv = new DataView(bytes.buffer);
    expect(dv.getUint32(0, true)).toBe(ROW_MAGIC);
    expect(bytes[4]).toBe(1);
    expect(bytes[5]).toBe(0b111);
    expect(bytes[6]).toBe(2);
    expect(bytes[7]).toBe(0);
    expect(dv.getUint32(8, true)).toBe(0xfffffffe);
    expect(dv.getFloat64(12, true)).toBe(2 ** 53 - 257);
    expect(dv.getFloat64(20, true)).toBe(1_717_000_000_123.5);
    expect(dv.getUint32(28, true)).toBe(181);
    expect([dv.getUint16(32, true), dv.getUint16(34, true), dv.getUint16(36, true), dv.getUint16(38, true)]).toEqual([181, 1, 1, 2]);
    expect(dv.getFloat32(40, true)).toBe(row().conventionalDb![0]);
    expect(dv.getFloat32(40 + 4 * 181, true)).toBe(row().mvdrDb![0]);
    expect(dv.getFloat32(40 + 8 * 181, true)).toBe(f32(30.25));
  });

  it('round-trips one method only (either), with flags saying which', () => {
    for (const which of ['conventional', 'mvdr'] as const) {
      const r = row({
        normalised: false,
        shedStep: 0,
        conventionalDb: which === 'conventional' ? spectrum(181, 2) : null,
        mvdrDb: which === 'mvdr' ? spectrum(181, 3) : null,
        peaks: { conventional: [], mvdr: [] },
      });
      r.peaks[which] = [{ azimuthDeg: 90, elevationDeg: 0, levelDb: 0 }];
      const bytes = encodeRow(r);
      expect(bytes.byteLength).toBe(rowByteLength(181, 1, 1));
      expect(bytes[5]).toBe(which === 'conventional' ? 1 : 2);
      expect(plain(decodeRow(bytes))).toEqual(plain(r));
    }
  });

  it('round-trips a 2-D grid (72 × 19) with peaks at elevation', () => {
    const r = row({
      nAz: 72,
      nEl: 19,
      conventionalDb: spectrum(72 * 19, 4),
      mvdrDb: spectrum(72 * 19, 5),
      peaks: { conventional: [{ azimuthDeg: 45, elevationDeg: f32(30.5), levelDb: -2 }], mvdr: [{ azimuthDeg: 45, elevationDeg: f32(29.75), levelDb: -1 }] },
    });
    const d = decodeRow(encodeRow(r));
    expect(d.mvdrDb!.length).toBe(1368);
    expect(plain(d)).toEqual(plain(r));
  });

  it('accepts float64 spectra from the engine and rounds them to float32', () => {
    const conv = new Float64Array(8).map((_, i) => -10.123456789 * i);
    const r = { ...row({ nAz: 8, peaks: { conventional: [], mvdr: [] }, mvdrDb: null }), conventionalDb: conv };
    const d = decodeRow(encodeRow(r));
    expect(Array.from(d.conventionalDb!)).toEqual(Array.from(conv, f32));
  });

  it('returns Float32Array views into the message when it is aligned, copies when it is not', () => {
    const bytes = encodeRow(row());
    const d = decodeRow(bytes);
    expect(d.conventionalDb!.buffer).toBe(bytes.buffer);
    expect(d.mvdrDb!.byteOffset).toBe(ROW_HEADER_BYTES + 4 * 181);
    // The same bytes one byte into a buffer: still decodes, into copies.
    const shifted = new Uint8Array(bytes.byteLength + 1).subarray(1);
    shifted.set(bytes);
    const s = decodeRow(shifted);
    expect(s.conventionalDb!.buffer).not.toBe(shifted.buffer);
    expect(plain(s)).toEqual(plain(d));
  });

  it('encodeRowInto writes into a reused buffer at any offset and reports the length', () => {
    const r = row();
    const n = encodedRowBytes(r);
    for (const offset of [0, 4, 3]) {
      const out = new Uint8Array(n + 16).subarray(offset);
      expect(encodeRowInto(out, r)).toBe(n);
      expect(out.subarray(0, n)).toEqual(encodeRow(r));
    }
    expect(() => encodeRowInto(new Uint8Array(n - 1), r)).toThrow(RangeError);
  });

  it('refuses rows it cannot encode, naming the field', () => {
    const bad: [Partial<SpectrumRow>, RegExp][] = [
      [{ seq: 2 ** 32 }, /^seq/],
      [{ sampleIndex: -1 }, /^sampleIndex/],
      [{ sampleIndex: 1.5 }, /^sampleIndex/],
      [{ emittedAtMs: NaN }, /^emittedAtMs/],
      [{ shedStep: 256 }, /^shedStep/],
      [{ partial: 1 as unknown as boolean }, /^partial must be a boolean/],
      [{ nAz: 0 }, /^nAz/],
      [{ nEl: 65536 }, /^nEl/],
      [{ mvdrDb: new Float32Array(180) }, /^mvdrDb has 180 values, nAz·nEl = 181/],
      [{ conventionalDb: null }, /^peaks\.conventional: 1 peaks for a method that is absent/],
      [{ conventionalDb: null, mvdrDb: null, peaks: { conventional: [], mvdr: [] } }, /needs conventionalDb or mvdrDb/],
    ];
    for (const [over, msg] of bad) expect(() => encodeRow(row(over)), JSON.stringify(Object.keys(over))).toThrow(msg);
  });

  it('names the reason for every kind of bad message', () => {
    const good = encodeRow(row());
    const mutate = (f: (b: Uint8Array, dv: DataView) => void, b = good.slice()) => {
      f(b, new DataView(b.buffer, b.byteOffset, b.byteLength));
      return b;
    };
    const cases: [Uint8Array, RowRejectReason, RegExp][] = [
      [good.subarray(0, 39), 'short_header', /39 bytes, a header needs 40/],
      [mutate((_, dv) => dv.setUint32(0, 0x5246534e, true)), 'bad_magic', /0x5246534e/],
      [mutate((b) => (b[4] = 2)), 'bad_version', /version 2/],
      [mutate((b) => (b[5] = 0b100)), 'bad_field', /no method present/],
      [mutate((_, dv) => dv.setFloat64(12, -1, true)), 'bad_field', /sampleIndex/],
      [mutate((_, dv) => dv.setFloat64(20, Infinity, true)), 'bad_field', /emittedAtMs/],
      [mutate((_, dv) => dv.setUint32(28, 180, true)), 'bad_field', /directions 180 ≠ nAz·nEl = 181/],
      [mutate((_, dv) => dv.setUint16(34, 0, true)), 'bad_field', /both must be ≥ 1/],
      [mutate((b) => (b[5] = 0b110)), 'bad_field', /conventional peaks but no conventional spectrum/],
      [good.subarray(0, good.byteLength - 4), 'truncated', /header announces/],
      [mutate((b, dv) => dv.setUint16(38, 3, true)), 'truncated', /header announces/],
      [(() => { const b = new Uint8Array(good.byteLength + 4); b.set(good); return b; })(), 'trailing_bytes', /header announces/],
    ];
    const seen = new Set<string>();
    for (const [bytes, reason, detail] of cases) {
      const r = tryDecodeRow(bytes);
      expect(r.ok).toBe(false);
      if (r.ok) continue;
      expect(r.reason).toBe(reason);
      expect(r.detail).toMatch(detail);
      seen.add(r.reason);
      let thrown: unknown;
      try {
        decodeRow(bytes);
      } catch (e) {
        thrown = e;
      }
      expect(thrown).toBeInstanceOf(RowDecodeError);
      expect(thrown).toBeInstanceOf(RangeError);
      expect((thrown as RowDecodeError).reason).toBe(reason);
      expect((thrown as RowDecodeError).code).toBe('ERR_ROW_INVALID');
    }
    expect([...seen].sort()).toEqual([...ROW_REJECT_REASONS].sort());
  });

  it('ignores reserved flag bits and the reserved byte', () => {
    const b = encodeRow(row());
    b[5] |= 0xf0;
    b[7] = 9;
    expect(plain(decodeRow(b))).toEqual(plain(row()));
  });

  it('round-trips the partial flag as bit 3 of the flags byte (issue 17), other bits unchanged', () => {
    const r = row({ partial: true });
    const bytes = encodeRow(r);
    expect(ROW_FLAG_PARTIAL).toBe(8);
    expect(bytes[5]).toBe(0b1111);
    expect(bytes.byteLength).toBe(rowByteLength(181, 2, 3));
    const d = decodeRow(bytes);
    expect(d.partial).toBe(true);
    expect(plain(d)).toEqual(plain(r));
    // partial false and partial absent both write the bit as 0, and read back as false.
    for (const over of [{ partial: false }, { partial: undefined }]) {
      const b = encodeRow(row(over));
      expect(b[5]).toBe(0b0111);
      expect(decodeRow(b).partial).toBe(false);
    }
    // One method only, partial: the method bits stay as they were.
    const one = row({ partial: true, conventionalDb: null, peaks: { conventional: [], mvdr: [] } });
    expect(encodeRow(one)[5]).toBe(0b1110);
    expect(plain(decodeRow(encodeRow(one)))).toEqual(plain(one));
  });

  it('reads a row an earlier writer made (bit 3 written 0, built by hand from the layout) as not partial', () => {
    // The header of the layout in shared/messages.ts, written field by field without the encoder:
    // 4 directions, conventional only, no peaks; flags 0b001 as a writer before issue 17 sets them.
    const d = 4;
    const b = new Uint8Array(40 + 4 * d);
    const dv = new DataView(b.buffer);
    dv.setUint32(0, 0x5752534e, true);
    b[4] = 1;
    b[5] = 0b001;
    dv.setUint32(8, 7, true);
    dv.setFloat64(12, 4800, true);
    dv.setFloat64(20, 1_717_000_000_000, true);
    dv.setUint32(28, d, true);
    dv.setUint16(32, d, true);
    dv.setUint16(34, 1, true);
    for (let i = 0; i < d; i++) dv.setFloat32(40 + 4 * i, -10 - i, true);
    const old = decodeRow(b);
    expect(old.partial).toBe(false);
    expect(Array.from(old.conventionalDb!)).toEqual([-10, -11, -12, -13]);
    // The same bytes with bit 3 set: partial, nothing else changes.
    b[5] |= 8;
    const p = decodeRow(b);
    expect(p.partial).toBe(true);
    expect({ ...plain(p), partial: false }).toEqual(plain(old));
  });
});

const PARAMS: ProcessingParams = {
  lambda: 0.99,
  loading: { mode: 'relative-db', db: -20 },
  bandHz: [300, 6000],
  grid: { azimuthDeg: { startDeg: 0, stopDeg: 355, stepDeg: 5 }, elevationDeg: { startDeg: 0, stopDeg: 90, stepDeg: 5 } },
  methods: ['conventional', 'mvdr'],
  spectrumRateHz: 10,
  normalise: false, fftSize: 512,
};

function hello(): HelloMessage {
  return {
    type: 'hello',
    version: MESSAGES_VERSION,
    grid: liveGrid(PARAMS.grid),
    params: PARAMS,
    array: { name: 'square-4', positions: [[0, 0, 0], [0.1, 0, 0], [0, 0.1, 0], [0.1, 0.1, 0]] },
    derived: { tauS: 0.533, hopSamples: 256, sampleRateHz: 48000, directions: 1368, bins: 61 },
  };
}

describe('JSON server messages', () => {
  it('parses hello, params and status back to what was sent', () => {
    const msgs = [
      hello(),
      { ...hello(), array: { ...hello().array, calibration: { gainDbMax: 1.5, delayUsMax: 25 } } },
      { type: 'params' as const, params: { ...PARAMS, grid: { azimuthDeg: { startDeg: 0, stopDeg: 180, stepDeg: 1 } } } },
      { type: 'status' as const, emittedAtMs: 1.5e12, status: { shedStep: 1 } },
    ];
    for (const m of msgs) expect(parseServerMessage(JSON.stringify(m))).toEqual(m);
  });

  it('liveGrid gives the axes server/dsp/steering.ts builds', () => {
    for (const spec of [PARAMS.grid, { azimuthDeg: { startDeg: 0, stopDeg: 359, stepDeg: 1 } }, { azimuthDeg: { startDeg: 0, stopDeg: 1, stepDeg: 0.1 } }]) {
      const g = liveGrid(spec);
      const ref = directionGrid(spec);
      expect([g.nAz, g.nEl]).toEqual([ref.nAz, ref.nEl]);
      expect(g.azimuthDeg).toEqual(Array.from(ref.azimuthDeg.subarray(0, ref.nAz)));
      expect(g.elevationDeg).toEqual(Array.from({ length: ref.nEl }, (_, i) => ref.elevationDeg[i * ref.nAz]));
    }
  });

  it('refuses malformed messages, naming the field', () => {
    const h = hello();
    const cases: [unknown, string, RegExp][] = [
      ['not json', '(message)', /not JSON/],
      [[1, 2], '(message)', /must be an object/],
      [{ type: 'row' }, 'type', /one of hello, params, status, event, got "row"/],
      [JSON.stringify({ type: 'event', change: 'begun', event: {} }), 'change', /started, updated or ended/],
      [JSON.stringify({ type: 'event', change: 'started', event: { id: 1 } }), 'event.id', /must be a string/],
      [{ ...h, version: 2 }, 'version', /2, this client reads 1/],
      [{ ...h, grid: { ...h.grid, nAz: 71 } }, 'grid.azimuthDeg', /has 72 values, expected 71/],
      [{ ...h, grid: { ...h.grid, elevationDeg: [0, 'x'] } }, 'grid.elevationDeg', /has 2 values/],
      [{ ...h, array: { name: 'x', positions: [[0, 0]] } }, 'array.positions[0]', /expected 3/],
      [{ ...h, array: { ...h.array, calibration: { gainDbMax: 'x', delayUsMax: 0 } } }, 'array.calibration.gainDbMax', /finite number/],
      [{ type: 'params', params: { ...PARAMS, lambda: '0.9' } }, 'params.lambda', /finite number/],
      [{ type: 'params', params: { ...PARAMS, loading: { mode: 'auto' } } }, 'params.loading.mode', /one of relative/],
      [{ type: 'params', params: { ...PARAMS, loading: { mode: 'fixed' } } }, 'params.loading.delta', /finite number/],
      [{ type: 'params', params: { ...PARAMS, methods: ['music'] } }, 'params.methods', /conventional, mvdr/],
      [{ type: 'params', params: { ...PARAMS, grid: {} } }, 'params.grid.azimuthDeg', /object/],
      [{ type: 'params', params: PARAMS, derived: { tauS: 1 } }, 'derived.hopSamples', /finite number/],
      [{ type: 'status', emittedAtMs: 1 }, 'status', /object/],
    ];
    for (const [value, field, msg] of cases) {
      const text = typeof value === 'string' ? value : JSON.stringify(value);
      let err: unknown;
      try {
        parseServerMessage(text);
      } catch (e) {
        err = e;
      }
      expect(err, text).toBeInstanceOf(MessageParseError);
      expect(err).toBeInstanceOf(TypeError);
      expect((err as MessageParseError).field).toBe(field);
      expect((err as Error).message.startsWith(`${field}: `)).toBe(true);
      expect((err as Error).message).toMatch(msg);
    }
  });

  it('tolerates extra fields a newer server may add', () => {
    const m = { ...hello(), extra: 1, params: { ...PARAMS, future: true } };
    expect(parseServerMessage(JSON.stringify(m))).toEqual(m);
  });
});
