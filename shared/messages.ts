/**
 * The server → dashboard messages on the live WebSocket (`/api/live`): one binary message per
 * spectrum row, and JSON text messages discriminated on `type` for everything else. The server,
 * the browser client and the tests all read and write them through this module only.
 *
 * Binary spectrum row, all little-endian. Every section is a multiple of 4 bytes long and the
 * header is 40 bytes, so the Float32 sections are 4-byte aligned whenever the message is, and
 * {@link decodeRow} returns views instead of copies (a browser ArrayBuffer message always is).
 *
 * offset size field
 *      0    4 magic          0x5752534E (the bytes "NSRW")
 *      4    1 version        1
 *      5    1 flags          bit0 conventional present, bit1 mvdr present, bit2 normalised,
 *                            bit3 partial (some bins' parts missing: a remote bin worker did not
 *                            answer in time; the spectra cover the bins that did answer);
 *                            bits 4–7 reserved: written 0, ignored by readers
 *      6    1 shedStep       0 = full rate; > 0 = the engine is shedding load (DESIGN.md §4)
 *      7    1 reserved       written 0, ignored by readers
 *      8    4 seq            row counter, +1 per row, wraps at 2^32
 *     12    8 sampleIndex    f64: stream-clock index of the last sample of the hop that completed
 *                            the row (an integer below 2^53)
 *     20    8 emittedAtMs    f64: server wall clock when the row left the engine (Date.now())
 *     28    4 directions     D = nAz·nEl
 *     32    2 nAz
 *     34    2 nEl            direction index d = iEl·nAz + iAz (azimuth fastest)
 *     36    2 peakCount      conventional (0 when the method is absent)
 *     38    2 peakCount      mvdr (0 when the method is absent)
 *     40  4·D conventional   Float32 dB per direction (only when bit0)
 *      …  4·D mvdr           Float32 dB per direction (only when bit1)
 *      … 12·P peaks          Float32 triples (azimuthDeg, elevationDeg, levelDb),
 *                            conventional peaks first, then mvdr
 * At least one method is present. Layout changes bump the version; a reader refuses others.
 * Bit 3 (partial) was added without a version bump: it was a reserved bit, written 0 by every
 * earlier writer and ignored by every earlier reader, so old readers show a partial row as a
 * whole one and new readers read old rows as not partial.
 */
import type { ProcessingParams } from '../server/engine/params.ts';
import { validateLandmarks, type Landmark } from './landmarks.ts';
import { validateSectors, type Sector } from './sectors.ts';

export type { ProcessingParams };

export const ROW_MAGIC = 0x5752534e;
export const ROW_VERSION = 1;
export const ROW_HEADER_BYTES = 40;
/** Version of the JSON message set; carried in `hello`. */
export const MESSAGES_VERSION = 1;

export const ROW_FLAG_CONVENTIONAL = 1;
export const ROW_FLAG_MVDR = 2;
export const ROW_FLAG_NORMALISED = 4;
/** Issue 17: the row misses some bins (a remote bin worker did not answer before the deadline). */
export const ROW_FLAG_PARTIAL = 8;

/** Peaks per method a row can carry (the u16 count). */
export const MAX_ROW_PEAKS = 0xffff;

/** True on little-endian hosts, where a Float32Array over wire bytes reads them as they are. */
const LITTLE_ENDIAN = new Uint8Array(new Uint16Array([1]).buffer)[0] === 1;

export interface RowPeak {
  azimuthDeg: number;
  elevationDeg: number;
  levelDb: number;
}

/** One direction-spectrum row as the dashboard receives it. */
export interface SpectrumRow {
  /** uint32, wraps. */
  seq: number;
  /** Stream-clock index of the last sample of the hop that completed this row. */
  sampleIndex: number;
  /** Server wall clock (Date.now()) when the row was emitted, ms. */
  emittedAtMs: number;
  /** Load-shedding step in force, 0–255 (0 = none). */
  shedStep: number;
  /** Broadband combination with each bin normalised to its maximum. */
  normalised: boolean;
  nAz: number;
  nEl: number;
  /** D = nAz·nEl values in dB, index iEl·nAz + iAz, or null when the method is off. */
  conventionalDb: Float32Array | null;
  mvdrDb: Float32Array | null;
  peaks: { conventional: RowPeak[]; mvdr: RowPeak[] };
  /**
   * Some bins are missing from the spectra: a remote bin worker did not answer in time (flags bit 3).
   * Optional when encoding (absent = false); the decoder always sets it.
   */
  partial?: boolean;
}

