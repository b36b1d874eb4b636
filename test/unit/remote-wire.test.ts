/**
 * The remote-worker messages (server/cluster/remote-wire.ts): round trips through the documented
 * layouts, float32 rounding of snapshots within IEEE 754 binary32's half an ulp (u = 2⁻²⁴ relative,
 * round to nearest), every malformed input refused with a reason (never a throw), and the weighted
 * split of the band over parts of different speeds.
 */
import { describe, expect, it } from 'vitest';
import {
  AlignedScratch,
  encodeJson,
  HOP_BATCH_MAX,
  HOP_META_DOUBLES,
  HopBatchWriter,
  parseCtrl,
  parseHello,
  parseHopBatch,
  parsePart,
  parsePlan,
  parsePlanReply,
  partBytes,
  writePart,
  type RemotePlan,
} from '../../server/cluster/remote-wire.ts';
import { splitBins, splitBinsWeighted } from '../../server/engine/pool.ts';
import { mulberry32 } from '../helpers/random.ts';

const LIMITS = { maxChannels: 4096, maxBins: 4096 };

describe('hop batches', () => {
  it('round-trip meta exactly and snapshots rounded to float32 (relative error ≤ 2⁻²⁴)', () => {
    const M = 5;
    const B = 3;
    const w = new HopBatchWriter(M, B, 4);
    const rand = mulberry32(7);
    const metas: number[][] = [];
    const snaps: Float64Array[] = [];
    w.begin(9, 2, 1234);
    for (let h = 0; h < 3; h++) {
      const meta = [1000 + 256 * h, 0.98, h === 2 ? 3 : 0, 17 + h, 0, 0.01, 0];
      const snap = Float64Array.from({ length: 2 * M * B + 10 }, () => (rand() - 0.5) * 10 ** (6 * rand() - 3));
      metas.push(meta);
      snaps.push(snap);
      w.add(Float64Array.from([0, 0, ...meta]), 2, snap, 10);
    }
    const bytes = w.finish().slice(); // copied: an 8-aligned buffer of its own
    const r = parseHopBatch(bytes, LIMITS);
    expect(r.ok).toBe(true);
    if (!r.ok) return;
    expect(r.value).toMatchObject({ epoch: 9, part: 2, firstSeq: 1234, hops: 3, bins: B, channels: M });
    for (let h = 0; h < 3; h++) {
      expect(Array.from(r.value.meta.subarray(h * HOP_META_DOUBLES, (h + 1) * HOP_META_DOUBLES))).toEqual(metas[h]);
      for (let i = 0; i < 2 * M * B; i++) {
        const x = snaps[h][10 + i];
        const y = r.value.snaps[h * 2 * M * B + i];
        expect(y).toBe(Math.fround(x));
        expect(Math.abs(y - x)).toBeLessThanOrEqual(Math.abs(x) * 2 ** -24);
      }
    }
  });

  it('refuses truncated, resized, foreign and out-of-range batches with a reason', () => {
    const w = new HopBatchWriter(2, 2, HOP_BATCH_MAX);
    w.begin(1, 0, 0);
    w.add(new Float64Array(7), 0, new Float64Array(8), 0);
    const good = w.finish().slice();
    expect(parseHopBatch(good, LIMITS).ok).toBe(true);
    const reasons = (b: Uint8Array, limits = LIMITS) => {
      const r = parseHopBatch(b, limits);
      return r.ok ? 'ok' : r.reason;
    };
    expect(reasons(good.subarray(0, 20))).toBe('truncated');
    expect(reasons(good.slice(0, good.length - 8))).toBe('size');
    const extra = new Uint8Array(good.length + 8);
    extra.set(good);
    expect(reasons(extra)).toBe('size');
    const bad = (f: (dv: DataView) => void) => {
      const c = good.slice();
      f(new DataView(c.buffer));
      return reasons(c);
    };
    expect(bad((dv) => dv.setUint32(0, 0x12345678, true))).toBe('magic');
    expect(bad((dv) => dv.setUint16(4, 2, true))).toBe('version');
    expect(bad((dv) => dv.setUint16(6, 0, true))).toBe('field');
    expect(bad((dv) => dv.setUint16(6, HOP_BATCH_MAX + 1, true))).toBe('field');
    expect(bad((dv) => dv.setFloat64(24, -1, true))).toBe('field');
    expect(bad((dv) => dv.setFloat64(24, 0.5, true))).toBe('field');
    expect(reasons(good, { maxChannels: 1, maxBins: 4096 })).toBe('field');
    // Random bytes: always a reason, never a throw.
    const rand = mulberry32(3);
    for (let i = 0; i < 2000; i++) {
      const b = Uint8Array.from({ length: Math.floor(rand() * 200) }, () => Math.floor(rand() * 256));
      if (b.length >= 4 && rand() < 0.5) new DataView(b.buffer).setUint32(0, 0x4842534e, true);
      expect(() => parseHopBatch(new AlignedScratch().align(b), LIMITS)).not.toThrow();
    }
  });

  it('AlignedScratch gives 8-aligned bytes equal to the input', () => {
    const buf = new Uint8Array(40);
    buf.forEach((_, i) => (buf[i] = i));
    const view = buf.subarray(3, 35);
    const s = new AlignedScratch();
    const a = s.align(view);
    expect(a.byteOffset % 8).toBe(0);
    expect(Array.from(a)).toEqual(Array.from(view));
    expect(s.align(buf)).toBe(buf);
  });
});

