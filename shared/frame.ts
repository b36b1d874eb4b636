/**
 * The nullsteer ingest frame: one block of interleaved multichannel samples with the header that puts
 * it on a stream's sample clock. The same bytes travel as one UDP datagram or one WebSocket binary
 * message. Layout (all little-endian) is documented in docs/wire-format.md; this module is the only
 * code that reads or writes it.
 *
 * offset size field
 *      0    4 magic              0x5246534E (the bytes "NSFR")
 *      4    1 version            1
 *      5    1 encoding           1 int16, 2 int24 (3 bytes), 3 int32, 4 float32
 *      6    2 headerBytes        ≥ 32; a reader skips header bytes it does not know
 *      8    4 streamId           chosen by the sender; one sequencer per id
 *     12    4 sequence           +1 per frame, wraps at 2^32
 *     16    8 firstSample        sample index of the frame's first sample on the stream's clock
 *     24    4 sampleRateHz
 *     28    2 channels           M
 *     30    2 samplesPerChannel  n
 *     32    … payload            n × M samples, interleaved (sample-major: s0c0 s0c1 … s1c0 …)
 */

export const FRAME_MAGIC = 0x5246534e;
export const FRAME_VERSION = 1;
export const FRAME_HEADER_BYTES = 32;
/** Largest UDP payload over IPv4 (65535 − 8 UDP − 20 IP); a frame never exceeds it. */
export const MAX_FRAME_BYTES = 65507;
/** Largest frame that crosses a standard 1500-byte Ethernet MTU unfragmented (IPv4, no options). */
export const MTU_FRAME_BYTES = 1472;

export const SAMPLE_ENCODINGS = ['int16', 'int24', 'int32', 'float32'] as const;
export type SampleEncoding = (typeof SAMPLE_ENCODINGS)[number];

const ENCODING_CODE: Record<SampleEncoding, number> = { int16: 1, int24: 2, int32: 3, float32: 4 };
const CODE_ENCODING: readonly (SampleEncoding | undefined)[] = [undefined, 'int16', 'int24', 'int32', 'float32'];
const BYTES_PER_SAMPLE: Record<SampleEncoding, number> = { int16: 2, int24: 3, int32: 4, float32: 4 };

/** Bytes one sample of `encoding` takes on the wire. */
export function bytesPerSample(encoding: SampleEncoding): number {
  return BYTES_PER_SAMPLE[encoding];
}

export interface FrameHeader {
  streamId: number;
  /** uint32, wraps. */
  sequence: number;
  /** Sample index of the first sample; integer in [0, 2^53). */
  firstSample: number;
  sampleRateHz: number;
  channels: number;
  samplesPerChannel: number;
  encoding: SampleEncoding;
}

export interface DecodedFrame extends FrameHeader {
  version: number;
  /** View of the payload bytes inside the datagram (no copy). */
  payload: Uint8Array;
}

/** Why a datagram is not a frame. Codes are stable: they are the keys of the status counters. */
export const FRAME_REJECT_REASONS = [
  'short_header',
  'bad_magic',
  'bad_version',
  'bad_header_length',
  'bad_encoding',
  'bad_field',
  'truncated',
  'trailing_bytes',
  'non_finite',
] as const;
export type FrameRejectReason = (typeof FRAME_REJECT_REASONS)[number];

export type DecodeResult =
  | { ok: true; frame: DecodedFrame }
  | { ok: false; reason: FrameRejectReason; detail: string };

function reject(reason: FrameRejectReason, detail: string): DecodeResult {
  return { ok: false, reason, detail };
}

/**
 * Parse and check a frame's header and length. The payload is returned as a view; sample values are
 * converted (and float32 checked for NaN/∞) by {@link decodeSamples}.
 */
