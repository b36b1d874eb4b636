/**
 * A WAV file written while the audio arrives: RIFF/WAVE (Microsoft & IBM, Multimedia Programming
 * Interface and Data Specifications 1.0, 1991), WAVE_FORMAT_EXTENSIBLE for more than two channels or
 * more than 16 bits (Microsoft, "Multiple Channel Audio Data and WAVE Files"), and optionally RF64
 * (EBU Tech 3306) once the data outgrows the 4 GiB RIFF sizes.
 *
 * Layout: 'RIFF' size 'WAVE', a 28-byte JUNK chunk, fmt, (fact for float), data. The JUNK chunk is
 * the space EBU Tech 3306 §3 asks a writer to reserve so that it can later be overwritten in place by
 * the ds64 chunk (riffSize, dataSize, sampleCount as uint64, table length 0) when the file becomes an
 * RF64 file. Readers of plain RIFF skip JUNK like any unknown chunk.
 *
 * Crash safety: the header's RIFF and data sizes are rewritten in place every `headerRefreshMs` and
 * on close, and only ever announce bytes whose writes have completed. A process killed between two
 * refreshes leaves a valid file whose header covers everything up to the last refresh (the bytes
 * after it are ignored by readers that trust the data size). That survives kill -9 (the bytes are in
 * the OS page cache); surviving power loss needs `datasync: true`.
 *
 * A failed write (disk full, quota, I/O error) stops the writer: it is reported once, as
 * ERR_REC_NO_SPACE when the disk or quota is full, else ERR_REC_WRITE_FAILED. close() then keeps
 * what reached the file: it cuts the file after the last whole frame written in order, adds the pad
 * byte, and rewrites the header over exactly those frames ({@link WavStreamWriter.headerFrames}).
 * Rewriting bytes a file already has needs no new space, so this works on a full disk too. A file
 * whose header never reached the disk is removed. Messages name the file, never its folder.
 *
 * Writes never block the caller: samples are quantised into fixed-size chunk buffers that are
 * written in order, one at a time, at their own file positions. The queue of chunks is bounded by
 * `maxQueueBytes`; see {@link WavStreamWriterOptions.maxQueueBytes} for the policy when it is full.
 */
import { writeSync } from 'node:fs';
import { open, unlink, type FileHandle } from 'node:fs/promises';
import { basename } from 'node:path';
import { bytesPerSample, encodeInterleaved } from '../../shared/frame.ts';
import { fsErrorText, isNoSpace } from '../io/disk-space.ts';
import { encodeWavHeader } from '../io/wav.ts';

// ---------------------------------------------------------------------------------------------
// Error catalogue of the output layer (recordings). Codes, message prefixes, error classes and the
// HTTP status a REST route answers with when the error reaches it.

type ErrorClass = typeof Error | typeof RangeError | typeof TypeError;

export const OUTPUT_ERRORS = {
  ERR_REC_BAD_OPTIONS: { errorClass: RangeError, httpStatus: 400, message: 'invalid recording option' },
  ERR_REC_BAD_BLOCK: { errorClass: RangeError, httpStatus: 500, message: 'block does not fit the recording' },
  ERR_REC_FULL: { errorClass: RangeError, httpStatus: 500, message: 'WAV file is full' },
  ERR_REC_CLOSED: { errorClass: Error, httpStatus: 500, message: 'WAV writer is closed' },
  ERR_REC_WRITE_FAILED: { errorClass: Error, httpStatus: 500, message: 'recording write failed' },
  ERR_REC_ALREADY_RECORDING: { errorClass: Error, httpStatus: 409, message: 'a recording is already running' },
  ERR_REC_NOT_RECORDING: { errorClass: Error, httpStatus: 409, message: 'no recording is running' },
  ERR_REC_EXISTS: { errorClass: Error, httpStatus: 409, message: 'recording file already exists' },
  ERR_REC_UNKNOWN_TRACK: { errorClass: RangeError, httpStatus: 400, message: 'unknown recording track' },
  ERR_REC_NO_SPACE: { errorClass: Error, httpStatus: 507, message: 'not enough free space' },
} as const satisfies Record<string, { errorClass: ErrorClass; httpStatus: number; message: string }>;

export type OutputErrorCode = keyof typeof OUTPUT_ERRORS;

export interface OutputError extends Error {
  code: OutputErrorCode;
  httpStatus: number;
  /** The message without the catalogue's prefix. */
  detail: string;
}

