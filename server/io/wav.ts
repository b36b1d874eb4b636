/**
 * WAV files: RIFF/WAVE (Microsoft & IBM, Multimedia Programming Interface and Data Specifications
 * 1.0, 1991, "Waveform Audio File Format"), the WAVE_FORMAT_EXTENSIBLE fmt chunk (Microsoft,
 * "Multiple Channel Audio Data and WAVE Files"), and for reading RF64 (EBU Tech 3306) and BW64
 * (ITU-R BS.2088, same ds64 layout) beyond 4 GiB.
 *
 * Only sample formats whose data bytes are already the ingest wire payload are accepted: PCM 16,
 * 24 (3-byte) and 32-bit and IEEE float 32-bit, interleaved little-endian. Everything else (8-bit
 * unsigned PCM, 64-bit float, A-law, µ-law, ADPCM, MPEG …) is rejected by format code and bits.
 */
import { open, type FileHandle } from 'node:fs/promises';
import { bytesPerSample, encodeInterleaved, type SampleEncoding } from '../../shared/frame.ts';
import { ioError } from './errors.ts';
import { checkSampleFormat, FileSampleReader, readFully, type SampleFileInfo, type SampleFormat } from './raw.ts';

export const WAVE_FORMAT_PCM = 0x0001;
export const WAVE_FORMAT_IEEE_FLOAT = 0x0003;
export const WAVE_FORMAT_EXTENSIBLE = 0xfffe;

/** What {@link parseWavHeader} found, beyond the sample region. */
export interface WavInfo extends SampleFileInfo {
  container: 'wav' | 'rf64';
  /** wFormatTag of the fmt chunk: 1, 3 or 0xFFFE. */
  formatTag: number;
  /** The sample format proper: wFormatTag, or for EXTENSIBLE the SubFormat GUID's code (1 or 3). */
  sampleFormatTag: number;
  /** Significant bits in each sample container (EXTENSIBLE wValidBitsPerSample), else bitsPerSample. */
  validBitsPerSample: number;
  /** EXTENSIBLE dwChannelMask (speaker positions), 0 when absent or unassigned. */
  channelMask: number;
  /** Data size the header announces, bytes (ds64 value for RF64); 0 or 0xFFFFFFFF if never finalised. */
  declaredDataBytes: number;
}

// KSDATAFORMAT_SUBTYPE_* GUIDs are {XXXXXXXX-0000-0010-8000-00AA00389B71} with the format code in
// Data1; on disk Data1–Data3 are little-endian, so bytes 4–15 are this fixed tail.
const GUID_TAIL = [0x00, 0x00, 0x10, 0x00, 0x80, 0x00, 0x00, 0xaa, 0x00, 0x38, 0x9b, 0x71];

const FORMAT_NAMES: Record<number, string> = {
  0x0001: 'PCM',
  0x0002: 'Microsoft ADPCM',
  0x0003: 'IEEE float',
  0x0006: 'A-law',
  0x0007: 'µ-law',
  0x0011: 'IMA ADPCM',
  0x0031: 'GSM 6.10',
  0x0050: 'MPEG',
  0x0055: 'MPEG Layer 3',
  0xfffe: 'WAVE_FORMAT_EXTENSIBLE',
};
const SUPPORTED = 'supported: PCM (1) 16/24/32-bit, IEEE float (3) 32-bit, WAVE_FORMAT_EXTENSIBLE (0xFFFE) with a PCM or IEEE float subformat';
const U32_UNSET = 0xffffffff;

function hex4(v: number): string {
  return `0x${v.toString(16).toUpperCase().padStart(4, '0')}`;
}
function formatName(tag: number): string {
  return `${hex4(tag)} (${FORMAT_NAMES[tag] ?? 'unknown'})`;
}
function fourcc(b: Uint8Array, at: number): string {
  return String.fromCharCode(b[at], b[at + 1], b[at + 2], b[at + 3]);
}
function printable(id: string): string {
  return /^[\x20-\x7e]{4}$/.test(id) ? `'${id}'` : `0x${[...id].map((c) => c.charCodeAt(0).toString(16).padStart(2, '0')).join('')}`;
}

