/**
 * `nullsteer send -`: raw interleaved little-endian PCM read from standard input (or any byte
 * stream) and sent as ingest frames as it arrives.
 *
 * The source paces the stream (a sound card through `arecord`, a capture program): nothing here
 * waits on a clock. Each chunk the pipe delivers is cut into frames of at most `samplesPerFrame`
 * sample frames and sent at once, so a frame is never held back waiting for more input. A sample
 * frame (one instant across all channels) is never split across two ingest frames: the bytes of an
 * incomplete one are held until its remainder arrives, and at the end of input they are reported
 * and dropped. The first sample of each ingest frame is the number of sample frames read before it
 * (plus `startSample`).
 *
 * Memory is bounded: the input is pulled one chunk at a time and the next chunk is not read while
 * a frame's send is pending. Over UDP a send is pending until the kernel has the datagram; over
 * WebSocket until the socket's queue is below `wsMaxBufferedBytes` (./frame-transport.ts). While
 * nothing is pulled, a pipe fills (the stream's own buffer, then the kernel's) and the writer
 * blocks. Held at any time: one chunk, one frame, one partial sample frame, the WebSocket queue.
 */
import { bytesPerSample, FRAME_HEADER_BYTES, writeHeader, type FrameHeader } from '../../shared/frame.ts';
import { checkSampleFormat, type SampleFormat } from '../io/raw.ts';
import type { FrameTransport } from './frame-transport.ts';
import { sendError } from './send-errors.ts';
import { checkInt, clockOverflow, DEFAULT_UDP_TARGET, openTransport, resolveSamplesPerFrame, resolveStreamId, type SendTarget } from './send-plan.ts';

const EMPTY = new Uint8Array(0);

/**
 * Cuts a byte stream into runs of whole rows (sample frames of `rowBytes` bytes), at most `maxRows`
 * per run, never splitting a row. Chunks of any size go in with {@link push}; runs come out with
 * {@link nextFrame} until it returns 0; then the next chunk may be pushed. Bytes of a row whose
 * remainder has not arrived yet are kept (at most rowBytes − 1 of them) and put in front of the
 * next chunk's bytes.
 */
export class RowChunker {
  readonly rowBytes: number;
  readonly maxRows: number;
  readonly #carry: Uint8Array;
  #carryBytes = 0;
  #chunk: Uint8Array = EMPTY;
  #offset = 0;

  /**
   * @param rowBytes bytes of one sample frame (channels × bytes per sample), ≥ 1
   * @param maxRows most rows per run, ≥ 1
   */
  constructor(rowBytes: number, maxRows: number) {
    if (!Number.isSafeInteger(rowBytes) || rowBytes < 1) throw new RangeError(`rowBytes ${rowBytes}, allowed an integer ≥ 1`);
    if (!Number.isSafeInteger(maxRows) || maxRows < 1) throw new RangeError(`maxRows ${maxRows}, allowed an integer ≥ 1`);
    this.rowBytes = rowBytes;
    this.maxRows = maxRows;
    this.#carry = new Uint8Array(rowBytes);
  }