/**
 * What {@link encodeRow} accepts: a {@link SpectrumRow}, or the same with float64 spectra straight
 * from the engine (converted to float32 while writing, no intermediate copy).
 */
export interface SpectrumRowInput extends Omit<SpectrumRow, 'conventionalDb' | 'mvdrDb'> {
  conventionalDb: Float32Array | Float64Array | null;
  mvdrDb: Float32Array | Float64Array | null;
}

/** Why bytes are not a spectrum row. Codes are stable (clients may count them). */
export const ROW_REJECT_REASONS = ['short_header', 'bad_magic', 'bad_version', 'bad_field', 'truncated', 'trailing_bytes'] as const;
export type RowRejectReason = (typeof ROW_REJECT_REASONS)[number];

export type RowDecodeResult = { ok: true; row: SpectrumRow } | { ok: false; reason: RowRejectReason; detail: string };

/** Thrown by {@link decodeRow}; `reason` is one of {@link ROW_REJECT_REASONS}. */
export class RowDecodeError extends RangeError {
  readonly code = 'ERR_ROW_INVALID';
  readonly reason: RowRejectReason;
  readonly detail: string;
  constructor(reason: RowRejectReason, detail: string) {
    super(`${reason}: ${detail}`);
    this.name = 'RowDecodeError';
    this.reason = reason;
    this.detail = detail;
  }
}

/** Bytes of a row with D directions, `methods` spectra (1 or 2) and P peaks in all. */
export function rowByteLength(directions: number, methods: number, peaks: number): number {
  return ROW_HEADER_BYTES + 4 * directions * methods + 12 * peaks;
}

function u(v: number, max: number): boolean {
  return Number.isInteger(v) && v >= 0 && v <= max;
}

/** Checks a row's fields; returns its byte length. @throws RangeError / TypeError naming the field */
function checkRow(row: SpectrumRowInput): number {
  if (!u(row.seq, 0xffffffff)) throw new RangeError(`seq ${row.seq} is not a uint32`);
  if (!Number.isSafeInteger(row.sampleIndex) || row.sampleIndex < 0) throw new RangeError(`sampleIndex ${row.sampleIndex} is not an integer in [0, 2^53)`);
  if (!Number.isFinite(row.emittedAtMs)) throw new RangeError(`emittedAtMs ${row.emittedAtMs} is not finite`);
  if (!u(row.shedStep, 255)) throw new RangeError(`shedStep ${row.shedStep} not in 0–255`);
  if (typeof row.normalised !== 'boolean') throw new TypeError('normalised must be a boolean');
  if (row.partial !== undefined && typeof row.partial !== 'boolean') throw new TypeError('partial must be a boolean when given');
  if (!u(row.nAz, 0xffff) || row.nAz === 0) throw new RangeError(`nAz ${row.nAz} not in 1–65535`);
  if (!u(row.nEl, 0xffff) || row.nEl === 0) throw new RangeError(`nEl ${row.nEl} not in 1–65535`);
  const d = row.nAz * row.nEl;
  let methods = 0;
  for (const [name, a, p] of [
    ['conventional', row.conventionalDb, row.peaks.conventional],
    ['mvdr', row.mvdrDb, row.peaks.mvdr],
  ] as const) {
    if (p.length > MAX_ROW_PEAKS) throw new RangeError(`peaks.${name}: ${p.length} peaks, at most ${MAX_ROW_PEAKS}`);
    if (a === null) {
      if (p.length > 0) throw new RangeError(`peaks.${name}: ${p.length} peaks for a method that is absent`);
      continue;
    }
    if (a.length !== d) throw new RangeError(`${name}Db has ${a.length} values, nAz·nEl = ${d}`);
    methods++;
  }
  if (methods === 0) throw new RangeError('a row needs conventionalDb or mvdrDb');
  return rowByteLength(d, methods, row.peaks.conventional.length + row.peaks.mvdr.length);
}