interface FmtFields {
  formatTag: number;
  sampleFormatTag: number;
  channels: number;
  sampleRateHz: number;
  blockAlignBytes: number;
  bitsPerSample: number;
  validBitsPerSample: number;
  channelMask: number;
  encoding: SampleEncoding;
}

function parseFmt(body: Uint8Array, declaredBytes: number): FmtFields {
  if (body.byteLength < 16) throw ioError('ERR_WAV_MALFORMED', `fmt chunk of ${declaredBytes} bytes, at least 16 needed`);
  const dv = new DataView(body.buffer, body.byteOffset, body.byteLength);
  const formatTag = dv.getUint16(0, true);
  const channels = dv.getUint16(2, true);
  const sampleRateHz = dv.getUint32(4, true);
  const blockAlignBytes = dv.getUint16(12, true);
  const bitsPerSample = dv.getUint16(14, true);
  let sampleFormatTag = formatTag;
  let validBitsPerSample = bitsPerSample;
  let channelMask = 0;
  if (formatTag === WAVE_FORMAT_EXTENSIBLE) {
    // cbSize ≥ 22: wValidBitsPerSample, dwChannelMask, SubFormat GUID follow the 18-byte WAVEFORMATEX.
    if (body.byteLength < 40) throw ioError('ERR_WAV_MALFORMED', `WAVE_FORMAT_EXTENSIBLE fmt chunk of ${declaredBytes} bytes, 40 needed`);
    validBitsPerSample = dv.getUint16(18, true) || bitsPerSample;
    channelMask = dv.getUint32(20, true);
    const data1 = dv.getUint32(24, true);
    const tailOk = GUID_TAIL.every((b, i) => body[28 + i] === b);
    if (!tailOk || data1 > 0xffff) {
      const g = [...body.subarray(24, 40)].map((b) => b.toString(16).padStart(2, '0')).join('');
      throw ioError('ERR_WAV_UNSUPPORTED_FORMAT', `WAVE_FORMAT_EXTENSIBLE subformat GUID bytes ${g} are not a KSDATAFORMAT_SUBTYPE code; ${SUPPORTED}`);
    }
    sampleFormatTag = data1;
    if (validBitsPerSample > bitsPerSample) {
      throw ioError('ERR_WAV_MALFORMED', `wValidBitsPerSample ${validBitsPerSample} exceeds the ${bitsPerSample}-bit container`);
    }
  }
  const via = formatTag === WAVE_FORMAT_EXTENSIBLE ? ' in WAVE_FORMAT_EXTENSIBLE' : '';
  let encoding: SampleEncoding;
  if (sampleFormatTag === WAVE_FORMAT_PCM) {
    if (bitsPerSample === 16) encoding = 'int16';
    else if (bitsPerSample === 24) encoding = 'int24';
    else if (bitsPerSample === 32) encoding = 'int32';
    else {
      const why = bitsPerSample === 8 ? ' (8-bit unsigned)' : '';
      throw ioError('ERR_WAV_UNSUPPORTED_FORMAT', `format ${formatName(sampleFormatTag)}${via} with ${bitsPerSample} bits per sample${why}; ${SUPPORTED}`);
    }
  } else if (sampleFormatTag === WAVE_FORMAT_IEEE_FLOAT) {
    if (bitsPerSample !== 32) {
      throw ioError('ERR_WAV_UNSUPPORTED_FORMAT', `format ${formatName(sampleFormatTag)}${via} with ${bitsPerSample} bits per sample; ${SUPPORTED}`);
    }
    encoding = 'float32';
  } else {
    throw ioError('ERR_WAV_UNSUPPORTED_FORMAT', `format code ${formatName(sampleFormatTag)}${via}, ${bitsPerSample} bits per sample; ${SUPPORTED}`);
  }
  if (channels === 0) throw ioError('ERR_WAV_MALFORMED', 'fmt chunk has 0 channels');
  if (sampleRateHz === 0) throw ioError('ERR_WAV_MALFORMED', 'fmt chunk has sample rate 0');
  const expectAlign = channels * bytesPerSample(encoding);
  if (blockAlignBytes !== expectAlign) {
    throw ioError('ERR_WAV_MALFORMED', `nBlockAlign ${blockAlignBytes}, ${channels} channels × ${bitsPerSample / 8} bytes need ${expectAlign}`);
  }
  return { formatTag, sampleFormatTag, channels, sampleRateHz, blockAlignBytes, bitsPerSample, validBitsPerSample, channelMask, encoding };
}