/** Build the catalogue's error for `code`: message `<prefix>: <detail>`, with `code` and `httpStatus`. */
export function outputError(code: OutputErrorCode, detail: string, cause?: unknown): OutputError {
  const spec = OUTPUT_ERRORS[code];
  const err = new spec.errorClass(`${spec.message}: ${detail}`, cause === undefined ? undefined : { cause }) as OutputError;
  err.code = code;
  err.httpStatus = spec.httpStatus;
  err.detail = detail;
  return err;
}

/**
 * A failed file operation as the catalogue's error: ERR_REC_NO_SPACE for a full disk or quota,
 * else ERR_REC_WRITE_FAILED; `what` names the operation and the file (never its folder).
 */
export function writeError(what: string, e: unknown): OutputError {
  if (isOutputError(e)) return e;
  return outputError(isNoSpace(e) ? 'ERR_REC_NO_SPACE' : 'ERR_REC_WRITE_FAILED', `${what}: ${fsErrorText(e)}`, e);
}

export function isOutputError(e: unknown): e is OutputError {
  return e instanceof Error && typeof (e as { code?: unknown }).code === 'string' && (e as OutputError).code in OUTPUT_ERRORS;
}

// ---------------------------------------------------------------------------------------------

/**
 * Sample encodings a recording may use. int32 keeps what float32 samples carry (24-bit
 * significands): an int16, int24 or left-justified 24-bit int32 input is recorded bit for bit.
 */
export type RecordingEncoding = 'int16' | 'int24' | 'int32' | 'float32';
export const RECORDING_ENCODINGS: readonly RecordingEncoding[] = ['int16', 'int24', 'int32', 'float32'];

/** RIFF sizes are uint32; the default limit leaves 4 KiB for the header and the pad byte. */
export const RIFF_MAX_DATA_BYTES = 0xffffffff - 4096;

export interface WavStreamWriterOptions {
  sampleRateHz: number;
  channels: number;
  encoding: RecordingEncoding;
  /** Interval of the in-place header update, ms; default 500. A kill loses at most this much. */
  headerRefreshMs?: number;
  /**
   * Data bytes at which a plain RIFF file ends; default {@link RIFF_MAX_DATA_BYTES}. With
   * `onLimit: 'full'` no frame beyond it is accepted ({@link WavStreamWriter.framesLeft} reaches 0,
   * the caller rotates to a new file); with `'rf64'` the header turns into RF64 beyond it.
   */
  maxDataBytes?: number;
  /** What happens at `maxDataBytes`: 'full' (default) or 'rf64' (EBU Tech 3306, in place). */
  onLimit?: 'full' | 'rf64';
  /** Size of one write to the file, bytes (rounded down to whole frames); default 256 KiB. */
  chunkBytes?: number;
  /**
   * Limit of the bytes waiting to be written; default 16 MiB (≈ 7 s of 16 × 24-bit × 48 kHz).
   * Policy when a chunk would take the queue over it: that chunk is written synchronously
   * (fs.writeSync at its position) in the caller's turn, blocking it for one write, and counted in
   * `syncWrites`. Samples are never dropped. Before the file is open (the first few ms) chunks are
   * held regardless of the limit, since there is nothing to write them to yet.
   */
  maxQueueBytes?: number;
  /** fdatasync after every header refresh (survives power loss, costs a disk flush); default false. */
  datasync?: boolean;
  /** Overwrite an existing file; default false (open fails with EEXIST, wrapped in ERR_REC_WRITE_FAILED). */
  overwrite?: boolean;
  /** Called once, with ERR_REC_NO_SPACE or ERR_REC_WRITE_FAILED, when a background write fails. */
  onError?: (err: OutputError) => void;
}

interface Chunk {
  buf: Uint8Array;
  /** Bytes used in buf. */
  length: number;
  /** File position of buf[0]. */
  position: number;
  done: boolean;
}

interface HeaderWaiter {
  /** Data end (file position) the header must cover. */
  target: number;
  resolve: () => void;
  reject: (e: unknown) => void;
}

/** Offsets inside the header this writer uses (see the module comment for the layout). */
interface HeaderLayout {
  bytes: Uint8Array;
  junkOffset: number;
  factOffset: number; // -1 without a fact chunk
  dataSizeOffset: number;
}

