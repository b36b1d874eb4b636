/**
 * `nullsteer send`: play a WAV (or raw) file into a nullsteer server as ingest frames, over UDP or
 * WebSocket, in real time, faster, or as fast as the transport takes them; or, with FILE `-`, send
 * raw samples from standard input as they arrive (./send-stdin.ts).
 *
 * The file's sample bytes are passed through untouched: WAV PCM/float data and the frame payload of
 * shared/frame.ts are both interleaved little-endian. The file is read in chunks of about
 * {@link READ_CHUNK_BYTES}, never whole.
 */
import { bytesPerSample, encodeFrameRaw, type FrameHeader, type SampleEncoding } from '../../shared/frame.ts';
import { isIoError } from '../io/errors.ts';
import { openRaw, type FileSampleReader, type RawOptions, type SampleFileInfo } from '../io/raw.ts';
import { openWav } from '../io/wav.ts';
import type { FrameTransport } from './frame-transport.ts';
import { Pacer } from './pacer.ts';
import { FLAG_OF_OPTION, parseSendArgs, SEND_USAGE } from './send-args.ts';
import { isSendError, optionError, SEND_ERRORS, sendError } from './send-errors.ts';
import { checkInt, clockOverflow, DEFAULT_UDP_TARGET, openTransport, resolveSamplesPerFrame, resolveStreamId, type SendTarget } from './send-plan.ts';
import { sendStream, type SendStart, type StreamSendResult } from './send-stdin.ts';

export { resolveSamplesPerFrame, WS_FRAME_BYTES, type SendTarget } from './send-plan.ts';

export interface SendOptions {
  /** WAV/RF64 file, or a headerless file when `raw` is given. */
  path: string;
  /** Read `path` as raw interleaved little-endian samples of this format. */
  raw?: RawOptions;
  /** Default UDP 127.0.0.1:9750. */
  target?: SendTarget;
  /** Multiple of real time (> 0), or 'fast' for no pacing. Default 1. */
  speed?: number | 'fast';
  /** uint32; default a fresh random id (1–2^32−1) per call. */
  streamId?: number;
  /** Samples per channel in each frame; default the most that fit {@link maxFrameBytes}. */
  samplesPerFrame?: number;
  /** Largest frame, bytes; default 1472 (MTU_FRAME_BYTES) for UDP, {@link WS_FRAME_BYTES} for WebSocket. */
  maxFrameBytes?: number;
  /** Stream clock value of the file's first sample, default 0. */
  startSample?: number;
  /** Repeat the file until `signal` aborts; sample indices and sequence numbers keep counting. */
  loop?: boolean;
  /** Stop sending (the sockets are still closed cleanly and the result returned). */
  signal?: AbortSignal;
  /** WebSocket queue limit, bytes. */
  wsMaxBufferedBytes?: number;
  /** Called once the file is open and the transport connected, before the first frame. */
  onStart?: (info: SampleFileInfo, start: SendStart) => void;
}

export interface SendResult {
  streamId: number;
  frames: number;
  samplesPerChannel: number;
  /** Wall-clock time from the first frame until the end of the last (paced) or its send (fast), seconds. */
  elapsedS: number;
  /** True when `signal` stopped the sending. */
  stopped: boolean;
  samplesPerFrame: number;
  info: SampleFileInfo;
  target: string;
}

/** Bytes read from the file at a time. */
export const READ_CHUNK_BYTES = 256 * 1024;

/**
 * Send a file as ingest frames. Frame k carries sequence k (mod 2^32) and firstSample
 * startSample + (samples sent before it); its payload is the file's bytes for those samples.
 * Paced so a frame goes out when its first sample is due (see ./pacer.ts), unless speed is 'fast'.
 * Rejects with a SendError / IoError / fs error; sockets and the file are closed either way.
 */
export async function sendFile(options: SendOptions): Promise<SendResult> {
  const target = options.target ?? DEFAULT_UDP_TARGET;
  const speed = options.speed ?? 1;
  const streamId = resolveStreamId(options.streamId);
  const startSample = options.startSample ?? 0;
  const { signal } = options;
  if (speed !== 'fast' && !(speed > 0 && Number.isFinite(speed))) throw optionError('speed', speed, 'not positive and finite', "a number > 0 or 'fast'");
  checkInt('startSample', startSample, 0, Number.MAX_SAFE_INTEGER);

  const reader: FileSampleReader = options.raw ? await openRaw(options.path, options.raw) : await openWav(options.path);
  try {
    const { info } = reader;
    if (info.frames === 0) throw sendError('ERR_SEND_EMPTY', `${options.path} holds no whole sample frames`);
    const n = resolveSamplesPerFrame(info, target, options);
    const transport = await openTransport(target, options.wsMaxBufferedBytes);
    try {
      options.onStart?.(info, { streamId, target: transport.target, samplesPerFrame: n });
      return await pump(reader, transport, { n, speed, streamId, startSample, loop: options.loop ?? false, signal });
    } finally {
      await transport.close();
    }
  } finally {
    await reader.close();
  }
}