type ReadAt = (position: number, length: number) => Promise<Uint8Array>;

function isFileHandle(s: Uint8Array | FileHandle): s is FileHandle {
  return !(s instanceof Uint8Array);
}

/**
 * Locate the samples of a WAV/RF64 file by walking its chunks. Chunk bodies other than fmt and ds64
 * are skipped without reading, with the pad byte after odd-sized chunks (RIFF word alignment).
 *
 * A data chunk whose size is 0 with bytes following it, 0xFFFFFFFF without an RF64 ds64 value, or
 * larger than the file (a recording that crashed before its header was finalised) is taken to run to
 * the end of the file; whole frames only, `truncated: true`.
 *
 * @param source the whole file as bytes, or an open file handle (only chunk headers are read)
 * @param options.fileBytes total file size when `source` holds only its first bytes
 */
export async function parseWavHeader(source: Uint8Array | FileHandle, options: { fileBytes?: number } = {}): Promise<WavInfo> {
  let readAt: ReadAt;
  let fileBytes: number;
  if (isFileHandle(source)) {
    fileBytes = options.fileBytes ?? (await source.stat()).size;
    readAt = async (position, length) => {
      const buf = new Uint8Array(Math.max(0, Math.min(length, fileBytes - position)));
      const got = await readFully(source, buf, position);
      return buf.subarray(0, got);
    };
  } else {
    fileBytes = options.fileBytes ?? source.byteLength;
    readAt = async (position, length) => source.subarray(position, Math.min(position + length, source.byteLength));
  }

  const head = await readAt(0, 12);
  if (head.byteLength < 12) throw ioError('ERR_WAV_NOT_WAVE', `file of ${fileBytes} bytes, a RIFF header needs 12`);
  const riffId = fourcc(head, 0);
  const isRf64 = riffId === 'RF64' || riffId === 'BW64';
  if (riffId !== 'RIFF' && !isRf64) throw ioError('ERR_WAV_NOT_WAVE', `file starts with ${printable(riffId)}, expected 'RIFF' or 'RF64'`);
  if (fourcc(head, 8) !== 'WAVE') throw ioError('ERR_WAV_NOT_WAVE', `RIFF form type ${printable(fourcc(head, 8))}, expected 'WAVE'`);

  let ds64DataBytes: number | null = null;
  let fmt: FmtFields | null = null;
  let data: { offset: number; declared: number; used: number; truncated: boolean } | null = null;
  let pos = 12;
  while (pos + 8 <= fileBytes && !(fmt !== null && data !== null)) {
    const hdr = await readAt(pos, 8);
    if (hdr.byteLength < 8) break;
    const id = fourcc(hdr, 0);
    const size = new DataView(hdr.buffer, hdr.byteOffset, 8).getUint32(4, true);
    const body = pos + 8;
    const available = fileBytes - body;
    if (id === 'data') {
      let declared = size;
      if (size === U32_UNSET && ds64DataBytes !== null) declared = ds64DataBytes;
      const unfinalised = (declared === 0 && available > 0) || (size === U32_UNSET && ds64DataBytes === null);
      if (unfinalised || declared > available) {
        data = { offset: body, declared, used: available, truncated: true };
        break; // the data runs to the end of the file; no chunk can follow it
      }
      data = { offset: body, declared, used: declared, truncated: false };
      pos = body + declared + (declared & 1);
      continue;
    }
    if (id !== 'ds64' && id !== 'fmt ') {
      pos = body + size + (size & 1);
      continue;
    }
    if (size > available) {
      throw ioError('ERR_WAV_MALFORMED', `${printable(id)} chunk at offset ${pos} declares ${size} bytes, the file ends ${available} bytes later`);
    }
    if (id === 'fmt ') {
      fmt = parseFmt(await readAt(body, Math.min(size, 40)), size);
    } else if (isRf64) {
      // EBU Tech 3306 §3: ds64 = riffSize, dataSize, sampleCount (uint64 each), then a table.
      if (size < 24) throw ioError('ERR_WAV_MALFORMED', `ds64 chunk of ${size} bytes, at least 24 needed`);
      const b = await readAt(body, 24);
      const big = new DataView(b.buffer, b.byteOffset, 24).getBigUint64(8, true);
      if (big > BigInt(Number.MAX_SAFE_INTEGER)) throw ioError('ERR_WAV_MALFORMED', `ds64 data size ${big} exceeds 2^53−1`);
      ds64DataBytes = Number(big);
    }
    pos = body + size + (size & 1);
  }
  if (fmt === null) throw ioError('ERR_WAV_NO_FMT', data ? 'a data chunk was found but no fmt chunk before the end of the file' : `no fmt chunk in ${fileBytes} bytes`);
  if (data === null) throw ioError('ERR_WAV_NO_DATA', `no data chunk in ${fileBytes} bytes`);
  const frames = Math.floor(data.used / fmt.blockAlignBytes);
  const dataBytes = frames * fmt.blockAlignBytes;
  return {
    container: isRf64 ? 'rf64' : 'wav',
    sampleRateHz: fmt.sampleRateHz,
    channels: fmt.channels,
    encoding: fmt.encoding,
    bitsPerSample: fmt.bitsPerSample,
    validBitsPerSample: fmt.validBitsPerSample,
    blockAlignBytes: fmt.blockAlignBytes,
    formatTag: fmt.formatTag,
    sampleFormatTag: fmt.sampleFormatTag,
    channelMask: fmt.channelMask,
    frames,
    dataOffset: data.offset,
    dataBytes,
    declaredDataBytes: data.declared,
    truncated: data.truncated,
    partialFrameBytes: data.used - dataBytes,
  };
}