/** Bytes {@link encodeRowInto} will write for `row` (after checking its fields). */
export function encodedRowBytes(row: SpectrumRowInput): number {
  return checkRow(row);
}

function writeFloats(out: Uint8Array, dv: DataView, offset: number, src: Float32Array | Float64Array): void {
  if (LITTLE_ENDIAN && ((out.byteOffset + offset) & 3) === 0) {
    new Float32Array(out.buffer, out.byteOffset + offset, src.length).set(src);
  } else {
    for (let i = 0; i < src.length; i++) dv.setFloat32(offset + 4 * i, src[i], true);
  }
}

/**
 * Write `row` into `out` (a caller-owned buffer, reused across rows).
 * @param out length ≥ {@link encodedRowBytes}(row)
 * @returns bytes written; the message is `out.subarray(0, n)`
 * @throws RangeError / TypeError for a field out of range, naming it; RangeError when `out` is short
 */
export function encodeRowInto(out: Uint8Array, row: SpectrumRowInput): number {
  const n = checkRow(row);
  if (out.byteLength < n) throw new RangeError(`out is ${out.byteLength} bytes, the row needs ${n}`);
  const dv = new DataView(out.buffer, out.byteOffset, n);
  const d = row.nAz * row.nEl;
  const pc = row.peaks.conventional;
  const pm = row.peaks.mvdr;
  const flags = (row.conventionalDb ? ROW_FLAG_CONVENTIONAL : 0) | (row.mvdrDb ? ROW_FLAG_MVDR : 0) | (row.normalised ? ROW_FLAG_NORMALISED : 0) | (row.partial === true ? ROW_FLAG_PARTIAL : 0);
  dv.setUint32(0, ROW_MAGIC, true);
  dv.setUint8(4, ROW_VERSION);
  dv.setUint8(5, flags);
  dv.setUint8(6, row.shedStep);
  dv.setUint8(7, 0);
  dv.setUint32(8, row.seq, true);
  dv.setFloat64(12, row.sampleIndex, true);
  dv.setFloat64(20, row.emittedAtMs, true);
  dv.setUint32(28, d, true);
  dv.setUint16(32, row.nAz, true);
  dv.setUint16(34, row.nEl, true);
  dv.setUint16(36, pc.length, true);
  dv.setUint16(38, pm.length, true);
  let p = ROW_HEADER_BYTES;
  if (row.conventionalDb) {
    writeFloats(out, dv, p, row.conventionalDb);
    p += 4 * d;
  }
  if (row.mvdrDb) {
    writeFloats(out, dv, p, row.mvdrDb);
    p += 4 * d;
  }
  for (const list of [pc, pm]) {
    for (const k of list) {
      dv.setFloat32(p, k.azimuthDeg, true);
      dv.setFloat32(p + 4, k.elevationDeg, true);
      dv.setFloat32(p + 8, k.levelDb, true);
      p += 12;
    }
  }
  return n;
}

/**
 * Encode one row into a fresh buffer (one allocation per row; fine at the ≤ 50 Hz display rate).
 * The buffer starts at offset 0 of its own ArrayBuffer, so the Float32 sections are aligned.
 */
export function encodeRow(row: SpectrumRowInput): Uint8Array {
  const out = new Uint8Array(checkRow(row));
  encodeRowInto(out, row);
  return out;
}

function reject(reason: RowRejectReason, detail: string): RowDecodeResult {
  return { ok: false, reason, detail };
}

function readFloats(bytes: Uint8Array, dv: DataView, offset: number, n: number): Float32Array {
  if (LITTLE_ENDIAN && ((bytes.byteOffset + offset) & 3) === 0) return new Float32Array(bytes.buffer, bytes.byteOffset + offset, n);
  const a = new Float32Array(n);
  for (let i = 0; i < n; i++) a[i] = dv.getFloat32(offset + 4 * i, true);
  return a;
}

