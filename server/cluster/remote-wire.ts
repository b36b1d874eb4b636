/**
 * What an engine and its remote bin workers (`nullsteer worker`) say to each other over NATS: the
 * subjects, two binary messages for the hot path and closed JSON messages for the rest. Every
 * message from the wire goes through a parser here that refuses anything it does not know, with a
 * reason the receiver counts.
 *
 * Subjects (core NATS, no JetStream: a lost hop batch is a gap the worker detects, not a replay):
 *   nullsteer.bins.hello              worker → all: heartbeat, JSON {@link HelloMessage}, every 500 ms
 *   nullsteer.bins.w.ID.plan          engine → worker, request: JSON {@link RemotePlan}; reply {@link PlanReply}
 *   nullsteer.bins.w.ID.ctrl          engine → worker: JSON {@link CtrlMessage} (mask, grid, beams, release)
 *   nullsteer.bins.w.ID.hops.ENGINE   engine → worker: binary hop batch
 *   nullsteer.bins.e.ENGINE.parts     worker → engine: binary part (one scan's share of the spectra)
 *
 * Hop batch, little-endian (hosts are: both ends refuse to start otherwise):
 *   offset size
 *        0    4 magic 0x4842534E ("NSBH")       4 2 version 1        6 2 hops H (1–HOP_BATCH_MAX)
 *        8    4 epoch (the engine's plan)      12 4 part index      16 4 bins B      20 4 channels M
 *       24    8 f64 sequence number of the first hop (the engine's published-hop counter)
 *       32 56·H f64 per hop: start sample, λ, flags, scan sequence, loading mode, loading A, loading B
 *        … 8·M·B·H f32 per hop the bin-major snapshot of the part's bins (interleaved complex), as the
 *          engine's ring holds it before the 2/N scale (the worker applies it)
 *
 * Part, little-endian:
 *        0    4 magic 0x5042534E ("NSBP")       4 2 version 1        6 2 beams nb (0–8)
 *        8    4 epoch                          12 4 part index      16 8 f64 scan sequence
 *       24    4 directions D                   28 4 flags of the scan
 *       32    8 f64 scan ms     40 8 f64 busy ms (total)     48 8 f64 hops (total)    56 8 f64 scans (total)
 *       64    4 singular bins   68 4 non-finite bins         72 4 covariance restarts 76 4 weight values per beam W
 *       80 8·nb f64 beam ids
 *        … 8·D f64 conventional share, 8·D f64 MVDR share (zeros when the scan did not ask for it)
 *        … 8·nb·(D+1) f64 per beam: response share per direction, then the WNG sum
 *        … 4·nb·W f32 per beam the weights of the part's bins (2·M per bin, interleaved complex)
 */

export const BINS_PREFIX = 'nullsteer.bins';
export const HELLO_SUBJECT = `${BINS_PREFIX}.hello`;
export const workerSubject = (id: string, what: 'plan' | 'ctrl'): string => `${BINS_PREFIX}.w.${id}.${what}`;
/** Hop batches of one engine for one worker (the worker subscribes to `hopsSubject(id, '*')`). */
export const hopsSubject = (id: string, engineId: string): string => `${BINS_PREFIX}.w.${id}.hops.${engineId}`;
export const partsSubject = (engineId: string): string => `${BINS_PREFIX}.e.${engineId}.parts`;

export const WIRE_VERSION = 1;
export const HOPS_MAGIC = 0x4842534e;
export const PART_MAGIC = 0x5042534e;
export const HOPS_HEADER_BYTES = 32;
export const HOP_META_DOUBLES = 7;
export const PART_HEADER_BYTES = 80;
/** Hops in one batch at most (a batch is sent at every scan hop, and when this many are waiting). */
export const HOP_BATCH_MAX = 16;
/** Beams a part can carry (the engine's MAX_BEAMS). */
export const PART_BEAMS_MAX = 8;
/** JSON control messages larger than this are refused unread. */
export const MAX_JSON_BYTES = 1 << 20;
/** Ids: 4–32 letters, digits, - or _ (one NATS subject token). */
export const ID_PATTERN = /^[A-Za-z0-9_-]{4,32}$/;
/** Worker names as shown in status: 1–64 printable characters without spaces or dots. */
export const NAME_PATTERN = /^[A-Za-z0-9_:/@+-]{1,64}$/;