/** Open a WAV/RF64 file for chunked reading of its samples. Close the reader when done. */
export async function openWav(path: string): Promise<FileSampleReader<WavInfo>> {
  const handle = await open(path, 'r');
  try {
    return new FileSampleReader(handle, await parseWavHeader(handle));
  } catch (e) {
    await handle.close();
    throw e;
  }
}

export interface WavHeaderSpec extends SampleFormat {
  /** Frames (sample instants) of data that will follow the header. */
  frames: number;
  /** EXTENSIBLE dwChannelMask; default 0: channels are array sensors, not speakers. */
  channelMask?: number;
}

/**
 * True when Microsoft's guidance asks for WAVE_FORMAT_EXTENSIBLE: more than two channels, or PCM of
 * more than 16 bits (its container and valid-bit count would otherwise be ambiguous). Float32 of one
 * or two channels keeps the plain IEEE float tag, which every reader knows.
 */
export function needsExtensible(channels: number, encoding: SampleEncoding): boolean {
  return channels > 2 || encoding === 'int24' || encoding === 'int32';
}

/**
 * The bytes before the samples of a WAV file: RIFF header, fmt chunk (16-byte PCM, 18-byte float or
 * 40-byte EXTENSIBLE), a fact chunk for float data (required for non-PCM formats by the 1991
 * specification), and the data chunk header. The RIFF size counts the pad byte that follows data of
 * odd length; the caller writes that byte.
 */