export function decodeFrame(bytes: Uint8Array): DecodeResult {
  if (bytes.byteLength < FRAME_HEADER_BYTES) {
    return reject('short_header', `${bytes.byteLength} bytes, a header needs ${FRAME_HEADER_BYTES}`);
  }
  const dv = new DataView(bytes.buffer, bytes.byteOffset, bytes.byteLength);
  const magic = dv.getUint32(0, true);
  if (magic !== FRAME_MAGIC) return reject('bad_magic', `magic 0x${magic.toString(16).padStart(8, '0')}`);
  const version = dv.getUint8(4);
  if (version !== FRAME_VERSION) return reject('bad_version', `version ${version}, this server reads ${FRAME_VERSION}`);
  const encoding = CODE_ENCODING[dv.getUint8(5)];
  if (encoding === undefined) return reject('bad_encoding', `encoding code ${dv.getUint8(5)}, allowed 1–4`);
  const headerBytes = dv.getUint16(6, true);
  if (headerBytes < FRAME_HEADER_BYTES || headerBytes > bytes.byteLength) {
    return reject('bad_header_length', `headerBytes ${headerBytes} (datagram ${bytes.byteLength} bytes)`);
  }
  // firstSample as two 32-bit halves: a frame's hot path needs no BigInt. < 2^53 ⇔ high half < 2^21.
  const firstLow = dv.getUint32(16, true);
  const firstHigh = dv.getUint32(20, true);
  if (firstHigh >= 0x200000) {
    return reject('bad_field', `firstSample ${dv.getBigUint64(16, true)} exceeds 2^53−1`);
  }
  const sampleRateHz = dv.getUint32(24, true);
  const channels = dv.getUint16(28, true);
  const samplesPerChannel = dv.getUint16(30, true);
  if (sampleRateHz === 0) return reject('bad_field', 'sampleRateHz 0');
  if (channels === 0) return reject('bad_field', 'channels 0');
  if (samplesPerChannel === 0) return reject('bad_field', 'samplesPerChannel 0');
  const payloadBytes = channels * samplesPerChannel * BYTES_PER_SAMPLE[encoding];
  const have = bytes.byteLength - headerBytes;
  if (have < payloadBytes) return reject('truncated', `payload ${have} bytes, header announces ${payloadBytes}`);
  if (have > payloadBytes) return reject('trailing_bytes', `payload ${have} bytes, header announces ${payloadBytes}`);
  return {
    ok: true,
    frame: {
      version,
      encoding,
      streamId: dv.getUint32(8, true),
      sequence: dv.getUint32(12, true),
      firstSample: firstHigh * 0x1_0000_0000 + firstLow,
      sampleRateHz,
      channels,
      samplesPerChannel,
      payload: bytes.subarray(headerBytes, headerBytes + payloadBytes),
    },
  };
}

/**
 * Convert a frame's interleaved payload to planar float32 full-scale units (±1).
 * Integer encodings are divided by 2^(bits−1).
 * @param out length ≥ channels·samplesPerChannel; channel c, sample i lands at out[c·n + i]
 * @returns false if a float32 payload holds NaN or ±∞ (out is then partly written and must be discarded)
 */
export function decodeSamples(frame: DecodedFrame, out: Float32Array): boolean {
  return convertInterleaved(frame.payload, frame.channels, frame.samplesPerChannel, frame.encoding, out, Infinity, frame.samplesPerChannel, 0) === 'ok';
}

/** Outcome of a checked sample conversion: the samples are usable, or why not. */
export type SampleCheck = 'ok' | 'non_finite' | 'beyond_bound';

/**
 * Like {@link decodeSamples}, and float32 samples must also satisfy |x| ≤ maxAbs (full-scale
 * units; e.g. 1000 for +60 dBFS). Integer encodings cannot exceed full scale, so the bound only
 * applies to float32. The first offending sample decides the answer.
 * @param out length ≥ channels·samplesPerChannel, planar; partly written when the answer is not 'ok'
 */
export function decodeSamplesChecked(frame: DecodedFrame, out: Float32Array, maxAbs = Infinity): SampleCheck {
  return convertInterleaved(frame.payload, frame.channels, frame.samplesPerChannel, frame.encoding, out, maxAbs, frame.samplesPerChannel, 0);
}

/**
 * {@link decodeSamplesChecked} into a wider planar buffer: channel c, sample i lands at
 * out[c·stride + offset + i] (appending a frame to a block being assembled).
 * @param stride ≥ offset + samplesPerChannel; out length ≥ (channels − 1)·stride + offset + samplesPerChannel
 */
export function decodeSamplesInto(frame: DecodedFrame, out: Float32Array, stride: number, offset: number, maxAbs = Infinity): SampleCheck {
  if (offset < 0 || offset + frame.samplesPerChannel > stride || out.length < (frame.channels - 1) * stride + offset + frame.samplesPerChannel) {
    throw new RangeError(`${frame.channels} × ${frame.samplesPerChannel} samples at offset ${offset} do not fit stride ${stride} in ${out.length}`);
  }
  return convertInterleaved(frame.payload, frame.channels, frame.samplesPerChannel, frame.encoding, out, maxAbs, stride, offset);
}

/** Largest finite float32, (2 − 2^−23)·2^127 (IEEE 754 binary32). */
const FLOAT32_MAX = 3.4028234663852886e38;

/** True when this machine stores numbers little-endian (typed arrays use the host's order). */
const LITTLE_ENDIAN_HOST = new Uint8Array(new Uint16Array([1]).buffer)[0] === 1;

