/**
 * Interleaved little-endian sample data in a file, read in whole frames through an fs FileHandle so
 * a multi-GiB recording is never loaded at once. A raw file is such a region with no header; a WAV
 * or RF64 file (./wav.ts) is the same region behind a header, so both share {@link FileSampleReader}.
 *
 * A "frame" here is one sample instant across all channels (channels × bytesPerSample bytes, the
 * WAV block align), not an ingest wire frame. The bytes are the wire payload layout of
 * shared/frame.ts unchanged, so they can be sent without conversion.
 */
import { open, type FileHandle } from 'node:fs/promises';
import { bytesPerSample, SAMPLE_ENCODINGS, type SampleEncoding } from '../../shared/frame.ts';
import { ioError } from './errors.ts';

export interface SampleFormat {
  sampleRateHz: number;
  channels: number;
  encoding: SampleEncoding;
}

/** Where the samples of a file are and how to read them. */
export interface SampleFileInfo extends SampleFormat {
  container: 'wav' | 'rf64' | 'raw';
  /** Container size of one sample, bits (16, 24 or 32). */
  bitsPerSample: number;
  /** Bytes of one frame: channels × bytesPerSample. */
  blockAlignBytes: number;
  /** Whole frames in the file. */
  frames: number;
  /** File offset of the first sample byte. */
  dataOffset: number;
  /** Bytes of whole frames: frames × blockAlignBytes. */
  dataBytes: number;
  /**
   * True when the file holds less than (or something else than) its header announced: a data size
   * never finalised (0 or 0xFFFFFFFF) or larger than the file, or a raw file ending mid-frame.
   * `frames` then counts what the file really holds.
   */
  truncated: boolean;
  /** Bytes after the last whole frame that are ignored (a partial frame), 0 normally. */
  partialFrameBytes: number;
}

/** Checks channels 1–65535, sampleRateHz an integer 1–2^32−1, encoding one of SAMPLE_ENCODINGS. */
export function checkSampleFormat(f: SampleFormat): void {
  if (!Number.isInteger(f.channels) || f.channels < 1 || f.channels > 65535) {
    throw ioError('ERR_IO_BAD_FORMAT', `channels ${f.channels}, allowed an integer 1–65535`);
  }
  if (!Number.isInteger(f.sampleRateHz) || f.sampleRateHz < 1 || f.sampleRateHz > 0xffffffff) {
    throw ioError('ERR_IO_BAD_FORMAT', `sampleRateHz ${f.sampleRateHz}, allowed an integer 1–4294967295`);
  }
  if (!(SAMPLE_ENCODINGS as readonly string[]).includes(f.encoding)) {
    throw ioError('ERR_IO_BAD_FORMAT', `encoding ${String(f.encoding)}, allowed ${SAMPLE_ENCODINGS.join(', ')}`);
  }
}

/** Fill `buf` from `position`, looping over short reads; returns the bytes read (< length only at EOF). */
export async function readFully(handle: FileHandle, buf: Uint8Array, position: number): Promise<number> {
  let done = 0;
  while (done < buf.byteLength) {
    const { bytesRead } = await handle.read(buf, done, buf.byteLength - done, position + done);
    if (bytesRead === 0) break;
    done += bytesRead;
  }
  return done;
}

/**
 * Reads whole frames of an interleaved sample region. Owns the file handle: call {@link close}.
 * Not re-entrant on a shared `out` buffer: a returned view is only valid until the next call that
 * passes the same buffer.
 */
export class FileSampleReader<I extends SampleFileInfo = SampleFileInfo> {
  readonly info: I;
  #handle: FileHandle | null;

  constructor(handle: FileHandle, info: I) {
    this.#handle = handle;
    this.info = info;
  }