/**
 * Parse a row. The spectra are Float32Array views into `bytes` when the message is 4-byte aligned
 * (on a little-endian host), else copies; the caller must not reuse `bytes` while it keeps the row.
 * Values are not scanned (a row is the server's own output; NaN/±∞ pass through).
 */
export function tryDecodeRow(bytes: Uint8Array): RowDecodeResult {
  if (bytes.byteLength < ROW_HEADER_BYTES) return reject('short_header', `${bytes.byteLength} bytes, a header needs ${ROW_HEADER_BYTES}`);
  const dv = new DataView(bytes.buffer, bytes.byteOffset, bytes.byteLength);
  const magic = dv.getUint32(0, true);
  if (magic !== ROW_MAGIC) return reject('bad_magic', `magic 0x${magic.toString(16).padStart(8, '0')}`);
  const version = dv.getUint8(4);
  if (version !== ROW_VERSION) return reject('bad_version', `version ${version}, this reader reads ${ROW_VERSION}`);
  const flags = dv.getUint8(5);
  const hasConv = (flags & ROW_FLAG_CONVENTIONAL) !== 0;
  const hasMvdr = (flags & ROW_FLAG_MVDR) !== 0;
  if (!hasConv && !hasMvdr) return reject('bad_field', `flags 0x${flags.toString(16).padStart(2, '0')}: no method present`);
  const sampleIndex = dv.getFloat64(12, true);
  if (!Number.isSafeInteger(sampleIndex) || sampleIndex < 0) return reject('bad_field', `sampleIndex ${sampleIndex} is not an integer in [0, 2^53)`);
  const emittedAtMs = dv.getFloat64(20, true);
  if (!Number.isFinite(emittedAtMs)) return reject('bad_field', `emittedAtMs ${emittedAtMs} is not finite`);
  const d = dv.getUint32(28, true);
  const nAz = dv.getUint16(32, true);
  const nEl = dv.getUint16(34, true);
  if (nAz === 0 || nEl === 0) return reject('bad_field', `nAz ${nAz} × nEl ${nEl}: both must be ≥ 1`);
  if (d !== nAz * nEl) return reject('bad_field', `directions ${d} ≠ nAz·nEl = ${nAz * nEl}`);
  const nPc = dv.getUint16(36, true);
  const nPm = dv.getUint16(38, true);
  if (!hasConv && nPc > 0) return reject('bad_field', `${nPc} conventional peaks but no conventional spectrum`);
  if (!hasMvdr && nPm > 0) return reject('bad_field', `${nPm} mvdr peaks but no mvdr spectrum`);
  const need = rowByteLength(d, (hasConv ? 1 : 0) + (hasMvdr ? 1 : 0), nPc + nPm);
  if (bytes.byteLength < need) return reject('truncated', `${bytes.byteLength} bytes, header announces ${need}`);
  if (bytes.byteLength > need) return reject('trailing_bytes', `${bytes.byteLength} bytes, header announces ${need}`);
  let p = ROW_HEADER_BYTES;
  let conventionalDb: Float32Array | null = null;
  let mvdrDb: Float32Array | null = null;
  if (hasConv) {
    conventionalDb = readFloats(bytes, dv, p, d);
    p += 4 * d;
  }
  if (hasMvdr) {
    mvdrDb = readFloats(bytes, dv, p, d);
    p += 4 * d;
  }
  const readPeaks = (n: number): RowPeak[] => {
    const out: RowPeak[] = new Array(n);
    for (let i = 0; i < n; i++, p += 12) {
      out[i] = { azimuthDeg: dv.getFloat32(p, true), elevationDeg: dv.getFloat32(p + 4, true), levelDb: dv.getFloat32(p + 8, true) };
    }
    return out;
  };
  const conventional = readPeaks(nPc);
  const mvdr = readPeaks(nPm);
  return {
    ok: true,
    row: {
      seq: dv.getUint32(8, true),
      sampleIndex,
      emittedAtMs,
      shedStep: dv.getUint8(6),
      normalised: (flags & ROW_FLAG_NORMALISED) !== 0,
      nAz,
      nEl,
      conventionalDb,
      mvdrDb,
      peaks: { conventional, mvdr },
      partial: (flags & ROW_FLAG_PARTIAL) !== 0,
    },
  };
}