  /**
   * Take the next chunk of input (kept by reference until the next push; not modified).
   * @throws Error if whole rows of the previous chunk have not been taken by nextFrame()
   */
  push(chunk: Uint8Array): void {
    const rowBytes = this.rowBytes;
    const left = this.#chunk.byteLength - this.#offset;
    if (left >= rowBytes || this.#carryBytes === rowBytes) throw new Error('RowChunker.push: the previous chunk still holds whole rows');
    // A tail shorter than a row joins the carry (the carry is empty then, or the tail is empty).
    if (left > 0) {
      this.#carry.set(this.#chunk.subarray(this.#offset), this.#carryBytes);
      this.#carryBytes += left;
    }
    let offset = 0;
    if (this.#carryBytes > 0) {
      offset = Math.min(rowBytes - this.#carryBytes, chunk.byteLength);
      this.#carry.set(chunk.subarray(0, offset), this.#carryBytes);
      this.#carryBytes += offset;
    }
    this.#chunk = chunk;
    this.#offset = offset;
  }

  /**
   * Copy the next run of whole rows into `out`.
   * @param out at least maxRows × rowBytes bytes
   * @returns rows written (1–maxRows), or 0 when no whole row is left
   */
  nextFrame(out: Uint8Array): number {
    const rowBytes = this.rowBytes;
    let rows = 0;
    if (this.#carryBytes === rowBytes) {
      out.set(this.#carry, 0);
      this.#carryBytes = 0;
      rows = 1;
    }
    const available = Math.floor((this.#chunk.byteLength - this.#offset) / rowBytes);
    const take = Math.min(available, this.maxRows - rows);
    if (take > 0) {
      const end = this.#offset + take * rowBytes;
      out.set(this.#chunk.subarray(this.#offset, end), rows * rowBytes);
      this.#offset = end;
      rows += take;
    }
    return rows;
  }

  /** Bytes of an incomplete row held (0 to rowBytes − 1 once nextFrame() has returned 0). */
  get pendingBytes(): number {
    const left = this.#chunk.byteLength - this.#offset;
    return this.#carryBytes + (left < this.rowBytes ? left : 0);
  }
}

/** What a send has settled on once the transport is open, before the first frame. */
export interface SendStart {
  streamId: number;
  /** e.g. `udp://127.0.0.1:9750`. */
  target: string;
  samplesPerFrame: number;
}

export interface StreamSendOptions {
  /** The bytes: raw interleaved little-endian samples, e.g. process.stdin. Pulled one chunk at a time. */
  input: AsyncIterable<Uint8Array>;
  format: SampleFormat;
  /** Default UDP 127.0.0.1:9750. */
  target?: SendTarget;
  /** uint32; default a fresh random id (1–2^32−1). */
  streamId?: number;
  /** Samples per channel in each frame at most; default the most that fit `maxFrameBytes`. */
  samplesPerFrame?: number;
  /** Largest frame, bytes; default 1472 for UDP, 16384 for WebSocket. */
  maxFrameBytes?: number;
  /** Stream clock value of the first sample read, default 0. */
  startSample?: number;
  /** Stop reading and sending (the transport is still closed cleanly and the result returned). */
  signal?: AbortSignal;
  /** WebSocket queue limit, bytes. */
  wsMaxBufferedBytes?: number;
  /** Called once the transport is open, before the first read. */
  onStart?: (start: SendStart) => void;
  /** A transport already open (tests); `target` is then ignored and the caller closes it. */
  transport?: FrameTransport;
}

export interface StreamSendResult extends SendStart {
  format: SampleFormat;
  frames: number;
  samplesPerChannel: number;
  /** Bytes read from the input, including a partial sample frame at its end. */
  bytesRead: number;
  /** Bytes of an incomplete sample frame at the end of input, not sent. */
  partialBytes: number;
  /** Wall-clock time from the first chunk read to the end, seconds. */
  elapsedS: number;
  /** True when `signal` stopped the sending before the end of input. */
  stopped: boolean;
}

const ABORTED = Symbol('aborted');

function releaseInput(input: AsyncIterable<Uint8Array>, iterator: AsyncIterator<Uint8Array>): void {
  const stream = input as { destroy?: () => void };
  if (typeof stream.destroy === 'function') stream.destroy();
  else iterator.return?.().catch(() => undefined);
}

/**
 * Send a byte stream of raw samples as ingest frames until it ends. Frame k carries sequence k
 * (mod 2^32) and firstSample startSample + (sample frames sent before it).
 * Rejects with a SendError: ERR_SEND_OPTION for options, ERR_SEND_CONNECT / ERR_SEND_TRANSPORT for
 * the network, ERR_SEND_INPUT when the input fails, ERR_SEND_EMPTY when it ends before one whole
 * sample frame. The transport is closed either way.
 */
export async function sendStream(options: StreamSendOptions): Promise<StreamSendResult> {
  const { format, signal } = options;
  checkSampleFormat(format);
  const target = options.target ?? DEFAULT_UDP_TARGET;
  const streamId = resolveStreamId(options.streamId);
  const startSample = options.startSample ?? 0;
  checkInt('startSample', startSample, 0, Number.MAX_SAFE_INTEGER);
  const rowBytes = format.channels * bytesPerSample(format.encoding);
  const n = resolveSamplesPerFrame({ channels: format.channels, encoding: format.encoding, blockAlignBytes: rowBytes }, target, options);
  const transport = options.transport ?? (await openTransport(target, options.wsMaxBufferedBytes));
  try {
    const start: SendStart = { streamId, target: transport.target, samplesPerFrame: n };
    options.onStart?.(start);
    return await pump(options.input, transport, { ...start, format, rowBytes, startSample, signal });
  } finally {
    if (!options.transport) await transport.close();
  }
}

interface PumpPlan extends SendStart {
  format: SampleFormat;
  rowBytes: number;
  startSample: number;
  signal?: AbortSignal;
}

async function pump(input: AsyncIterable<Uint8Array>, transport: FrameTransport, plan: PumpPlan): Promise<StreamSendResult> {
  const { samplesPerFrame: n, rowBytes, startSample, signal } = plan;
  const chunker = new RowChunker(rowBytes, n);
  const frameBytes = FRAME_HEADER_BYTES + n * rowBytes;
  let frame = new Uint8Array(frameBytes);
  let payload = frame.subarray(FRAME_HEADER_BYTES);
  const header: FrameHeader = {
    streamId: plan.streamId,
    sequence: 0,
    firstSample: startSample,
    sampleRateHz: plan.format.sampleRateHz,
    channels: plan.format.channels,
    samplesPerChannel: n,
    encoding: plan.format.encoding,
  };
  let frames = 0;
  let sent = 0; // sample frames sent so far
  let bytesRead = 0;
  let stopped = false;
  let ended = false;
  let t0 = Number.NaN;
  const iterator = input[Symbol.asyncIterator]();
  const aborted = signal
    ? new Promise<typeof ABORTED>((resolve) => {
        if (signal.aborted) resolve(ABORTED);
        else signal.addEventListener('abort', () => resolve(ABORTED), { once: true });
      })
    : null;
  try {
    for (;;) {
      let next: IteratorResult<Uint8Array> | typeof ABORTED;
      try {
        const pending = iterator.next();
        // Left behind when the abort wins the race: its later failure must not go unhandled.
        pending.catch(() => undefined);
        next = aborted ? await Promise.race([pending, aborted]) : await pending;
      } catch (e) {
        throw sendError('ERR_SEND_INPUT', `cannot read the input: ${(e as Error).message}`, e);
      }
      if (next === ABORTED) {
        stopped = true;
        break;
      }
      if (next.done) {
        ended = true;
        break;
      }
      const chunk = next.value;
      if (Number.isNaN(t0)) t0 = performance.now();
      bytesRead += chunk.byteLength;
      chunker.push(chunk);
      for (let rows = chunker.nextFrame(payload); rows > 0; rows = chunker.nextFrame(payload)) {
        header.sequence = frames % 0x100000000;
        if (startSample + sent > Number.MAX_SAFE_INTEGER) throw clockOverflow(startSample, sent);
        header.firstSample = startSample + sent;
        header.samplesPerChannel = rows;
        writeHeader(frame, header);
        await transport.send(frame.subarray(0, FRAME_HEADER_BYTES + rows * rowBytes), signal);
        frames++;
        sent += rows;
        if (!transport.frameReusable) {
          frame = new Uint8Array(frameBytes);
          payload = frame.subarray(FRAME_HEADER_BYTES);
        }
        if (signal?.aborted) break;
      }
      if (signal?.aborted) {
        stopped = true;
        break;
      }
    }
  } finally {
    // Left before its end (stopped, or a send failed): release the input so the process can exit. A
    // stream is destroyed (an iterator's return() would wait for the read in progress to finish).
    if (!ended) releaseInput(input, iterator);
  }
  const partialBytes = stopped ? 0 : chunker.pendingBytes;
  if (sent === 0 && !stopped) {
    throw sendError('ERR_SEND_EMPTY', `the input ended after ${bytesRead} bytes, before one whole ${rowBytes}-byte sample frame`);
  }
  return {
    streamId: plan.streamId,
    target: plan.target,
    samplesPerFrame: n,
    format: plan.format,
    frames,
    samplesPerChannel: sent,
    bytesRead,
    partialBytes,
    elapsedS: Number.isNaN(t0) ? 0 : (performance.now() - t0) / 1000,
    stopped,
  };
}