  /**
   * Read up to `count` frames starting at frame `startFrame`; fewer at the end of the file.
   * @param out optional buffer to read into (length ≥ frames returned × blockAlignBytes); the result
   *   is then a view of it
   * @returns interleaved little-endian bytes, sample-major (s0c0 s0c1 … s1c0 …)
   */
  async readFrames(startFrame: number, count: number, out?: Uint8Array): Promise<Uint8Array> {
    const handle = this.#handle;
    if (handle === null) throw ioError('ERR_IO_CLOSED', 'readFrames after close()');
    const { frames, blockAlignBytes, dataOffset } = this.info;
    if (!Number.isSafeInteger(startFrame) || startFrame < 0 || startFrame > frames) {
      throw ioError('ERR_IO_FRAME_RANGE', `startFrame ${startFrame}, the file holds frames 0–${frames}`);
    }
    if (!Number.isSafeInteger(count) || count < 0) {
      throw ioError('ERR_IO_FRAME_RANGE', `count ${count}, allowed an integer ≥ 0`);
    }
    const n = Math.min(count, frames - startFrame);
    const bytes = n * blockAlignBytes;
    let buf: Uint8Array;
    if (out === undefined) buf = new Uint8Array(bytes);
    else if (out.byteLength >= bytes) buf = out.subarray(0, bytes);
    else throw ioError('ERR_IO_FRAME_RANGE', `out holds ${out.byteLength} bytes, ${n} frames need ${bytes}`);
    const got = await readFully(handle, buf, dataOffset + startFrame * blockAlignBytes);
    if (got < bytes) {
      throw ioError('ERR_IO_SHORT_READ', `read ${got} of ${bytes} bytes at frame ${startFrame}; did the file shrink?`);
    }
    return buf;
  }

  /**
   * Yield the file from `startFrame` to its end in chunks of `framesPerChunk` frames (the last may
   * be shorter). Each chunk is a fresh buffer, safe to keep.
   */
  async *chunks(framesPerChunk: number, startFrame = 0): AsyncGenerator<Uint8Array> {
    if (!Number.isSafeInteger(framesPerChunk) || framesPerChunk < 1) {
      throw ioError('ERR_IO_FRAME_RANGE', `framesPerChunk ${framesPerChunk}, allowed an integer ≥ 1`);
    }
    for (let f = startFrame; f < this.info.frames; f += framesPerChunk) {
      yield await this.readFrames(f, framesPerChunk);
    }
  }

  /** Close the file; further reads fail with ERR_IO_CLOSED. Closing twice is harmless. */
  async close(): Promise<void> {
    const handle = this.#handle;
    this.#handle = null;
    if (handle !== null) await handle.close();
  }
}

export interface RawOptions extends SampleFormat {
  /** Bytes to skip at the start of the file (an unknown header), default 0. */
  offsetBytes?: number;
}

/**
 * Open a headerless file of interleaved little-endian samples. A size that is not a whole number of
 * frames is read up to the last whole frame; the rest is reported in `partialFrameBytes` with
 * `truncated: true` (typically a recording cut mid-write).
 */
export async function openRaw(path: string, options: RawOptions): Promise<FileSampleReader> {
  checkSampleFormat(options);
  const offsetBytes = options.offsetBytes ?? 0;
  if (!Number.isSafeInteger(offsetBytes) || offsetBytes < 0) {
    throw ioError('ERR_IO_BAD_FORMAT', `offsetBytes ${offsetBytes}, allowed an integer ≥ 0`);
  }
  const handle = await open(path, 'r');
  try {
    const fileBytes = (await handle.stat()).size;
    const bps = bytesPerSample(options.encoding);
    const blockAlignBytes = options.channels * bps;
    const available = Math.max(0, fileBytes - offsetBytes);
    const frames = Math.floor(available / blockAlignBytes);
    const partialFrameBytes = available - frames * blockAlignBytes;
    return new FileSampleReader(handle, {
      container: 'raw',
      sampleRateHz: options.sampleRateHz,
      channels: options.channels,
      encoding: options.encoding,
      bitsPerSample: 8 * bps,
      blockAlignBytes,
      frames,
      dataOffset: offsetBytes,
      dataBytes: frames * blockAlignBytes,
      truncated: partialFrameBytes !== 0,
      partialFrameBytes,
    });
  } catch (e) {
    await handle.close();
    throw e;
  }
}