export function encodeWavHeader(spec: WavHeaderSpec): Uint8Array {
  checkSampleFormat(spec);
  const { channels, sampleRateHz, encoding, frames } = spec;
  const channelMask = spec.channelMask ?? 0;
  if (!Number.isSafeInteger(frames) || frames < 0) throw ioError('ERR_IO_BAD_FORMAT', `frames ${frames}, allowed an integer ≥ 0`);
  if (!Number.isInteger(channelMask) || channelMask < 0 || channelMask > 0xffffffff) {
    throw ioError('ERR_IO_BAD_FORMAT', `channelMask ${channelMask}, allowed a uint32`);
  }
  const bps = bytesPerSample(encoding);
  const blockAlign = channels * bps;
  if (blockAlign > 0xffff) throw ioError('ERR_IO_BAD_FORMAT', `${channels} channels × ${bps} bytes exceed the 16-bit nBlockAlign`);
  const extensible = needsExtensible(channels, encoding);
  const isFloat = encoding === 'float32';
  const fmtBytes = extensible ? 40 : isFloat ? 18 : 16;
  const headerBytes = 12 + 8 + fmtBytes + (isFloat ? 12 : 0) + 8;
  const dataBytes = frames * blockAlign;
  const riffBytes = headerBytes - 8 + dataBytes + (dataBytes & 1);
  if (riffBytes > 0xffffffff) {
    throw ioError('ERR_WAV_TOO_LARGE', `${dataBytes} data bytes exceed the 4 GiB RIFF limit (RF64 writing is not supported)`);
  }
  const out = new Uint8Array(headerBytes);
  const dv = new DataView(out.buffer);
  const tag = (at: number, s: string) => {
    for (let i = 0; i < 4; i++) out[at + i] = s.charCodeAt(i);
  };
  tag(0, 'RIFF');
  dv.setUint32(4, riffBytes, true);
  tag(8, 'WAVE');
  tag(12, 'fmt ');
  dv.setUint32(16, fmtBytes, true);
  const code = isFloat ? WAVE_FORMAT_IEEE_FLOAT : WAVE_FORMAT_PCM;
  dv.setUint16(20, extensible ? WAVE_FORMAT_EXTENSIBLE : code, true);
  dv.setUint16(22, channels, true);
  dv.setUint32(24, sampleRateHz, true);
  dv.setUint32(28, sampleRateHz * blockAlign > 0xffffffff ? 0xffffffff : sampleRateHz * blockAlign, true);
  dv.setUint16(32, blockAlign, true);
  dv.setUint16(34, 8 * bps, true);
  if (fmtBytes >= 18) dv.setUint16(36, fmtBytes - 18, true); // cbSize
  if (extensible) {
    dv.setUint16(38, 8 * bps, true); // wValidBitsPerSample: the whole container
    dv.setUint32(40, channelMask, true);
    dv.setUint32(44, code, true); // SubFormat GUID Data1, then the fixed KSDATAFORMAT tail
    out.set(GUID_TAIL, 48);
  }
  let p = 20 + fmtBytes;
  if (isFloat) {
    tag(p, 'fact');
    dv.setUint32(p + 4, 4, true);
    dv.setUint32(p + 8, Math.min(frames, 0xffffffff), true); // dwSampleLength, frames per channel
    p += 12;
  }
  tag(p, 'data');
  dv.setUint32(p + 4, dataBytes, true);
  return out;
}

/**
 * Quantise interleaved full-scale floats (±1) to `encoding`, exactly as shared/frame.ts encodeFrame
 * does: round to the nearest step, clip to [−2^(b−1), 2^(b−1)−1]; float32 is stored unchanged.
 * @returns little-endian bytes, length samples.length × bytesPerSample
 */
export function encodeSamples(samples: ArrayLike<number>, encoding: SampleEncoding): Uint8Array {
  const out = new Uint8Array(samples.length * bytesPerSample(encoding));
  encodeInterleaved(out, samples, encoding);
  return out;
}

export interface WavFileSpec extends SampleFormat {
  /** Interleaved samples: full-scale floats to quantise, or bytes already in `encoding`. */
  interleaved: Float32Array | Uint8Array;
  channelMask?: number;
}

/** Write a whole WAV file (tests and tools; a recorder streams with {@link encodeWavHeader}). */
export async function writeWavFile(path: string, spec: WavFileSpec): Promise<{ frames: number; fileBytes: number }> {
  checkSampleFormat(spec);
  const data = spec.interleaved instanceof Uint8Array ? spec.interleaved : encodeSamples(spec.interleaved, spec.encoding);
  const blockAlign = spec.channels * bytesPerSample(spec.encoding);
  if (data.byteLength % blockAlign !== 0) {
    const what = spec.interleaved instanceof Uint8Array ? `${data.byteLength} bytes` : `${spec.interleaved.length} samples`;
    throw ioError('ERR_IO_BAD_SAMPLES', `${what} is not a whole number of ${spec.channels}-channel ${spec.encoding} frames`);
  }
  const frames = data.byteLength / blockAlign;
  const header = encodeWavHeader({ ...spec, frames });
  const handle = await open(path, 'w');
  try {
    await handle.write(header, 0, header.byteLength, 0);
    await handle.write(data, 0, data.byteLength, header.byteLength);
    if (data.byteLength & 1) await handle.write(new Uint8Array(1), 0, 1, header.byteLength + data.byteLength);
  } finally {
    await handle.close();
  }
  return { frames, fileBytes: header.byteLength + data.byteLength + (data.byteLength & 1) };
}