interface PumpPlan {
  n: number;
  speed: number | 'fast';
  streamId: number;
  startSample: number;
  loop: boolean;
  signal?: AbortSignal;
}

async function pump(reader: FileSampleReader, transport: FrameTransport, plan: PumpPlan): Promise<SendResult> {
  const { info } = reader;
  const { n, streamId, startSample, signal } = plan;
  const rowBytes = info.blockAlignBytes;
  const readFramesPerChunk = n * Math.max(1, Math.floor(READ_CHUNK_BYTES / (n * rowBytes)));
  const buf = new Uint8Array(readFramesPerChunk * rowBytes);
  const pacer = plan.speed === 'fast' ? null : new Pacer(info.sampleRateHz, plan.speed);
  const header: FrameHeader = {
    streamId,
    sequence: 0,
    firstSample: startSample,
    sampleRateHz: info.sampleRateHz,
    channels: info.channels,
    samplesPerChannel: n,
    encoding: info.encoding,
  };
  let frames = 0;
  let sent = 0; // samples per channel sent so far
  let stopped = false;
  const t0 = performance.now();
  pacer?.start();
  outer: do {
    for (let fileFrame = 0; fileFrame < info.frames; ) {
      const chunk = await reader.readFrames(fileFrame, readFramesPerChunk, buf);
      const chunkFrames = chunk.byteLength / rowBytes;
      for (let off = 0; off < chunkFrames; off += n) {
        if (pacer) await pacer.waitFor(sent, signal);
        if (signal?.aborted) {
          stopped = true;
          break outer;
        }
        const count = Math.min(n, chunkFrames - off);
        header.sequence = frames % 0x100000000;
        if (startSample + sent > Number.MAX_SAFE_INTEGER) throw clockOverflow(startSample, sent);
        header.firstSample = startSample + sent;
        header.samplesPerChannel = count;
        await transport.send(encodeFrameRaw(header, chunk.subarray(off * rowBytes, (off + count) * rowBytes)), signal);
        frames++;
        sent += count;
      }
      fileFrame += chunkFrames;
    }
  } while (plan.loop && !signal?.aborted);
  if (plan.loop && signal?.aborted) stopped = true;
  // A paced stream lasts as long as its audio: hold until the last frame's final sample is due, so
  // the elapsed time and achieved rate describe the stream rather than the last frame's start.
  if (pacer && !stopped) await pacer.waitFor(sent, signal);
  return {
    streamId,
    frames,
    samplesPerChannel: sent,
    elapsedS: (performance.now() - t0) / 1000,
    stopped,
    samplesPerFrame: n,
    info,
    target: transport.target,
  };
}

export interface CommandIo {
  /** One line of normal output (without newline). Default process.stdout. */
  out?: (line: string) => void;
  /** One line of diagnostics (without newline). Default process.stderr. */
  err?: (line: string) => void;
  /** Stops the sending like SIGINT does (tests). */
  signal?: AbortSignal;
  /** What `-` reads; default process.stdin. */
  input?: AsyncIterable<Uint8Array> & { isTTY?: boolean };
}

interface SummaryFields {
  frames: number;
  samplesPerChannel: number;
  sampleRateHz: number;
  /** Sample bytes sent. */
  bytes: number;
  streamId: number;
  target: string;
  elapsedS: number;
  stopped: boolean;
}

/** `1 byte`, `2 bytes`. */
function count(n: number, noun: string): string {
  return `${n} ${noun}${n === 1 ? '' : 's'}`;
}

/** The last line of a send: what went where, and how fast compared with real time. */
function summary(r: SummaryFields, tail = ''): string {
  const rate = r.sampleRateHz;
  const audioS = r.samplesPerChannel / rate;
  const achievedHz = r.elapsedS > 0 ? r.samplesPerChannel / r.elapsedS : Infinity;
  return (
    `sent ${count(r.frames, 'frame')}, ${count(r.samplesPerChannel, 'sample')} per channel (${audioS.toFixed(3)} s at ${rate} Hz, ${count(r.bytes, 'byte')}) ` +
    `as stream ${r.streamId} to ${r.target} in ${r.elapsedS.toFixed(3)} s: ${Math.round(achievedHz)} samples/s per channel, ` +
    `${(achievedHz / rate).toFixed(2)}× real time${tail}${r.stopped ? ' (stopped)' : ''}`
  );
}

/** The first line of a send: what is sent, as which stream, to where. */
function startLine(what: string, format: { channels: number; encoding: SampleEncoding; sampleRateHz: number }, start: SendStart): string {
  return `sending ${what} (${count(format.channels, 'channel')}, ${format.encoding}, ${format.sampleRateHz} Hz) as stream ${start.streamId} to ${start.target}, ${start.samplesPerFrame} samples per frame`;
}