/**
 * Interleaved little-endian samples (wire payload or WAV data, which share the layout) to planar
 * float32 full-scale units.
 * @param bytes at least channels·frames samples of `encoding`
 * @param out length ≥ channels·frames; channel c, sample i lands at out[c·frames + i]
 * @returns false if float32 input holds NaN or ±∞
 */
export function decodeInterleaved(bytes: Uint8Array, channels: number, frames: number, encoding: SampleEncoding, out: Float32Array): boolean {
  return convertInterleaved(bytes, channels, frames, encoding, out, Infinity, frames, 0) === 'ok';
}

/**
 * The one conversion loop behind the decoders above; float32 samples must be finite and |x| ≤ maxAbs.
 * Channel c, sample i lands at out[c·stride + offset + i].
 */
function convertInterleaved(bytes: Uint8Array, channels: number, frames: number, encoding: SampleEncoding, out: Float32Array, maxAbs: number, stride: number, offset: number): SampleCheck {
  const m = channels;
  const n = frames;
  const payload = bytes;
  // ±∞ lie beyond the largest float32, so this one range test also refuses them (and NaN, which
  // fails every comparison); which of the two it was is sorted out only for the refused sample.
  const bound = Math.min(maxAbs, FLOAT32_MAX);
  // Typed-array views read the little-endian samples directly when the host is little-endian and
  // the payload is aligned; otherwise the DataView reads below.
  if (LITTLE_ENDIAN_HOST && encoding === 'float32' && payload.byteOffset % 4 === 0) {
    const f = new Float32Array(payload.buffer, payload.byteOffset, m * n);
    for (let i = 0, p = 0; i < n; i++) {
      for (let c = 0; c < m; c++, p++) {
        const v = f[p];
        if (!(v <= bound && v >= -bound)) return v - v !== 0 ? 'non_finite' : 'beyond_bound';
        out[c * stride + offset + i] = v;
      }
    }
    return 'ok';
  }
  if (LITTLE_ENDIAN_HOST && encoding === 'int16' && payload.byteOffset % 2 === 0) {
    const q = new Int16Array(payload.buffer, payload.byteOffset, m * n);
    for (let i = 0, p = 0; i < n; i++) for (let c = 0; c < m; c++, p++) out[c * stride + offset + i] = q[p] / 32768;
    return 'ok';
  }
  const dv = new DataView(payload.buffer, payload.byteOffset, payload.byteLength);
  let p = 0;
  switch (encoding) {
    case 'int16':
      for (let i = 0; i < n; i++) for (let c = 0; c < m; c++, p += 2) out[c * stride + offset + i] = dv.getInt16(p, true) / 32768;
      return 'ok';
    case 'int24':
      for (let i = 0; i < n; i++) {
        for (let c = 0; c < m; c++, p += 3) {
          const u = payload[p] | (payload[p + 1] << 8) | (payload[p + 2] << 16);
          out[c * stride + offset + i] = ((u << 8) >> 8) / 8388608;
        }
      }
      return 'ok';
    case 'int32':
      for (let i = 0; i < n; i++) for (let c = 0; c < m; c++, p += 4) out[c * stride + offset + i] = dv.getInt32(p, true) / 2147483648;
      return 'ok';
    case 'float32':
      for (let i = 0; i < n; i++) {
        for (let c = 0; c < m; c++, p += 4) {
          const v = dv.getFloat32(p, true);
          if (!(v <= bound && v >= -bound)) return v - v !== 0 ? 'non_finite' : 'beyond_bound';
          out[c * stride + offset + i] = v;
        }
      }
      return 'ok';
  }
}

/** Total bytes of a frame with this shape. */
export function frameBytes(channels: number, samplesPerChannel: number, encoding: SampleEncoding): number {
  return FRAME_HEADER_BYTES + channels * samplesPerChannel * BYTES_PER_SAMPLE[encoding];
}

/** Most samples per channel that keep a frame within `maxBytes` (at least 1, at most 65535). */
export function maxSamplesPerFrame(channels: number, encoding: SampleEncoding, maxBytes = MTU_FRAME_BYTES): number {
  const n = Math.floor((maxBytes - FRAME_HEADER_BYTES) / (channels * BYTES_PER_SAMPLE[encoding]));
  return Math.max(1, Math.min(65535, n));
}