/**
 * {@link tryDecodeRow}, throwing.
 * @throws RowDecodeError with the reject reason
 */
export function decodeRow(bytes: Uint8Array): SpectrumRow {
  const r = tryDecodeRow(bytes);
  if (!r.ok) throw new RowDecodeError(r.reason, r.detail);
  return r.row;
}

// ---------------------------------------------------------------------------------------------
// JSON text messages

/** The direction grid as axes: direction d = iEl·nAz + iAz looks toward (azimuthDeg[iAz], elevationDeg[iEl]). */
export interface LiveGrid {
  nAz: number;
  nEl: number;
  /** Length nAz, degrees. */
  azimuthDeg: number[];
  /** Length nEl, degrees ([0] for an azimuth-only grid). */
  elevationDeg: number[];
}

/** Figures derived from the parameters and the stream (what the processing panel shows beside λ). */
export interface ProcessingDerived {
  /** τ = hop / (fs (1 − λ)), seconds. */
  tauS: number;
  hopSamples: number;
  sampleRateHz: number;
  /** D = nAz·nEl. */
  directions: number;
  /** Frequency bins in the band. */
  bins: number;
}

/** Sent on connect and whenever the grid (hence the row layout) changes. */
export interface HelloMessage {
  type: 'hello';
  version: number;
  grid: LiveGrid;
  params: ProcessingParams;
  /** calibration: the largest per-channel correction applied (null or absent: channels nominal). */
  array: { name: string; positions: [number, number, number][]; calibration?: { gainDbMax: number; delayUsMax: number; splOffsetDb?: number | null; inverted?: number[]; reordered?: number[] } | null; landmarks?: Landmark[]; sectors?: Sector[] };
  derived?: ProcessingDerived;
}

/** Sent on every accepted parameter change (the applied values, not the request). */
export interface ParamsMessage {
  type: 'params';
  params: ProcessingParams;
  derived?: ProcessingDerived;
}

/** Periodic engine status (load shedding, counters); its contents are informational. */
export interface StatusMessage {
  type: 'status';
  emittedAtMs: number;
  status: Record<string, unknown>;
}

/** A monitoring event (server/monitor/events.ts; indicative levels): what the live message, the REST API and the webhooks carry. */
export interface MonitorEvent {
  id: string;
  rule: string;
  sector: string;
  state: 'active' | 'ended';
  startSample: number;
  endSample: number | null;
  startUtc: string;
  endUtc: string | null;
  peakDb: number;
  leqDb: number;
  azimuthDeg: number | null;
  elevationDeg: number | null;
  thresholdDb: number;
  unit: 'dBFS' | 'dB SPL';
  clips: string[];
}

/** A monitoring event started, changed or ended. */
export interface EventMessage {
  type: 'event';
  change: 'started' | 'updated' | 'ended';
  event: MonitorEvent;
}

export type ServerMessage = HelloMessage | ParamsMessage | StatusMessage | EventMessage;
export const SERVER_MESSAGE_TYPES = ['hello', 'params', 'status', 'event'] as const;

/** Thrown by {@link parseServerMessage}; `field` is the path of the offending value. */
export class MessageParseError extends TypeError {
  readonly code = 'ERR_MESSAGE_INVALID';
  readonly field: string;
  constructor(field: string, why: string) {
    super(`${field}: ${why}`);
    this.name = 'MessageParseError';
    this.field = field;
  }
}

type Obj = Record<string, unknown>;