const JUNK_BODY_BYTES = 28; // ds64 without a table: 3 × uint64 + uint32 (EBU Tech 3306 §3)
const U32_MAX = 0xffffffff;

function buildHeader(sampleRateHz: number, channels: number, encoding: RecordingEncoding): HeaderLayout {
  const plain = encodeWavHeader({ sampleRateHz, channels, encoding, frames: 0 });
  const bytes = new Uint8Array(plain.byteLength + 8 + JUNK_BODY_BYTES);
  bytes.set(plain.subarray(0, 12), 0);
  const junkOffset = 12;
  bytes.set([0x4a, 0x55, 0x4e, 0x4b], junkOffset); // 'JUNK'
  new DataView(bytes.buffer).setUint32(junkOffset + 4, JUNK_BODY_BYTES, true);
  bytes.set(plain.subarray(12), junkOffset + 8 + JUNK_BODY_BYTES);
  // Walk the chunks after JUNK to find fact and data (encodeWavHeader decides which exist).
  const dv = new DataView(bytes.buffer);
  let factOffset = -1;
  let dataSizeOffset = -1;
  for (let p = junkOffset; p + 8 <= bytes.byteLength; ) {
    const id = String.fromCharCode(bytes[p], bytes[p + 1], bytes[p + 2], bytes[p + 3]);
    if (id === 'fact') factOffset = p + 8;
    if (id === 'data') {
      dataSizeOffset = p + 4;
      break;
    }
    p += 8 + dv.getUint32(p + 4, true);
  }
  if (dataSizeOffset !== bytes.byteLength - 4) throw new Error('internal: unexpected WAV header layout');
  return { bytes, junkOffset, factOffset, dataSizeOffset };
}

/**
 * Fill in the sizes of `layout.bytes` for `dataBytes` of data (`frames` frames): RIFF, or RF64 with
 * a ds64 chunk in place of JUNK. The RIFF size counts the pad byte of odd-sized data.
 */
function patchHeader(layout: HeaderLayout, dataBytes: number, frames: number, rf64: boolean): void {
  const { bytes, junkOffset, factOffset, dataSizeOffset } = layout;
  const dv = new DataView(bytes.buffer, bytes.byteOffset, bytes.byteLength);
  const riffBytes = bytes.byteLength - 8 + dataBytes + (dataBytes & 1);
  const ascii = (at: number, s: string) => {
    for (let i = 0; i < 4; i++) bytes[at + i] = s.charCodeAt(i);
  };
  bytes.fill(0, junkOffset + 8, junkOffset + 8 + JUNK_BODY_BYTES);
  if (rf64) {
    // EBU Tech 3306 §3: 32-bit sizes set to −1, the true values in ds64.
    ascii(0, 'RF64');
    dv.setUint32(4, U32_MAX, true);
    ascii(junkOffset, 'ds64');
    dv.setBigUint64(junkOffset + 8, BigInt(riffBytes), true);
    dv.setBigUint64(junkOffset + 16, BigInt(dataBytes), true);
    dv.setBigUint64(junkOffset + 24, BigInt(frames), true);
    dv.setUint32(junkOffset + 32, 0, true); // table length
    dv.setUint32(dataSizeOffset, U32_MAX, true);
    if (factOffset >= 0) dv.setUint32(factOffset, U32_MAX, true);
  } else {
    ascii(0, 'RIFF');
    dv.setUint32(4, riffBytes, true);
    ascii(junkOffset, 'JUNK');
    dv.setUint32(dataSizeOffset, dataBytes, true);
    if (factOffset >= 0) dv.setUint32(factOffset, frames, true); // dwSampleLength: frames per channel
  }
}

function positiveInt(name: string, v: number, min: number, max = Number.MAX_SAFE_INTEGER): number {
  if (!Number.isSafeInteger(v) || v < min || v > max) {
    throw outputError('ERR_REC_BAD_OPTIONS', `${name} ${v}, allowed an integer ${min}–${max}`);
  }
  return v;
}

/**
 * A streaming WAV writer. Create with {@link WavStreamWriter.open} (waits for the file to open) or
 * {@link WavStreamWriter.create} (returns at once; writes made before the file is open are queued).
 */
export class WavStreamWriter {
  readonly path: string;
  /** The file's name without its folder (for messages). */
  readonly name: string;
  readonly sampleRateHz: number;
  readonly channels: number;
  readonly encoding: RecordingEncoding;
  /** Bytes of one frame: channels × bytes per sample. */
  readonly blockAlignBytes: number;
  /** Bytes before the first sample. */
  readonly headerBytes: number;