describe('parts', () => {
  it('round-trip spectra and beams exactly and weights as float32', () => {
    const D = 7;
    const nb = 2;
    const W = 12;
    const out = new Uint8Array(new ArrayBuffer(partBytes(D, nb, W)));
    const conv = Float64Array.from({ length: D }, (_, i) => 1 + i / 3);
    const mvdr = Float64Array.from({ length: D }, (_, i) => 0.1 / (i + 1));
    const beams = Float64Array.from({ length: nb * (D + 1) }, (_, i) => Math.sqrt(i + 1));
    const weights = Float64Array.from({ length: 3 * W }, (_, i) => Math.sin(i) / 7);
    const bytes = writePart(out, { epoch: 4, part: 3, scanSeq: 99, directions: D, flags: 19, beamIds: [5, 8], weightsPerBeam: W, scanMs: 1.5, busyMs: 100, hops: 50, scans: 5, singular: 1, nonFinite: 0, restarts: 2 }, conv, mvdr, beams, weights, W + 6);
    const r = parsePart(bytes.slice(), { maxDirections: 100, maxWeightsPerBeam: 100 });
    expect(r.ok).toBe(true);
    if (!r.ok) return;
    const p = r.value;
    expect(p).toMatchObject({ epoch: 4, part: 3, scanSeq: 99, directions: D, flags: 19, beamIds: [5, 8], weightsPerBeam: W, scanMs: 1.5, busyMs: 100, hops: 50, scans: 5, singular: 1, nonFinite: 0, restarts: 2 });
    expect(Array.from(p.conv)).toEqual(Array.from(conv));
    expect(Array.from(p.mvdr)).toEqual(Array.from(mvdr));
    expect(Array.from(p.beams)).toEqual(Array.from(beams));
    for (let i = 0; i < nb; i++) for (let k = 0; k < W; k++) expect(p.weights[i * W + k]).toBe(Math.fround(weights[i * (W + 6) + k]));
  });

  it('refuses malformed parts with a reason, never a throw', () => {
    const D = 3;
    const out = new Uint8Array(new ArrayBuffer(partBytes(D, 0, 0)));
    const good = writePart(out, { epoch: 1, part: 1, scanSeq: 0, directions: D, flags: 3, beamIds: [], weightsPerBeam: 0, scanMs: 0, busyMs: 0, hops: 0, scans: 0, singular: 0, nonFinite: 0, restarts: 0 }, new Float64Array(D), new Float64Array(D), new Float64Array(0), null, 0).slice();
    const limits = { maxDirections: 10, maxWeightsPerBeam: 10 };
    const reason = (b: Uint8Array, l = limits) => {
      const r = parsePart(b, l);
      return r.ok ? 'ok' : r.reason;
    };
    expect(reason(good)).toBe('ok');
    expect(reason(good, { maxDirections: 2, maxWeightsPerBeam: 10 })).toBe('field');
    const bad = (f: (dv: DataView) => void) => {
      const c = good.slice();
      f(new DataView(c.buffer));
      return reason(c);
    };
    expect(bad((dv) => dv.setUint16(6, 9, true))).toBe('field');
    expect(bad((dv) => dv.setFloat64(40, Number.NaN, true))).toBe('field');
    expect(bad((dv) => dv.setFloat64(16, -3, true))).toBe('field');
    expect(bad((dv) => dv.setUint32(76, 11, true))).toBe('field');
    expect(reason(good.subarray(0, 79))).toBe('truncated');
    const rand = mulberry32(5);
    for (let i = 0; i < 2000; i++) {
      const b = Uint8Array.from({ length: Math.floor(rand() * 300) }, () => Math.floor(rand() * 256));
      if (b.length >= 8 && rand() < 0.5) new DataView(b.buffer).setUint32(0, 0x5042534e, true), new DataView(b.buffer).setUint16(4, 1, true);
      expect(() => parsePart(new AlignedScratch().align(b), limits)).not.toThrow();
    }
  });
});