function obj(field: string, v: unknown): Obj {
  if (typeof v !== 'object' || v === null || Array.isArray(v)) throw new MessageParseError(field, 'must be an object');
  return v as Obj;
}
function num(field: string, v: unknown): number {
  if (typeof v !== 'number' || !Number.isFinite(v)) throw new MessageParseError(field, `must be a finite number, got ${JSON.stringify(v)}`);
  return v;
}
function count(field: string, v: unknown, min: number): number {
  if (!Number.isInteger(v) || (v as number) < min) throw new MessageParseError(field, `must be an integer ≥ ${min}, got ${JSON.stringify(v)}`);
  return v as number;
}
function numArray(field: string, v: unknown, length?: number): number[] {
  if (!Array.isArray(v)) throw new MessageParseError(field, 'must be an array of numbers');
  if (length !== undefined && v.length !== length) throw new MessageParseError(field, `has ${v.length} values, expected ${length}`);
  v.forEach((x, i) => num(`${field}[${i}]`, x));
  return v as number[];
}
function range(field: string, v: unknown): void {
  const r = obj(field, v);
  for (const k of ['startDeg', 'stopDeg', 'stepDeg']) num(`${field}.${k}`, r[k]);
}

const LOADING_FIELDS: Record<string, string[]> = { relative: ['ratio'], 'relative-db': ['db'], fixed: ['delta'], wng: ['floorDb'] };

/**
 * Shape check of parameters in a message. Ranges are the server's business (server/engine/params.ts);
 * a client only needs to know the fields are there and typed.
 */
function params(field: string, v: unknown): void {
  const p = obj(field, v);
  num(`${field}.lambda`, p.lambda);
  const l = obj(`${field}.loading`, p.loading);
  const need = typeof l.mode === 'string' ? LOADING_FIELDS[l.mode] : undefined;
  if (!need) throw new MessageParseError(`${field}.loading.mode`, `must be one of ${Object.keys(LOADING_FIELDS).join(', ')}, got ${JSON.stringify(l.mode)}`);
  for (const k of need) num(`${field}.loading.${k}`, l[k]);
  numArray(`${field}.bandHz`, p.bandHz, 2);
  const g = obj(`${field}.grid`, p.grid);
  range(`${field}.grid.azimuthDeg`, g.azimuthDeg);
  if (g.elevationDeg !== undefined) range(`${field}.grid.elevationDeg`, g.elevationDeg);
  const m = p.methods;
  if (!Array.isArray(m) || m.length === 0 || !m.every((x) => x === 'conventional' || x === 'mvdr')) {
    throw new MessageParseError(`${field}.methods`, `must be a non-empty list of conventional, mvdr, got ${JSON.stringify(m)}`);
  }
  num(`${field}.spectrumRateHz`, p.spectrumRateHz);
  if (typeof p.normalise !== 'boolean') throw new MessageParseError(`${field}.normalise`, 'must be true or false');
}

function derived(field: string, v: unknown): void {
  if (v === undefined) return;
  const d = obj(field, v);
  for (const k of ['tauS', 'hopSamples', 'sampleRateHz', 'directions', 'bins']) num(`${field}.${k}`, d[k]);
}

/**
 * Parse and check one JSON text message from the server. Unknown extra fields are tolerated (a newer
 * server may add some); a wrong `type`, a missing or mistyped field, or another `hello.version` is not.
 * @throws MessageParseError naming the field (`(message)` for the text as a whole)
 */