  readonly #layout: HeaderLayout;
  readonly #maxDataBytes: number;
  readonly #onLimit: 'full' | 'rf64';
  readonly #chunkFrames: number;
  readonly #maxQueueBytes: number;
  readonly #datasync: boolean;
  readonly #onError: ((err: OutputError) => void) | undefined;
  readonly #scratch: Float32Array; // interleaved floats of one chunk, reused
  readonly #free: Uint8Array[] = []; // chunk buffers to reuse
  readonly #queue: Chunk[] = []; // in file order; done chunks leave from the head
  #queuedBytes = 0;
  #current: Chunk | null = null;
  #endPosition: number; // file position after the last accepted byte
  #frames = 0;
  #headerFrames = 0;
  #rf64 = false;
  #handle: FileHandle | null = null;
  #opening: Promise<void>;
  #running: Promise<void> | null = null;
  #headerWanted = false;
  #waiters: HeaderWaiter[] = [];
  #timer: ReturnType<typeof setInterval> | null = null;
  #closed = false;
  #closing: Promise<{ frames: number; bytes: number }> | null = null;
  #error: OutputError | null = null;
  #syncWrites = 0;
  #maxQueuedBytesSeen = 0;
  /** The initial header is on file. */
  #headerWritten = false;
  #removed = false;
  /** The chunk whose write failed, and how many of its bytes reached the file before. */
  #partial: { chunk: Chunk; written: number } | null = null;

  private constructor(path: string, o: WavStreamWriterOptions) {
    if (!RECORDING_ENCODINGS.includes(o.encoding)) {
      throw outputError('ERR_REC_BAD_OPTIONS', `encoding ${String(o.encoding)}, allowed ${RECORDING_ENCODINGS.join(', ')}`);
    }
    this.path = path;
    this.name = basename(path);
    this.sampleRateHz = positiveInt('sampleRateHz', o.sampleRateHz, 1, U32_MAX);
    this.channels = positiveInt('channels', o.channels, 1, 65535);
    this.encoding = o.encoding;
    this.blockAlignBytes = this.channels * bytesPerSample(o.encoding);
    this.#layout = buildHeader(this.sampleRateHz, this.channels, this.encoding); // validates nBlockAlign
    this.headerBytes = this.#layout.bytes.byteLength;
    this.#onLimit = o.onLimit ?? 'full';
    if (this.#onLimit !== 'full' && this.#onLimit !== 'rf64') throw outputError('ERR_REC_BAD_OPTIONS', `onLimit ${String(o.onLimit)}, allowed full, rf64`);
    // In 'full' mode the RIFF size (header − 8 + data + pad) must stay a uint32.
    this.#maxDataBytes = positiveInt('maxDataBytes', o.maxDataBytes ?? RIFF_MAX_DATA_BYTES, this.blockAlignBytes, U32_MAX - this.headerBytes);
    const chunkBytes = positiveInt('chunkBytes', o.chunkBytes ?? 256 * 1024, 1);
    this.#chunkFrames = Math.max(1, Math.floor(chunkBytes / this.blockAlignBytes));
    this.#maxQueueBytes = positiveInt('maxQueueBytes', o.maxQueueBytes ?? 16 * 1024 * 1024, 0);
    this.#datasync = o.datasync ?? false;
    this.#onError = o.onError;
    this.#scratch = new Float32Array(this.#chunkFrames * this.channels);
    this.#endPosition = this.headerBytes;
    const refreshMs = positiveInt('headerRefreshMs', o.headerRefreshMs ?? 500, 1);

    const header = this.#layout.bytes;
    patchHeader(this.#layout, 0, 0, false);
    this.#opening = (async () => {
      const handle = await open(path, o.overwrite ? 'w' : 'wx');
      this.#handle = handle;
      await handle.write(header, 0, header.byteLength, 0);
      this.#headerWritten = true;
    })();
    this.#opening.catch((e) => this.#fail(e, 'open'));
    this.#timer = setInterval(() => void this.refreshHeader().catch(() => {}), refreshMs);
    this.#timer.unref();
    this.#kick();
  }