function fileSummary(r: SendResult): string {
  return summary({ ...r, sampleRateHz: r.info.sampleRateHz, bytes: r.samplesPerChannel * r.info.blockAlignBytes });
}

function streamSummary(r: StreamSendResult): string {
  const rowBytes = r.format.channels * bytesPerSample(r.format.encoding);
  const tail = r.stopped ? '' : `; end of input, ${count(r.partialBytes, 'byte')} of a partial sample frame discarded`;
  return summary({ ...r, sampleRateHz: r.format.sampleRateHz, bytes: r.samplesPerChannel * rowBytes }, tail);
}

function describeTruncation(path: string, info: SampleFileInfo): string | null {
  if (!info.truncated && info.partialFrameBytes === 0) return null;
  const partial = info.partialFrameBytes ? `; ignoring ${info.partialFrameBytes} bytes of a partial last frame` : '';
  const why = info.truncated ? (info.container === 'raw' ? 'the file ends mid-frame' : 'the data chunk size is unfinalised or larger than the file') : 'the data size is not a whole number of frames';
  return `warning: ${path}: ${why}; sending the ${info.frames} whole frames present${partial}`;
}

/**
 * `nullsteer send FILE …` and `nullsteer send - --raw …`. Never throws for user errors: prints them
 * to stderr (with the usage line for command-line mistakes) and returns the exit code (0 done, 1
 * file, input or network failure, 2 usage; 130 when SIGINT stops a non-looping send).
 * Unless --quiet, the first line says which stream id is used and the last one sums up the send.
 */
export async function sendCommand(argv: string[], io: CommandIo = {}): Promise<number> {
  const out = io.out ?? ((line: string) => void process.stdout.write(`${line}\n`));
  const err = io.err ?? ((line: string) => void process.stderr.write(`${line}\n`));
  let parsed: ReturnType<typeof parseSendArgs>;
  try {
    parsed = parseSendArgs(argv);
  } catch (e) {
    err(`nullsteer send: ${(e as Error).message}`);
    err(SEND_USAGE);
    return SEND_ERRORS.ERR_SEND_USAGE.exitCode;
  }
  if (parsed.help) {
    out(SEND_USAGE);
    return 0;
  }
  const { options, quiet, stdin } = parsed;
  const input = io.input ?? process.stdin;
  if (stdin && input.isTTY) {
    err('nullsteer send: invalid command line: - reads raw samples from standard input, which is a terminal here; pipe a program\'s output into it');
    err(SEND_USAGE);
    return SEND_ERRORS.ERR_SEND_USAGE.exitCode;
  }
  const say = (line: string) => {
    if (!quiet) out(line);
  };
  const stop = new AbortController();
  const onSigint = () => stop.abort();
  const onExternal = () => stop.abort();
  process.on('SIGINT', onSigint);
  io.signal?.addEventListener('abort', onExternal, { once: true });
  try {
    if (stdin) {
      const format = options.raw!;
      const result = await sendStream({
        ...options,
        input,
        format,
        signal: stop.signal,
        onStart: (start) => say(startLine('standard input', format, start)),
      });
      if (result.partialBytes > 0 && !quiet) {
        err(`warning: standard input ended inside a sample frame: ${count(result.partialBytes, 'byte')} of an incomplete ${format.channels * bytesPerSample(format.encoding)}-byte sample frame not sent`);
      }
      say(streamSummary(result));
      return result.stopped ? 130 : 0;
    }
    const result = await sendFile({
      ...options,
      signal: stop.signal,
      onStart: (info, start) => {
        const warning = describeTruncation(options.path, info);
        if (warning && !quiet) err(warning);
        say(startLine(options.path, info, start));
      },
    });
    say(fileSummary(result));
    return result.stopped && !options.loop ? 130 : 0;
  } catch (e) {
    const what = stdin ? 'standard input' : options.path;
    if (isSendError(e)) {
      const flag = e.option ? FLAG_OF_OPTION[e.option] : undefined;
      err(`nullsteer send: ${flag && e.reason ? `${flag} ${e.reason}` : e.message}`);
      if (SEND_ERRORS[e.code].exitCode === 2) err(SEND_USAGE);
      return SEND_ERRORS[e.code].exitCode;
    }
    if (isIoError(e)) {
      err(`nullsteer send: ${what}: ${e.message}`);
      return 1;
    }
    const code = (e as NodeJS.ErrnoException).code;
    if (typeof code === 'string' && code.startsWith('E')) {
      err(`nullsteer send: cannot read ${what}: ${(e as Error).message}`);
      return 1;
    }
    err(`nullsteer send: unexpected failure: ${(e as Error).stack ?? String(e)}`);
    return 1;
  } finally {
    process.off('SIGINT', onSigint);
    io.signal?.removeEventListener('abort', onExternal);
  }
}