const LITTLE_ENDIAN = new Uint8Array(new Uint16Array([1]).buffer)[0] === 1;
/** @throws Error on a big-endian host (the binary messages are read in place). */
export function assertLittleEndian(): void {
  if (!LITTLE_ENDIAN) throw new Error('remote bin workers need a little-endian host');
}

export type WireReject = 'magic' | 'version' | 'truncated' | 'size' | 'field' | 'json' | 'schema';
export type Parsed<T> = { ok: true; value: T } | { ok: false; reason: WireReject; detail: string };
const reject = <T>(reason: WireReject, detail: string): Parsed<T> => ({ ok: false, reason, detail });

/** A growable, reused 8-byte-aligned copy of wire bytes (NATS hands out views at any offset). */
export class AlignedScratch {
  #buf = new ArrayBuffer(0);
  /** The bytes at an 8-aligned offset: the view itself when already aligned, else a copy into the scratch. */
  align(bytes: Uint8Array): Uint8Array {
    if (bytes.byteOffset % 8 === 0) return bytes;
    if (this.#buf.byteLength < bytes.byteLength) this.#buf = new ArrayBuffer(Math.max(bytes.byteLength, 2 * this.#buf.byteLength));
    const out = new Uint8Array(this.#buf, 0, bytes.byteLength);
    out.set(bytes);
    return out;
  }
}

export function hopBatchBytes(hops: number, channels: number, bins: number): number {
  return HOPS_HEADER_BYTES + 8 * HOP_META_DOUBLES * hops + 8 * channels * bins * hops;
}

/** Fills one preallocated hop batch (no allocation per hop). */
export class HopBatchWriter {
  readonly bytes: Uint8Array;
  readonly channels: number;
  readonly bins: number;
  readonly capacity: number;
  #dv: DataView;
  #meta: Float64Array;
  #snaps: Float32Array;
  hops = 0;

  constructor(channels: number, bins: number, capacity = HOP_BATCH_MAX) {
    this.channels = channels;
    this.bins = bins;
    this.capacity = Math.max(1, Math.min(HOP_BATCH_MAX, capacity));
    const buf = new ArrayBuffer(hopBatchBytes(this.capacity, channels, bins));
    this.bytes = new Uint8Array(buf);
    this.#dv = new DataView(buf);
    this.#meta = new Float64Array(buf, HOPS_HEADER_BYTES, HOP_META_DOUBLES * this.capacity);
    this.#snaps = new Float32Array(buf, HOPS_HEADER_BYTES + 8 * HOP_META_DOUBLES * this.capacity);
  }

  /** Start a batch whose first hop has sequence number `firstSeq`. */
  begin(epoch: number, part: number, firstSeq: number): void {
    this.hops = 0;
    const dv = this.#dv;
    dv.setUint32(0, HOPS_MAGIC, true);
    dv.setUint16(4, WIRE_VERSION, true);
    dv.setUint32(8, epoch, true);
    dv.setUint32(12, part, true);
    dv.setUint32(16, this.bins, true);
    dv.setUint32(20, this.channels, true);
    dv.setFloat64(24, firstSeq, true);
  }

  get full(): boolean {
    return this.hops >= this.capacity;
  }

  /** Add one hop: its 7 meta values from `meta[o…o+6]` and 2·M·B doubles of `snap` from `from` (rounded to float32). */
  add(meta: Float64Array, o: number, snap: Float64Array, from: number): void {
    const h = this.hops++;
    for (let i = 0; i < HOP_META_DOUBLES; i++) this.#meta[h * HOP_META_DOUBLES + i] = meta[o + i];
    const n = 2 * this.channels * this.bins;
    // A typed-array set converts float64 → float32 (round to nearest) natively.
    this.#snaps.set(snap.subarray(from, from + n), h * n);
  }

  /**
   * The finished batch, packed: meta of the H hops then their snapshots. The view is of this
   * writer's memory and valid until the next begin(): publish a copy (the NATS client keeps a
   * reference to what it is given until it flushes).
   */
  finish(): Uint8Array {
    const H = this.hops;
    this.#dv.setUint16(6, H, true);
    if (H < this.capacity) {
      // Move the snapshots down to follow the H meta records.
      const from = HOPS_HEADER_BYTES + 8 * HOP_META_DOUBLES * this.capacity;
      const to = HOPS_HEADER_BYTES + 8 * HOP_META_DOUBLES * H;
      this.bytes.copyWithin(to, from, from + 8 * this.channels * this.bins * H);
    }
    return this.bytes.subarray(0, hopBatchBytes(H, this.channels, this.bins));
  }
}

export interface HopBatch {
  epoch: number;
  part: number;
  firstSeq: number;
  hops: number;
  bins: number;
  channels: number;
  /** 7 values per hop (see the layout above). */
  meta: Float64Array;
  /** 2·M·B float32 per hop. */
  snaps: Float32Array;
}

/** Read a hop batch from 8-aligned bytes (see AlignedScratch); views, no copies. */
export function parseHopBatch(bytes: Uint8Array, limits: { maxChannels: number; maxBins: number }): Parsed<HopBatch> {
  if (bytes.byteLength < HOPS_HEADER_BYTES) return reject('truncated', `${bytes.byteLength} bytes, header is ${HOPS_HEADER_BYTES}`);
  const dv = new DataView(bytes.buffer, bytes.byteOffset, bytes.byteLength);
  if (dv.getUint32(0, true) !== HOPS_MAGIC) return reject('magic', 'not a hop batch');
  if (dv.getUint16(4, true) !== WIRE_VERSION) return reject('version', `version ${dv.getUint16(4, true)}`);
  const hops = dv.getUint16(6, true);
  const bins = dv.getUint32(16, true);
  const channels = dv.getUint32(20, true);
  const firstSeq = dv.getFloat64(24, true);
  if (hops < 1 || hops > HOP_BATCH_MAX) return reject('field', `hops ${hops} not in 1–${HOP_BATCH_MAX}`);
  if (bins < 1 || bins > limits.maxBins) return reject('field', `bins ${bins} not in 1–${limits.maxBins}`);
  if (channels < 1 || channels > limits.maxChannels) return reject('field', `channels ${channels} not in 1–${limits.maxChannels}`);
  if (!Number.isSafeInteger(firstSeq) || firstSeq < 0) return reject('field', 'first sequence is not a non-negative integer');
  const need = hopBatchBytes(hops, channels, bins);
  if (bytes.byteLength !== need) return reject('size', `${bytes.byteLength} bytes, header announces ${need}`);
  return {
    ok: true,
    value: {
      epoch: dv.getUint32(8, true),
      part: dv.getUint32(12, true),
      firstSeq,
      hops,
      bins,
      channels,
      meta: new Float64Array(bytes.buffer, bytes.byteOffset + HOPS_HEADER_BYTES, HOP_META_DOUBLES * hops),
      snaps: new Float32Array(bytes.buffer, bytes.byteOffset + HOPS_HEADER_BYTES + 8 * HOP_META_DOUBLES * hops, 2 * channels * bins * hops),
    },
  };
}

export function partBytes(directions: number, beams: number, weightsPerBeam: number): number {
  return PART_HEADER_BYTES + 8 * beams + 16 * directions + 8 * beams * (directions + 1) + 4 * beams * weightsPerBeam;
}

export interface PartFigures {
  scanMs: number;
  busyMs: number;
  hops: number;
  scans: number;
  singular: number;
  nonFinite: number;
  restarts: number;
}

export interface Part extends PartFigures {
  epoch: number;
  part: number;
  scanSeq: number;
  directions: number;
  flags: number;
  beamIds: number[];
  weightsPerBeam: number;
  conv: Float64Array;
  mvdr: Float64Array;
  /** nb·(D+1): per beam the response share per direction, then the WNG sum. */
  beams: Float64Array;
  /** nb·W float32 weights. */
  weights: Float32Array;
}

/** Write one part into `out` (sized by partBytes); returns the bytes used, a view of `out`. */
export function writePart(
  out: Uint8Array,
  h: { epoch: number; part: number; scanSeq: number; directions: number; flags: number; beamIds: readonly number[]; weightsPerBeam: number } & PartFigures,
  conv: Float64Array,
  mvdr: Float64Array,
  beams: Float64Array,
  weights: Float64Array | null,
  weightStride: number,
): Uint8Array {
  const D = h.directions;
  const nb = h.beamIds.length;
  const W = h.weightsPerBeam;
  const n = partBytes(D, nb, W);
  if (out.byteLength < n || out.byteOffset % 8 !== 0) throw new RangeError(`part needs ${n} aligned bytes, got ${out.byteLength}`);
  const dv = new DataView(out.buffer, out.byteOffset, n);
  dv.setUint32(0, PART_MAGIC, true);
  dv.setUint16(4, WIRE_VERSION, true);
  dv.setUint16(6, nb, true);
  dv.setUint32(8, h.epoch, true);
  dv.setUint32(12, h.part, true);
  dv.setFloat64(16, h.scanSeq, true);
  dv.setUint32(24, D, true);
  dv.setUint32(28, h.flags, true);
  dv.setFloat64(32, h.scanMs, true);
  dv.setFloat64(40, h.busyMs, true);
  dv.setFloat64(48, h.hops, true);
  dv.setFloat64(56, h.scans, true);
  dv.setUint32(64, h.singular, true);
  dv.setUint32(68, h.nonFinite, true);
  dv.setUint32(72, h.restarts, true);
  dv.setUint32(76, W, true);
  let p = PART_HEADER_BYTES;
  const f64 = new Float64Array(out.buffer, out.byteOffset + p, nb + 2 * D + nb * (D + 1));
  for (let i = 0; i < nb; i++) f64[i] = h.beamIds[i];
  f64.set(conv.subarray(0, D), nb);
  f64.set(mvdr.subarray(0, D), nb + D);
  f64.set(beams.subarray(0, nb * (D + 1)), nb + 2 * D);
  p += 8 * f64.length;
  const f32 = new Float32Array(out.buffer, out.byteOffset + p, nb * W);
  if (weights) for (let i = 0; i < nb; i++) for (let k = 0; k < W; k++) f32[i * W + k] = weights[i * weightStride + k];
  return out.subarray(0, n);
}

/** Read a part from 8-aligned bytes; views, no copies. */
export function parsePart(bytes: Uint8Array, limits: { maxDirections: number; maxWeightsPerBeam: number }): Parsed<Part> {
  if (bytes.byteLength < PART_HEADER_BYTES) return reject('truncated', `${bytes.byteLength} bytes, header is ${PART_HEADER_BYTES}`);
  const dv = new DataView(bytes.buffer, bytes.byteOffset, bytes.byteLength);
  if (dv.getUint32(0, true) !== PART_MAGIC) return reject('magic', 'not a part');
  if (dv.getUint16(4, true) !== WIRE_VERSION) return reject('version', `version ${dv.getUint16(4, true)}`);
  const nb = dv.getUint16(6, true);
  const D = dv.getUint32(24, true);
  const W = dv.getUint32(76, true);
  const scanSeq = dv.getFloat64(16, true);
  if (nb > PART_BEAMS_MAX) return reject('field', `beams ${nb} > ${PART_BEAMS_MAX}`);
  if (D < 1 || D > limits.maxDirections) return reject('field', `directions ${D} not in 1–${limits.maxDirections}`);
  if (W > limits.maxWeightsPerBeam) return reject('field', `weights per beam ${W} > ${limits.maxWeightsPerBeam}`);
  if (!Number.isSafeInteger(scanSeq) || scanSeq < 0) return reject('field', 'scan sequence is not a non-negative integer');
  const need = partBytes(D, nb, W);
  if (bytes.byteLength !== need) return reject('size', `${bytes.byteLength} bytes, header announces ${need}`);
  const figures = [32, 40, 48, 56].map((o) => dv.getFloat64(o, true));
  if (!figures.every((x) => Number.isFinite(x) && x >= 0)) return reject('field', 'figures not finite and ≥ 0');
  const f64 = new Float64Array(bytes.buffer, bytes.byteOffset + PART_HEADER_BYTES, nb + 2 * D + nb * (D + 1));
  const beamIds: number[] = [];
  for (let i = 0; i < nb; i++) {
    if (!Number.isInteger(f64[i]) || f64[i] < 0 || f64[i] > 0xffff) return reject('field', `beam id ${f64[i]}`);
    beamIds.push(f64[i]);
  }
  return {
    ok: true,
    value: {
      epoch: dv.getUint32(8, true),
      part: dv.getUint32(12, true),
      scanSeq,
      directions: D,
      flags: dv.getUint32(28, true),
      scanMs: figures[0],
      busyMs: figures[1],
      hops: figures[2],
      scans: figures[3],
      singular: dv.getUint32(64, true),
      nonFinite: dv.getUint32(68, true),
      restarts: dv.getUint32(72, true),
      beamIds,
      weightsPerBeam: W,
      conv: f64.subarray(nb, nb + D),
      mvdr: f64.subarray(nb + D, nb + 2 * D),
      beams: f64.subarray(nb + 2 * D),
      weights: new Float32Array(bytes.buffer, bytes.byteOffset + PART_HEADER_BYTES + 8 * f64.length, nb * W),
    },
  };
}

// ---- JSON messages ----

export interface HelloMessage {
  v: 1;
  type: 'hello';
  id: string;
  name: string;
  /** Bin-hops per second of busy time, measured on the work done so far (null before any). */
  throughputBinsPerS: number | null;
  /** Engines this worker holds a plan for now. */
  engines: number;
  /** The worker is going away (sent once on a clean stop). */
  leaving: boolean;
}

export interface GridSpec {
  azimuthDeg: number[];
  elevationDeg: number[];
  nAz: number;
  nEl: number;
}

export interface RemoteBeam {
  id: number;
  lookIndex: number;
  method: 'mvdr' | 'delay-and-sum';
}

export interface RemotePlan {
  v: 1;
  type: 'plan';
  engine: string;
  epoch: number;
  part: number;
  positions: [number, number, number][];
  freqsHz: number[];
  grid: GridSpec;
  speedOfSoundMps: number;
  snapshotScale: number;
  active: boolean[];
  fast: boolean;
  beams: RemoteBeam[];
  /** Hop sequence number of the first hop this part will receive. */
  firstSeq: number;
}

export type PlanReply = { v: 1; type: 'plan-reply'; epoch: number; ok: true } | { v: 1; type: 'plan-reply'; epoch: number; ok: false; message: string };

export type CtrlMessage =
  | { v: 1; type: 'mask'; engine: string; epoch: number; active: boolean[] }
  | { v: 1; type: 'grid'; engine: string; epoch: number; grid: GridSpec }
  | { v: 1; type: 'beams'; engine: string; epoch: number; beams: RemoteBeam[] }
  | { v: 1; type: 'release'; engine: string; epoch: number };

/** Limits a worker holds plans to (a plan beyond them is refused, not built). */
export const PLAN_LIMITS = { maxChannels: 4096, maxBins: 4096, maxDirections: 65536 } as const;

function parseJson(bytes: Uint8Array): Parsed<Record<string, unknown>> {
  if (bytes.byteLength > MAX_JSON_BYTES) return reject('size', `${bytes.byteLength} bytes > ${MAX_JSON_BYTES}`);
  let v: unknown;
  try {
    v = JSON.parse(new TextDecoder('utf-8', { fatal: true }).decode(bytes));
  } catch (e) {
    return reject('json', String((e as Error).message).slice(0, 120));
  }
  if (typeof v !== 'object' || v === null || Array.isArray(v)) return reject('schema', 'not an object');
  return { ok: true, value: v as Record<string, unknown> };
}

class SchemaError extends Error {}
function need(ok: boolean, what: string): void {
  if (!ok) throw new SchemaError(what);
}
function closed(o: Record<string, unknown>, keys: string[]): void {
  for (const k of Object.keys(o)) need(keys.includes(k), `unknown field ${JSON.stringify(k.slice(0, 40))}`);
  for (const k of keys) need(k in o, `missing field ${k}`);
}
const isU32 = (x: unknown): x is number => Number.isInteger(x) && (x as number) >= 0 && (x as number) <= 0xffffffff;
const isFinite = (x: unknown): x is number => typeof x === 'number' && Number.isFinite(x);

function checkGrid(g: unknown): GridSpec {
  need(typeof g === 'object' && g !== null && !Array.isArray(g), 'grid is not an object');
  const o = g as Record<string, unknown>;
  closed(o, ['azimuthDeg', 'elevationDeg', 'nAz', 'nEl']);
  need(isU32(o.nAz) && isU32(o.nEl) && (o.nAz as number) >= 1 && (o.nEl as number) >= 1 && (o.nAz as number) * (o.nEl as number) <= PLAN_LIMITS.maxDirections, 'grid size');
  const D = (o.nAz as number) * (o.nEl as number);
  for (const k of ['azimuthDeg', 'elevationDeg'] as const) need(Array.isArray(o[k]) && (o[k] as unknown[]).length === D && (o[k] as unknown[]).every((x) => isFinite(x) && Math.abs(x) <= 720), `grid ${k}`);
  return o as unknown as GridSpec;
}

function checkBeams(b: unknown, directions: number): RemoteBeam[] {
  need(Array.isArray(b) && b.length <= PART_BEAMS_MAX, 'beams');
  for (const x of b as unknown[]) {
    need(typeof x === 'object' && x !== null, 'beam');
    const o = x as Record<string, unknown>;
    closed(o, ['id', 'lookIndex', 'method']);
    need(Number.isInteger(o.id) && (o.id as number) >= 0 && (o.id as number) <= 0xffff, 'beam id');
    need(Number.isInteger(o.lookIndex) && (o.lookIndex as number) >= 0 && (o.lookIndex as number) < directions, 'beam lookIndex');
    need(o.method === 'mvdr' || o.method === 'delay-and-sum', 'beam method');
  }
  return b as RemoteBeam[];
}

function guard<T>(bytes: Uint8Array, f: (o: Record<string, unknown>) => T): Parsed<T> {
  const j = parseJson(bytes);
  if (!j.ok) return j;
  try {
    return { ok: true, value: f(j.value) };
  } catch (e) {
    if (e instanceof SchemaError) return reject('schema', e.message);
    throw e;
  }
}

export function parseHello(bytes: Uint8Array): Parsed<HelloMessage> {
  return guard(bytes, (o) => {
    closed(o, ['v', 'type', 'id', 'name', 'throughputBinsPerS', 'engines', 'leaving']);
    need(o.v === 1 && o.type === 'hello', 'v/type');
    need(typeof o.id === 'string' && ID_PATTERN.test(o.id), 'id');
    need(typeof o.name === 'string' && NAME_PATTERN.test(o.name), 'name');
    need(o.throughputBinsPerS === null || (isFinite(o.throughputBinsPerS) && o.throughputBinsPerS > 0 && o.throughputBinsPerS < 1e12), 'throughputBinsPerS');
    need(isU32(o.engines) && (o.engines as number) <= 64, 'engines');
    need(typeof o.leaving === 'boolean', 'leaving');
    return o as unknown as HelloMessage;
  });
}

export function parsePlan(bytes: Uint8Array): Parsed<RemotePlan> {
  return guard(bytes, (o) => {
    closed(o, ['v', 'type', 'engine', 'epoch', 'part', 'positions', 'freqsHz', 'grid', 'speedOfSoundMps', 'snapshotScale', 'active', 'fast', 'beams', 'firstSeq']);
    need(o.v === 1 && o.type === 'plan', 'v/type');
    need(typeof o.engine === 'string' && ID_PATTERN.test(o.engine), 'engine');
    need(isU32(o.epoch) && isU32(o.part), 'epoch/part');
    const pos = o.positions;
    need(Array.isArray(pos) && pos.length >= 1 && pos.length <= PLAN_LIMITS.maxChannels, 'positions');
    for (const p of pos as unknown[]) need(Array.isArray(p) && p.length === 3 && p.every((x) => isFinite(x) && Math.abs(x) <= 1e4), 'position');
    need(Array.isArray(o.freqsHz) && o.freqsHz.length >= 1 && o.freqsHz.length <= PLAN_LIMITS.maxBins && o.freqsHz.every((f) => isFinite(f) && f >= 0 && f <= 1e6), 'freqsHz');
    const grid = checkGrid(o.grid);
    need(isFinite(o.speedOfSoundMps) && o.speedOfSoundMps >= 200 && o.speedOfSoundMps <= 2000, 'speedOfSoundMps');
    need(isFinite(o.snapshotScale) && o.snapshotScale > 0 && o.snapshotScale <= 1, 'snapshotScale');
    need(Array.isArray(o.active) && o.active.length === (pos as unknown[]).length && o.active.every((a) => typeof a === 'boolean') && o.active.some((a) => a), 'active');
    need(typeof o.fast === 'boolean', 'fast');
    checkBeams(o.beams, grid.nAz * grid.nEl);
    need(Number.isSafeInteger(o.firstSeq) && (o.firstSeq as number) >= 0, 'firstSeq');
    return o as unknown as RemotePlan;
  });
}

export function parsePlanReply(bytes: Uint8Array): Parsed<PlanReply> {
  return guard(bytes, (o) => {
    need(o.v === 1 && o.type === 'plan-reply' && isU32(o.epoch) && typeof o.ok === 'boolean', 'v/type/epoch/ok');
    if (o.ok) closed(o, ['v', 'type', 'epoch', 'ok']);
    else {
      closed(o, ['v', 'type', 'epoch', 'ok', 'message']);
      need(typeof o.message === 'string' && o.message.length <= 500, 'message');
    }
    return o as unknown as PlanReply;
  });
}

export function parseCtrl(bytes: Uint8Array): Parsed<CtrlMessage> {
  return guard(bytes, (o) => {
    need(o.v === 1 && typeof o.type === 'string', 'v/type');
    need(typeof o.engine === 'string' && ID_PATTERN.test(o.engine) && isU32(o.epoch), 'engine/epoch');
    switch (o.type) {
      case 'mask':
        closed(o, ['v', 'type', 'engine', 'epoch', 'active']);
        need(Array.isArray(o.active) && o.active.length <= PLAN_LIMITS.maxChannels && o.active.every((a) => typeof a === 'boolean') && o.active.some((a) => a), 'active');
        break;
      case 'grid':
        closed(o, ['v', 'type', 'engine', 'epoch', 'grid']);
        checkGrid(o.grid);
        break;
      case 'beams':
        closed(o, ['v', 'type', 'engine', 'epoch', 'beams']);
        checkBeams(o.beams, PLAN_LIMITS.maxDirections);
        break;
      case 'release':
        closed(o, ['v', 'type', 'engine', 'epoch']);
        break;
      default:
        need(false, `type ${JSON.stringify(String(o.type).slice(0, 20))}`);
    }
    return o as unknown as CtrlMessage;
  });
}

export const encodeJson = (m: object): Uint8Array => new TextEncoder().encode(JSON.stringify(m));

/**
 * Connection options both ends use: reconnect forever, quickly (250 ms), and notice a dead broker
 * within two missed pings of 2 s.
 */
export function brokerOptions(natsUrl: string, token: string | null | undefined, name: string) {
  return {
    servers: natsUrl,
    ...(token ? { token } : {}),
    name,
    maxReconnectAttempts: -1,
    reconnectTimeWait: 250,
    waitOnFirstConnect: true,
    pingInterval: 2000,
    maxPingOut: 2,
    ignoreClusterUpdates: true,
  };
}