  /** Create the file and write an empty header; resolves when the file is open. */
  static async open(path: string, options: WavStreamWriterOptions): Promise<WavStreamWriter> {
    const w = new WavStreamWriter(path, options);
    try {
      await w.#opening;
    } catch {
      await w.close().catch(() => {});
      throw w.#error ?? outputError('ERR_REC_WRITE_FAILED', `open ${w.name}`);
    }
    return w;
  }

  /**
   * Start creating the file and return at once (for rotation in the middle of a stream). Failures
   * (the file exists, the directory is missing) arrive through `onError`, then `write` and `close`.
   * Throws only ERR_REC_BAD_OPTIONS, synchronously, for invalid options.
   */
  static create(path: string, options: WavStreamWriterOptions): WavStreamWriter {
    return new WavStreamWriter(path, options);
  }

  /** Frames accepted so far (written or queued). */
  get frames(): number {
    return this.#frames;
  }
  /** Data bytes accepted so far: frames × blockAlignBytes. */
  get bytes(): number {
    return this.#frames * this.blockAlignBytes;
  }
  /**
   * Frames the header announced at its last refresh (what a reader sees after a kill); after
   * close(), the frames on file, which are all accepted frames unless a write failed.
   */
  get headerFrames(): number {
    return this.#headerFrames;
  }
  /** Frames that still fit before `maxDataBytes` ('full' mode); unlimited (2^53−1) in 'rf64' mode. */
  get framesLeft(): number {
    if (this.#onLimit === 'rf64') return Number.MAX_SAFE_INTEGER - this.#frames;
    return Math.floor((this.#maxDataBytes - this.bytes) / this.blockAlignBytes);
  }
  /** True when no further frame fits ('full' mode): the caller must continue in a new file. */
  get full(): boolean {
    return this.framesLeft === 0;
  }
  /** 'rf64' once the header has been converted (EBU Tech 3306), else 'wav'. */
  get container(): 'wav' | 'rf64' {
    return this.#rf64 ? 'rf64' : 'wav';
  }
  /** Chunks written synchronously because the queue was full. */
  get syncWrites(): number {
    return this.#syncWrites;
  }
  /** Peak of the bytes waiting to be written. */
  get maxQueuedBytesSeen(): number {
    return this.#maxQueuedBytesSeen;
  }
  /** The background failure, if one happened. */
  get error(): OutputError | null {
    return this.#error;
  }
  get closed(): boolean {
    return this.#closed;
  }
  /** True once close() has removed the file because its header never reached the disk. */
  get removed(): boolean {
    return this.#removed;
  }

  /**
   * Append `frames` frames of full-scale floats (±1), quantised as shared/frame.ts encodeInterleaved
   * does. The samples are copied before returning; `planar` may be reused at once.
   * @param planar channel-major: channel c, frame i at c·frames + i (the server's Block.data);
   *   length ≥ channels × frames
   * @throws ERR_REC_FULL when `frames` exceeds {@link framesLeft} (nothing is written),
   *   ERR_REC_WRITE_FAILED after a background failure, ERR_REC_CLOSED after close()
   */
  write(planar: Float32Array, frames: number): void {
    this.#checkAppend(frames);
    if (planar.length < this.channels * frames) {
      throw outputError('ERR_REC_BAD_BLOCK', `${planar.length} samples, ${this.channels} channels × ${frames} frames need ${this.channels * frames}`);
    }
    this.#append(planar, frames);
  }

  /** Append `frames` frames of digital silence (a gap in the input keeps its length). */
  writeSilence(frames: number): void {
    this.#checkAppend(frames);
    this.#append(null, frames);
  }

  /**
   * Hand the partly filled chunk to the file and rewrite the RIFF and data sizes in place to cover
   * everything accepted so far. Resolves once that header is written. Called by the timer every
   * headerRefreshMs and by close().
   */
  refreshHeader(): Promise<void> {
    if (this.#error) return Promise.reject(this.#error);
    if (this.#current !== null && this.#current.length > 0) this.#submit(this.#current);
    this.#current = null;
    const target = this.#endPosition;
    const p = new Promise<void>((resolve, reject) => this.#waiters.push({ target, resolve, reject }));
    this.#headerWanted = true;
    this.#kick();
    return p;
  }

  /**
   * Write what is queued, the pad byte of odd-sized data, and the final header; close the file.
   * Idempotent. Rejects with the background failure if one happened; the file is closed anyway,
   * holding the frames written before the failure under a header that covers exactly them.
   */
  close(): Promise<{ frames: number; bytes: number }> {
    if (this.#closing) return this.#closing;
    this.#closed = true;
    if (this.#timer) clearInterval(this.#timer);
    this.#timer = null;
    this.#closing = (async () => {
      await this.#opening.catch(() => {});
      if (!this.#error) {
        try {
          await this.refreshHeader();
          const handle = this.#handle!;
          const dataBytes = this.bytes;
          // RIFF: chunks are word aligned; odd-sized data is followed by one pad byte.
          if (dataBytes & 1) await handle.write(new Uint8Array(1), 0, 1, this.headerBytes + dataBytes);
          if (this.#datasync) await handle.datasync();
        } catch (e) {
          this.#fail(e, 'close');
        }
      }
      let remove = false;
      if (this.#error) remove = !(await this.#salvage());
      const handle = this.#handle;
      this.#handle = null;
      if (handle) await handle.close().catch((e) => this.#fail(e, 'close'));
      if (remove) {
        await unlink(this.path).catch(() => {});
        this.#removed = true;
      }
      if (this.#error) throw this.#error;
      return { frames: this.#frames, bytes: this.bytes };
    })();
    return this.#closing;
  }

  /**
   * After a failure: cut the file after the last whole frame written in order (what follows was
   * not, or not in order), add the pad byte as a zero (ftruncate extends with zeros) and rewrite
   * the header over those frames. Returns false when the file holds no valid header (to be removed).
   */
  async #salvage(): Promise<boolean> {
    const handle = this.#handle;
    if (handle === null) return true; // not opened by us (e.g. it existed): not ours to touch
    await this.#running;
    let end = this.#current !== null ? this.#current.position : this.#endPosition;
    const first = this.#queue.find((c) => !c.done);
    if (first !== undefined) {
      end = first.position;
      const p = this.#partial;
      if (p !== null && p.chunk === first) end += Math.floor(p.written / this.blockAlignBytes) * this.blockAlignBytes;
    }
    const dataBytes = end - this.headerBytes;
    const frames = dataBytes / this.blockAlignBytes;
    try {
      await handle.truncate(end + (dataBytes & 1));
      if (this.#onLimit === 'rf64' && dataBytes > this.#maxDataBytes) this.#rf64 = true;
      patchHeader(this.#layout, dataBytes, frames, this.#rf64);
      await handle.write(this.#layout.bytes, 0, this.headerBytes, 0);
      this.#headerWritten = true;
      this.#headerFrames = frames;
      return true;
    } catch {
      // The header on file stays as it was (it announces only frames written before it).
      return this.#headerWritten;
    }
  }

  #checkAppend(frames: number): void {
    if (this.#closed) throw outputError('ERR_REC_CLOSED', `write to ${this.name} after close()`);
    if (this.#error) throw this.#error;
    if (!Number.isSafeInteger(frames) || frames < 0) throw outputError('ERR_REC_BAD_BLOCK', `frames ${frames}, allowed an integer ≥ 0`);
    if (frames > this.framesLeft) {
      throw outputError('ERR_REC_FULL', `${frames} frames, ${this.framesLeft} fit below ${this.#maxDataBytes} data bytes in ${this.name}`);
    }
  }

  #append(planar: Float32Array | null, frames: number): void {
    const C = this.channels;
    const align = this.blockAlignBytes;
    const chunkFrames = this.#chunkFrames;
    const scratch = this.#scratch;
    const encoding = this.encoding;
    let done = 0;
    while (done < frames) {
      let chunk = this.#current;
      if (chunk === null) {
        const buf = this.#free.pop() ?? new Uint8Array(chunkFrames * align);
        chunk = { buf, length: 0, position: this.#endPosition, done: false };
        this.#current = chunk;
      }
      const room = chunkFrames - chunk.length / align;
      const n = Math.min(frames - done, room);
      const out = chunk.buf.subarray(chunk.length, chunk.length + n * align);
      if (planar === null) {
        out.fill(0); // zero bytes are 0 in every encoding, float32 included
      } else {
        for (let c = 0; c < C; c++) {
          const base = c * frames + done;
          for (let i = 0, k = c; i < n; i++, k += C) scratch[k] = planar[base + i];
        }
        encodeInterleaved(out, scratch.subarray(0, n * C), encoding);
      }
      chunk.length += n * align;
      this.#endPosition += n * align;
      done += n;
      if (n === room) {
        this.#current = null;
        this.#submit(chunk);
      }
    }
    this.#frames += frames;
  }

  #submit(chunk: Chunk): void {
    const handle = this.#handle;
    if (handle !== null && this.#queuedBytes + chunk.length > this.#maxQueueBytes) {
      // Queue full: write this chunk now, blocking the caller once rather than dropping samples.
      let off = 0;
      try {
        while (off < chunk.length) off += writeSync(handle.fd, chunk.buf, off, chunk.length - off, chunk.position + off);
      } catch (e) {
        // Queued as not written, so that close() knows where the good data ends.
        this.#partial = { chunk, written: off };
        this.#queue.push(chunk);
        this.#fail(e, 'write');
        throw this.#error!;
      }
      this.#syncWrites++;
      chunk.done = true;
      if (this.#queue.length === 0) {
        this.#recycle(chunk.buf);
        return;
      }
    }
    this.#queue.push(chunk);
    if (!chunk.done) {
      this.#queuedBytes += chunk.length;
      if (this.#queuedBytes > this.#maxQueuedBytesSeen) this.#maxQueuedBytesSeen = this.#queuedBytes;
    }
    this.#kick();
  }

  #recycle(buf: Uint8Array): void {
    if (this.#free.length < 4) this.#free.push(buf);
  }

  /** File position up to which every accepted byte is on file (not counting the open chunk). */
  #durableEnd(): number {
    for (const c of this.#queue) if (!c.done) return c.position;
    return this.#current !== null ? this.#current.position : this.#endPosition;
  }

  #retire(): void {
    while (this.#queue.length > 0 && this.#queue[0].done) this.#recycle(this.#queue.shift()!.buf);
  }

  #kick(): void {
    if (this.#running !== null || this.#error) return;
    this.#running = this.#run().finally(() => {
      this.#running = null;
      // Work may have arrived while the loop was finishing.
      if (!this.#error && (this.#headerWanted || this.#queue.some((c) => !c.done)) && this.#handle) this.#kick();
    });
  }

  async #run(): Promise<void> {
    try {
      await this.#opening;
      const handle = this.#handle!;
      for (;;) {
        if (this.#error) return; // a synchronous write failed meanwhile: close() takes over
        const waitingFor = this.#waiters.length > 0 ? this.#waiters[0].target : Infinity;
        // A header that has all its data behind it goes first, so refreshes are not starved by load.
        if (this.#headerWanted && this.#durableEnd() >= Math.min(waitingFor, this.#endPosition)) {
          await this.#writeHeader(handle);
          continue;
        }
        const next = this.#queue.find((c) => !c.done);
        if (next === undefined) {
          if (this.#headerWanted) {
            await this.#writeHeader(handle);
            continue;
          }
          return;
        }
        let off = 0;
        try {
          while (off < next.length) {
            const { bytesWritten } = await handle.write(next.buf, off, next.length - off, next.position + off);
            off += bytesWritten;
          }
        } catch (e) {
          this.#partial = { chunk: next, written: off };
          throw e;
        }
        next.done = true;
        this.#queuedBytes -= next.length;
        this.#retire();
      }
    } catch (e) {
      this.#fail(e, 'write');
    }
  }

  async #writeHeader(handle: FileHandle): Promise<void> {
    this.#headerWanted = false;
    const end = this.#durableEnd();
    const dataBytes = end - this.headerBytes;
    const frames = dataBytes / this.blockAlignBytes; // chunks hold whole frames
    if (this.#onLimit === 'rf64' && dataBytes > this.#maxDataBytes) this.#rf64 = true;
    patchHeader(this.#layout, dataBytes, frames, this.#rf64);
    await handle.write(this.#layout.bytes, 0, this.headerBytes, 0);
    if (this.#datasync) await handle.datasync();
    this.#headerFrames = frames;
    const still: HeaderWaiter[] = [];
    for (const w of this.#waiters) {
      if (w.target <= end) w.resolve();
      else still.push(w);
    }
    this.#waiters = still;
    if (still.length > 0) this.#headerWanted = true;
  }

  #fail(e: unknown, what: string): void {
    if (this.#error) return;
    const err = writeError(`${what} ${this.name}`, e);
    this.#error = err;
    for (const w of this.#waiters) w.reject(err);
    this.#waiters = [];
    if (this.#timer) clearInterval(this.#timer);
    this.#timer = null;
    this.#onError?.(err);
  }
}