export function parseServerMessage(text: string): ServerMessage {
  let v: unknown;
  try {
    v = JSON.parse(text);
  } catch (e) {
    throw new MessageParseError('(message)', `not JSON: ${(e as Error).message}`);
  }
  const m = obj('(message)', v);
  switch (m.type) {
    case 'hello': {
      const version = count('version', m.version, 1);
      if (version !== MESSAGES_VERSION) throw new MessageParseError('version', `${version}, this client reads ${MESSAGES_VERSION}`);
      const g = obj('grid', m.grid);
      const nAz = count('grid.nAz', g.nAz, 1);
      const nEl = count('grid.nEl', g.nEl, 1);
      numArray('grid.azimuthDeg', g.azimuthDeg, nAz);
      numArray('grid.elevationDeg', g.elevationDeg, nEl);
      params('params', m.params);
      const a = obj('array', m.array);
      if (typeof a.name !== 'string') throw new MessageParseError('array.name', 'must be a string');
      if (!Array.isArray(a.positions)) throw new MessageParseError('array.positions', 'must be an array of [x, y, z]');
      a.positions.forEach((x, i) => numArray(`array.positions[${i}]`, x, 3));
      if (a.calibration !== undefined && a.calibration !== null) {
        const c = obj('array.calibration', a.calibration);
        for (const k of ['gainDbMax', 'delayUsMax']) {
          if (typeof c[k] !== 'number' || !Number.isFinite(c[k])) throw new MessageParseError(`array.calibration.${k}`, 'must be a finite number');
        }
        if (c.splOffsetDb !== undefined && c.splOffsetDb !== null && (typeof c.splOffsetDb !== 'number' || !Number.isFinite(c.splOffsetDb))) {
          throw new MessageParseError('array.calibration.splOffsetDb', 'must be a finite number or null');
        }
        for (const k of ['inverted', 'reordered']) {
          const v = c[k];
          const m = (a.positions as unknown[]).length;
          if (v !== undefined && (!Array.isArray(v) || v.length > m || !v.every((p) => Number.isInteger(p) && p >= 0 && p < m))) {
            throw new MessageParseError(`array.calibration.${k}`, 'must be a list of positions');
          }
        }
      }
      // Named azimuths (shared/landmarks.ts); a hello is sent again when they change.
      if (a.landmarks !== undefined) validateLandmarks(a.landmarks, 'array.landmarks', (path, _v, msg) => { throw new MessageParseError(path, msg); });
      // Sectors (shared/sectors.ts); a hello is sent again when they change.
      if (a.sectors !== undefined) validateSectors(a.sectors, 'array.sectors', (path, _v, msg) => { throw new MessageParseError(path, msg); });
      derived('derived', m.derived);
      return m as unknown as HelloMessage;
    }
    case 'params':
      params('params', m.params);
      derived('derived', m.derived);
      return m as unknown as ParamsMessage;
    case 'status':
      num('emittedAtMs', m.emittedAtMs);
      obj('status', m.status);
      return m as unknown as StatusMessage;
    case 'event': {
      if (m.change !== 'started' && m.change !== 'updated' && m.change !== 'ended') throw new MessageParseError('change', 'must be started, updated or ended');
      obj('event', m.event);
      const e = m.event as Record<string, unknown>;
      for (const k of ['id', 'rule', 'sector', 'startUtc', 'unit']) if (typeof e[k] !== 'string') throw new MessageParseError(`event.${k}`, 'must be a string');
      for (const k of ['startSample', 'peakDb', 'leqDb', 'thresholdDb']) num(`event.${k}`, e[k]);
      if (!Array.isArray(e.clips)) throw new MessageParseError('event.clips', 'must be a list');
      return m as unknown as EventMessage;
    }
    default:
      throw new MessageParseError('type', `must be one of ${SERVER_MESSAGE_TYPES.join(', ')}, got ${JSON.stringify(m.type)}`);
  }
}

/** Serialise a message (the hub stringifies once per broadcast, not once per client). */
export function stringifyServerMessage(msg: ServerMessage): string {
  return JSON.stringify(msg);
}

/**
 * The {@link LiveGrid} axes of a grid spec, with the rule server/dsp/steering.ts uses: stops are
 * inclusive when they land on the grid (tolerant of decimal steps); elevation defaults to [0].
 */
export function liveGrid(spec: ProcessingParams['grid']): LiveGrid {
  const axis = (r: { startDeg: number; stopDeg: number; stepDeg: number }): number[] => {
    const n = Math.floor((r.stopDeg - r.startDeg) / r.stepDeg + 1e-9) + 1;
    const out = new Array<number>(n);
    for (let i = 0; i < n; i++) out[i] = r.startDeg + i * r.stepDeg;
    return out;
  };
  const azimuthDeg = axis(spec.azimuthDeg);
  const elevationDeg = spec.elevationDeg ? axis(spec.elevationDeg) : [0];
  return { nAz: azimuthDeg.length, nEl: elevationDeg.length, azimuthDeg, elevationDeg };
}