function checkHeader(h: FrameHeader): void {
  const u32 = (v: number) => Number.isInteger(v) && v >= 0 && v <= 0xffffffff;
  if (!u32(h.streamId)) throw new RangeError(`streamId ${h.streamId} is not a uint32`);
  if (!u32(h.sequence)) throw new RangeError(`sequence ${h.sequence} is not a uint32`);
  if (!Number.isSafeInteger(h.firstSample) || h.firstSample < 0) throw new RangeError(`firstSample ${h.firstSample} is not an integer in [0, 2^53)`);
  if (!u32(h.sampleRateHz) || h.sampleRateHz === 0) throw new RangeError(`sampleRateHz ${h.sampleRateHz} is not a uint32 > 0`);
  if (!Number.isInteger(h.channels) || h.channels < 1 || h.channels > 65535) throw new RangeError(`channels ${h.channels} not in 1–65535`);
  if (!Number.isInteger(h.samplesPerChannel) || h.samplesPerChannel < 1 || h.samplesPerChannel > 65535) {
    throw new RangeError(`samplesPerChannel ${h.samplesPerChannel} not in 1–65535`);
  }
  if (!(h.encoding in ENCODING_CODE)) throw new TypeError(`encoding ${String(h.encoding)} not one of ${SAMPLE_ENCODINGS.join(', ')}`);
  if (frameBytes(h.channels, h.samplesPerChannel, h.encoding) > MAX_FRAME_BYTES) {
    throw new RangeError(`frame of ${frameBytes(h.channels, h.samplesPerChannel, h.encoding)} bytes exceeds ${MAX_FRAME_BYTES}`);
  }
}

/** Write the 32-byte header into `out` (length ≥ 32). */
export function writeHeader(out: Uint8Array, h: FrameHeader): void {
  checkHeader(h);
  const dv = new DataView(out.buffer, out.byteOffset, FRAME_HEADER_BYTES);
  dv.setUint32(0, FRAME_MAGIC, true);
  dv.setUint8(4, FRAME_VERSION);
  dv.setUint8(5, ENCODING_CODE[h.encoding]);
  dv.setUint16(6, FRAME_HEADER_BYTES, true);
  dv.setUint32(8, h.streamId, true);
  dv.setUint32(12, h.sequence, true);
  dv.setBigUint64(16, BigInt(h.firstSample), true);
  dv.setUint32(24, h.sampleRateHz, true);
  dv.setUint16(28, h.channels, true);
  dv.setUint16(30, h.samplesPerChannel, true);
}

/**
 * Build a frame from payload bytes already in the wire encoding (e.g. PCM straight from a WAV file,
 * whose interleaved little-endian layout is the same).
 */
export function encodeFrameRaw(h: FrameHeader, payload: Uint8Array): Uint8Array {
  const need = h.channels * h.samplesPerChannel * BYTES_PER_SAMPLE[h.encoding];
  if (payload.byteLength !== need) throw new RangeError(`payload is ${payload.byteLength} bytes, header needs ${need}`);
  const out = new Uint8Array(FRAME_HEADER_BYTES + need);
  writeHeader(out, h);
  out.set(payload, FRAME_HEADER_BYTES);
  return out;
}

/**
 * Build a frame from interleaved float samples in full-scale units. Integer encodings round to the
 * nearest step and clip to the encoding's range.
 * @param samples length channels·samplesPerChannel, interleaved sample-major
 */
export function encodeFrame(h: FrameHeader, samples: ArrayLike<number>): Uint8Array {
  const count = h.channels * h.samplesPerChannel;
  if (samples.length !== count) throw new RangeError(`${samples.length} samples, header needs ${count}`);
  const out = new Uint8Array(frameBytes(h.channels, h.samplesPerChannel, h.encoding));
  writeHeader(out, h);
  encodeInterleaved(out.subarray(FRAME_HEADER_BYTES), samples, h.encoding);
  return out;
}

/**
 * Quantise full-scale floats (±1) to little-endian samples of `encoding` (the wire payload and WAV
 * data layout): integers round to the nearest step and clip to [−2^(b−1), 2^(b−1) − 1]; float32 is
 * stored as is.
 * @param out at least samples.length × bytesPerSample(encoding) bytes
 */
export function encodeInterleaved(out: Uint8Array, samples: ArrayLike<number>, encoding: SampleEncoding): void {
  const count = samples.length;
  const dv = new DataView(out.buffer, out.byteOffset, out.byteLength);
  const q = (x: number, full: number) => Math.max(-full, Math.min(full - 1, Math.round(x * full)));
  switch (encoding) {
    case 'int16':
      for (let k = 0; k < count; k++) dv.setInt16(2 * k, q(samples[k], 32768), true);
      return;
    case 'int24':
      for (let k = 0, p = 0; k < count; k++, p += 3) {
        const v = q(samples[k], 8388608);
        out[p] = v & 0xff;
        out[p + 1] = (v >> 8) & 0xff;
        out[p + 2] = (v >> 16) & 0xff;
      }
      return;
    case 'int32':
      for (let k = 0; k < count; k++) dv.setInt32(4 * k, q(samples[k], 2147483648), true);
      return;
    case 'float32':
      for (let k = 0; k < count; k++) dv.setFloat32(4 * k, samples[k], true);
      return;
  }
}