describe('JSON messages', () => {
  const plan: RemotePlan = {
    v: 1, type: 'plan', engine: 'abcd1234', epoch: 3, part: 2,
    positions: [[0, 0, 0], [0.1, 0, 0]], freqsHz: [1000], grid: { azimuthDeg: [0, 90], elevationDeg: [0, 0], nAz: 2, nEl: 1 },
    speedOfSoundMps: 343, snapshotScale: 2 / 512, active: [true, false], fast: true, beams: [{ id: 1, lookIndex: 1, method: 'mvdr' }], firstSeq: 0,
  };
  it('accept what the engine and workers write', () => {
    expect(parsePlan(encodeJson(plan))).toEqual({ ok: true, value: plan });
    const hello = { v: 1, type: 'hello', id: 'w0rker-1', name: 'hall-east/2', throughputBinsPerS: 12000, engines: 1, leaving: false };
    expect(parseHello(encodeJson(hello))).toEqual({ ok: true, value: hello });
    expect(parsePlanReply(encodeJson({ v: 1, type: 'plan-reply', epoch: 3, ok: false, message: 'no' })).ok).toBe(true);
    expect(parseCtrl(encodeJson({ v: 1, type: 'mask', engine: 'abcd1234', epoch: 3, active: [true, true] })).ok).toBe(true);
    expect(parseCtrl(encodeJson({ v: 1, type: 'release', engine: 'abcd1234', epoch: 3 })).ok).toBe(true);
  });
  it('refuse unknown fields, missing fields, wrong types and sizes', () => {
    const refuse = (o: unknown) => {
      const r = parsePlan(encodeJson(o as object));
      return r.ok ? 'ok' : r.reason;
    };
    expect(refuse({ ...plan, extra: 1 })).toBe('schema');
    const { firstSeq: _drop, ...missing } = plan;
    expect(refuse(missing)).toBe('schema');
    expect(refuse({ ...plan, engine: 'a.b' })).toBe('schema');
    expect(refuse({ ...plan, active: [false, false] })).toBe('schema');
    expect(refuse({ ...plan, active: [true] })).toBe('schema');
    expect(refuse({ ...plan, grid: { ...plan.grid, nAz: 3 } })).toBe('schema');
    expect(refuse({ ...plan, beams: [{ id: 1, lookIndex: 2, method: 'mvdr' }] })).toBe('schema');
    expect(refuse({ ...plan, speedOfSoundMps: 'fast' })).toBe('schema');
    expect(parsePlan(new TextEncoder().encode('{"v":1,'))).toMatchObject({ ok: false, reason: 'json' });
    expect(parsePlan(new Uint8Array([0xff, 0xfe]))).toMatchObject({ ok: false, reason: 'json' });
    expect(parsePlan(new Uint8Array((1 << 20) + 1))).toMatchObject({ ok: false, reason: 'size' });
    expect(parseHello(encodeJson({ v: 1, type: 'hello', id: 'w0rker-1', name: 'has space', throughputBinsPerS: null, engines: 0, leaving: false }))).toMatchObject({ ok: false });
    expect(parseCtrl(encodeJson({ v: 1, type: 'grid', engine: 'abcd1234', epoch: 1, grid: { azimuthDeg: [], elevationDeg: [], nAz: 0, nEl: 1 } }))).toMatchObject({ ok: false, reason: 'schema' });
    expect(parseCtrl(encodeJson({ v: 1, type: 'reboot', engine: 'abcd1234', epoch: 1 }))).toMatchObject({ ok: false, reason: 'schema' });
  });
});

describe('splitting the band by throughput', () => {
  it('equal weights give the equal split', () => {
    for (const [bins, parts] of [[61, 2], [61, 3], [7, 7], [38, 5]]) {
      expect(splitBinsWeighted(bins, new Array(parts).fill(1))).toEqual(splitBins(bins, parts).map((r) => r));
    }
  });
  it('shares follow the weights, within one bin, and every bin is given once, contiguously', () => {
    const r = splitBinsWeighted(61, [1, 1, 2, 4]);
    expect(r.reduce((n, x) => n + x.count, 0)).toBe(61);
    r.forEach((x, i) => i > 0 && expect(x.start).toBe(r[i - 1].start + r[i - 1].count));
    const ideal = [61 / 8, 61 / 8, 61 / 4, 61 / 2];
    r.forEach((x, i) => expect(Math.abs(x.count - ideal[i])).toBeLessThan(1));
  });
  it('caps hold, the rest goes to the others; a part with no weight or no room gets nothing; few bins go one each first', () => {
    const r = splitBinsWeighted(61, [1, 1, 10], [Infinity, Infinity, 5]);
    expect(r.map((x) => x.count)).toEqual([28, 28, 5]);
    expect(splitBinsWeighted(10, [1, 0, 1, 1], [Infinity, Infinity, 0, Infinity]).map((x) => x.count)).toEqual([5, 0, 0, 5]);
    expect(splitBinsWeighted(2, [1, 5, 5]).map((x) => x.count)).toEqual([1, 1, 0]);
  });
});
