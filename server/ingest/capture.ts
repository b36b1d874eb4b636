/**
 * Capture source: a local command (a sound card's recorder such as ALSA's arecord, or sox) writes raw
 * interleaved little-endian PCM to its standard output; this module runs it, reads it and hands the
 * samples to a BlockSink as planar float32 blocks on one sample clock.
 *
 * Threads. A capture thread (./capture-reader.mjs) starts the command and reads its pipe into a shared
 * queue (./capture-queue.mjs); this thread drains the queue, converts and delivers, woken by a
 * doorbell like the UDP ingest (udp.ts). The capture thread does nothing else, so the command's pipe
 * is read whenever it writes, however busy this thread is; the command is never blocked.
 *
 * Timeline. Sample index = sample frames read from the command, counted over every run (a restarted
 * command continues the count). A frame is never split across blocks; a partial frame left when a run
 * ends is thrown away and counted (`bytesDiscarded`). Blocks are at most 1024 frames (fewer for a very
 * short queue), as the data arrives. The first block of each run after the first carries
 * `discontinuity: true` (the clock of the samples jumped by the restart's downtime, which the index does
 * not count). Samples dropped because the queue was full still count as read: the next block keeps
 * its true index and the missing span becomes zeros of exactly its length (`gap: true`, pieces of at
 * most 1024 frames).
 *
 * Queue and policy: `queueMs` of audio (at most 256 MiB, status says how much it holds); when full,
 * the capture thread drops the OLDEST records and counts them (`droppedSamples`, `blocksDropped`).
 * Standard error: the last 20 lines (200 characters each) and a count of lines matching /overrun/i.
 * Scaling as in shared/frame.ts: int16 / 2^15, int24 (packed 3 bytes) / 2^23, int32 / 2^31; float32
 * as is, except that NaN and ±∞ become 0 and are counted (`nonFinite`).
 *
 * Restarts. When the command exits or cannot start, it is started again after a wait: restartMinMs
 * first, doubled after each exit that follows a run shorter than 10 s (a failed start counts as
 * one), at most restartMaxMs; a run of 10 s or more resets it. The command runs in its own process
 * group: stop() sends SIGTERM to the group, then SIGKILL after killGraceMs; when the command exits on
 * its own, whatever it left in its group is killed, so nothing keeps the device or the pipe.
 */
import { Worker } from 'node:worker_threads';
import { bytesPerSample, decodeInterleaved, type SampleEncoding } from '../../shared/frame.ts';
import type { Block, BlockSink } from '../../shared/types.ts';
import { publicText } from '../public-text.ts';
import {
  CaptureQueue,
  CTRL_BYTES_DISCARDED,
  CTRL_BYTES_READ,
  CTRL_DROPPED_FRAMES,
  CTRL_DROPPED_RECORDS,
  CTRL_FRAMES_READ,
  CTRL_HEAD,
  CTRL_LAST_DATA_MS,
  CTRL_SLOTS,
  CTRL_STARTS,
  CTRL_TAIL,
  type PeekedRecord,
  queueSize,
  RECORD_HEADER,
  SIG_BELL,
  SIG_SLEEPING,
  SIG_SLOTS,
  SIG_STATUS_PENDING,
} from './capture-queue.mjs';

const READER = new URL('./capture-reader.mjs', import.meta.url);
/** Blocks (data or gap pieces) delivered before this thread lets timers and sockets run again. */
const SLICE_BLOCKS = 64;
/** Longest wait for the capture thread's doorbell before the queue is looked at anyway, ms. */
const IDLE_CHECK_MS = 100;
/** A running command that has written nothing for this long is "waiting", ms. */
const WAITING_AFTER_MS = 1000;
/** A run at least this long resets the restart back-off, ms. */
const LONG_RUN_MS = 10_000;
const DEFAULT_KILL_GRACE_MS = 2000;
/** Extra time stop() gives the capture thread beyond killGraceMs before it kills the group itself, ms. */
const STOP_MARGIN_MS = 3000;
const LITTLE_ENDIAN_HOST = new Uint8Array(new Uint16Array([1]).buffer)[0] === 1;

export interface CaptureOptions {
  /** argv: program, then its arguments; run without a shell. */
  command: string[];
  /** Channels in the command's output (interleaved). */
  channels: number;
  /** Little-endian sample format of the output; int24 is packed 3 bytes (S24_3LE). */
  encoding: SampleEncoding;
  sampleRateHz: number;
  /** First wait before a restart, ms. */
  restartMinMs: number;
  /** Longest wait between restarts, ms. */
  restartMaxMs: number;
  /** Captured audio waiting for this thread at most, ms; beyond it the oldest is dropped, counted. */
  queueMs: number;
  /** Stream id the blocks carry; default 0. */
  streamId?: number;
  /** stop(): time between SIGTERM and SIGKILL to the command's process group, ms; default 2000. */
  killGraceMs?: number;
}

/**
 * `starting`: start requested; `waiting`: the command runs but has written nothing in this run, or
 * nothing for a second; `running`: samples arriving; `restarting`: the command exited, next start after
 * restartDelayMs; `failed`: the command could not start (`error`), next try after restartDelayMs;
 * `stopped`: not started or stopped.
 */
export type CaptureState = 'stopped' | 'starting' | 'waiting' | 'running' | 'restarting' | 'failed';

export interface CaptureExit {
  /** Exit code, or null when ended by a signal. */
  code: number | null;
  signal: string | null;
  /** How long that run lasted, ms. */
  runMs: number;
  /** When it ended, ms since the Unix epoch. */
  atMs: number;
}

export interface CaptureStatus {
  state: CaptureState;
  /** The running command's process id (its process group's too), or null. */
  pid: number | null;
  command: string[];
  streamId: number;
  channels: number;
  encoding: SampleEncoding;
  sampleRateHz: number;
  /** Times the command was started (tries, including those that failed to start). */
  starts: number;
  /** Starts after the first. */
  restarts: number;
  startFailures: number;
  /** The last failure to start (cleared when a start succeeds): Node's code (ENOENT…) and plain words. */
  error: { code: string | null; message: string } | null;
  /** Runs that ended (exited or killed). */
  exits: number;
  /** The latest runs' ends, oldest first (at most 10). */
  lastExits: CaptureExit[];
  /** The wait before the latest (or pending) restart, ms; null before the first. */
  restartDelayMs: number | null;
  /** Time left until the pending restart, ms; null when none is pending. */
  nextStartInMs: number | null;
  /** The command's latest standard-error lines, oldest first (at most 20, 200 characters each). */
  stderr: string[];
  /** Standard-error lines seen in all. */
  stderrLines: number;
  /** Standard-error lines that report an overrun (matching /overrun/i). */
  overruns: number;
  /** Set when the output started with a file header (WAV…) instead of raw PCM. */
  formatWarning: string | null;
  /** Sample frames read from the command over every run (the next data block's sample index). */
  samplesRead: number;
  bytesRead: number;
  /** Bytes of partial sample frames thrown away at the end of runs. */
  bytesDiscarded: number;
  /** float32 samples that were NaN or ±∞, delivered as 0. */
  nonFinite: number;
  /** Blocks delivered (data and gap). */
  blocks: number;
  /** Sample index of the next block to deliver. */
  nextSample: number;
  /** Sample frames dropped because the queue was full (delivered as gap zeros). */
  droppedSamples: number;
  /** Queue records (one block each) dropped because the queue was full. */
  blocksDropped: number;
  /** Sample frames delivered as gap zeros. */
  gapSamples: number;
  /** Blocks delivered with discontinuity: true (one per run after the first that wrote samples). */
  discontinuities: number;
  /** Time since the command last wrote, ms; null before it first did in this run. */
  lastSampleAgeMs: number | null;
  queue: {
    capacityBytes: number;
    /**
     * Audio the queue holds at least before it drops, ms: queueMs (less only where the 256 MiB bound
     * cut it), when the command writes at least a record (1024 frames) at a time; up to two records more.
     */
    capacityMs: number;
    queuedBytes: number;
    /** Audio waiting now, ms (read − dropped − delivered; the counters are read one after another). */
    queuedMs: number;
  };
  /** Capture threads started again after one ended unasked. */
  threadRestarts: number;
  /** Blocks the sink threw on (counted, then the next block is delivered). */
  sinkErrors: number;
  /** Malformed queue records (cannot happen; the queue is then emptied, its span a gap). */
  queueErrors: number;
}

interface ReaderStatus {
  type: 'status';
  phase: 'starting' | 'running' | 'restarting' | 'failed' | 'stopped';
  pid: number | null;
  restartDelayMs: number | null;
  nextStartAtMs: number | null;
  startFailures: number;
  error: { code: string | null; message: string } | null;
  exitCount: number;
  exits: CaptureExit[];
  stderr: string[];
  stderrLines: number;
  overruns: number;
  formatWarning: string | null;
}

/** A capture option out of range or of the wrong type. */
export class CaptureOptionError extends RangeError {
  readonly code = 'ERR_CAPTURE_OPTION';
}

function check(ok: boolean, field: string, value: unknown, allowed: string): void {
  if (!ok) throw new CaptureOptionError(`capture.${field} = ${JSON.stringify(value)}: ${allowed}`);
}

const isInt = (v: unknown, min: number, max: number) => typeof v === 'number' && Number.isInteger(v) && v >= min && v <= max;

export class CaptureSource {
  readonly #opts: Required<CaptureOptions>;
  readonly #sink: BlockSink;
  readonly #frameBytes: number;
  readonly #recordFrames: number;
  readonly #capacityBytes: number;
  readonly #capacityFrames: number;
  readonly #ring: SharedArrayBuffer;
  readonly #ctrlBuf: SharedArrayBuffer;
  readonly #sigBuf: SharedArrayBuffer;
  readonly #queue: CaptureQueue;
  readonly #ctrl: BigInt64Array;
  readonly #sig: Int32Array;
  readonly #rec: PeekedRecord = { tail: 0n, pos: 0, size: 0, run: 0, sampleIndex: 0, frames: 0 };

  #worker: Worker | null = null;
  #reader: ReaderStatus | null = null;
  #started = false;
  #closing = false;
  #stopped: Promise<void> | null = null;
  #loopDone: Promise<void> | null = null;
  #held = false;
  #release: (() => void) | null = null;
  #threadRestarts = 0;
  /** Thread restarts since the capture thread last reported (the back-off of thread restarts). */
  #threadFailuresInRow = 0;
  #threadTimer: ReturnType<typeof setTimeout> | null = null;
  #threadError: string | null = null;
  #stoppedAck: (() => void) | null = null;
  #onProcessExit = () => this.#killGroupNow();

  // The delivered timeline.
  #next = 0;
  #gapTo = 0;
  #lastRun = 0;
  #blocks = 0;
  #gapSamples = 0;
  #discontinuities = 0;
  #nonFinite = 0;
  #sinkErrors = 0;
  #queueErrors = 0;

  constructor(options: CaptureOptions, sink: BlockSink) {
    const o = options as Partial<CaptureOptions> | null;
    if (typeof o !== 'object' || o === null) throw new TypeError('capture options must be an object');
    if (typeof sink !== 'function') throw new TypeError('capture sink must be a function');
    check(Array.isArray(o.command) && o.command.length >= 1 && o.command.length <= 64 && o.command.every((a) => typeof a === 'string' && a.length <= 4096 && !a.includes('\0')) && o.command[0] !== '', 'command', o.command, 'a list of 1 to 64 strings (program, then arguments), no NUL, the program not empty');
    check(isInt(o.channels, 1, 1024), 'channels', o.channels, 'an integer 1–1024');
    check(typeof o.encoding === 'string' && ['int16', 'int24', 'int32', 'float32'].includes(o.encoding), 'encoding', o.encoding, 'int16, int24, int32 or float32');
    check(isInt(o.sampleRateHz, 1000, 384000), 'sampleRateHz', o.sampleRateHz, 'an integer 1000–384000');
    check(isInt(o.restartMinMs, 1, 600000), 'restartMinMs', o.restartMinMs, 'an integer 1–600000');
    check(isInt(o.restartMaxMs, o.restartMinMs ?? 1, 600000), 'restartMaxMs', o.restartMaxMs, `an integer from capture.restartMinMs (${o.restartMinMs}) to 600000`);
    check(isInt(o.queueMs, 1, 600000), 'queueMs', o.queueMs, 'an integer 1–600000');
    check(o.streamId === undefined || isInt(o.streamId, 0, 0xffffffff), 'streamId', o.streamId, 'an integer 0–4294967295');
    check(o.killGraceMs === undefined || isInt(o.killGraceMs, 0, 60000), 'killGraceMs', o.killGraceMs, 'an integer 0–60000');
    this.#opts = {
      command: [...o.command!],
      channels: o.channels!,
      encoding: o.encoding!,
      sampleRateHz: o.sampleRateHz!,
      restartMinMs: o.restartMinMs!,
      restartMaxMs: o.restartMaxMs!,
      queueMs: o.queueMs!,
      streamId: o.streamId ?? 0,
      killGraceMs: o.killGraceMs ?? DEFAULT_KILL_GRACE_MS,
    };
    this.#sink = sink;
    this.#frameBytes = this.#opts.channels * bytesPerSample(this.#opts.encoding);
    const size = queueSize(this.#frameBytes, Math.max(1, Math.ceil((this.#opts.queueMs * this.#opts.sampleRateHz) / 1000)));
    this.#recordFrames = size.recordFrames;
    this.#capacityBytes = size.capacityBytes;
    this.#capacityFrames = size.capacityFrames;
    this.#ring = new SharedArrayBuffer(size.capacityBytes);
    this.#ctrlBuf = new SharedArrayBuffer(8 * CTRL_SLOTS);
    this.#sigBuf = new SharedArrayBuffer(4 * SIG_SLOTS);
    this.#queue = new CaptureQueue(this.#ring, this.#ctrlBuf, this.#frameBytes);
    this.#ctrl = new BigInt64Array(this.#ctrlBuf);
    this.#sig = new Int32Array(this.#sigBuf);
  }

  /**
   * Start the command (and keep it running) and the delivery of its blocks. A source starts once:
   * later calls, and a call after stop(), do nothing.
   */
  start(): void {
    if (this.#started || this.#closing) return;
    this.#started = true;
    process.once('exit', this.#onProcessExit);
    this.#spawnReader();
    this.#loopDone = this.#loop();
  }

  /**
   * Stop the command (SIGTERM to its process group, SIGKILL after killGraceMs), end the capture
   * thread, and deliver what is still queued. Resolves when no process of the command's group is left
   * that this source knows of.
   */
  stop(): Promise<void> {
    if (this.#stopped) return this.#stopped;
    this.#stopped = this.#stop();
    return this.#stopped;
  }

  async #stop(): Promise<void> {
    this.#closing = true;
    if (!this.#started) return;
    if (this.#threadTimer) clearTimeout(this.#threadTimer);
    const w = this.#worker;
    if (w) {
      const acked = await new Promise<boolean>((resolve) => {
        const t = setTimeout(() => resolve(false), this.#opts.killGraceMs + STOP_MARGIN_MS);
        this.#stoppedAck = () => {
          clearTimeout(t);
          resolve(true);
        };
        w.once('exit', () => {
          clearTimeout(t);
          resolve(false);
        });
        w.postMessage({ type: 'stop' });
      });
      this.#stoppedAck = null;
      if (!acked) this.#killGroupNow();
      this.#worker = null;
      await w.terminate();
    }
    process.off('exit', this.#onProcessExit);
    if (this.#reader) this.#reader = { ...this.#reader, phase: 'stopped', pid: null, nextStartAtMs: null };
    this.#release?.();
    Atomics.add(this.#sig, SIG_BELL, 1);
    Atomics.notify(this.#sig, SIG_BELL);
    await this.#loopDone;
  }

  /**
   * Test hook: hold (true) or resume (false) the delivery on this thread, as a stalled server would;
   * the capture thread keeps reading and drops the oldest audio when the queue is full.
   */
  holdDrain(held: boolean): void {
    this.#held = held;
    if (!held) this.#release?.();
  }

  /**
   * Test hook: end the capture thread from outside (a crash, not a stop). Its command is killed and a
   * new thread starts it again after the restart wait; counts and the timeline continue.
   */
  async killReader(): Promise<void> {
    await this.#worker?.terminate();
  }

  status(): CaptureStatus {
    const r = this.#reader;
    const c = this.#ctrl;
    const now = Date.now();
    const lastData = Number(Atomics.load(c, CTRL_LAST_DATA_MS));
    let state: CaptureState;
    if (!this.#started || this.#closing) state = 'stopped';
    else if (this.#threadError !== null) state = 'failed';
    else if (r === null) state = 'starting';
    else if (r.phase === 'running') state = lastData === 0 || now - lastData > WAITING_AFTER_MS ? 'waiting' : 'running';
    else state = r.phase;
    const starts = Number(Atomics.load(c, CTRL_STARTS));
    const queuedBytes = this.#queue.queuedBytes();
    const samplesRead = Number(Atomics.load(c, CTRL_FRAMES_READ));
    const droppedSamples = Number(Atomics.load(c, CTRL_DROPPED_FRAMES));
    const queuedSamples = Math.max(0, samplesRead - droppedSamples - (this.#next - this.#gapSamples));
    return {
      state,
      pid: state === 'stopped' ? null : (r?.pid ?? null),
      command: [...this.#opts.command],
      streamId: this.#opts.streamId,
      channels: this.#opts.channels,
      encoding: this.#opts.encoding,
      sampleRateHz: this.#opts.sampleRateHz,
      starts,
      restarts: Math.max(0, starts - 1),
      startFailures: r?.startFailures ?? 0,
      error: this.#threadError !== null ? { code: 'ERR_CAPTURE_THREAD', message: this.#threadError } : r?.error ? { code: r.error.code, message: publicText(r.error.message) } : null,
      exits: r?.exitCount ?? 0,
      lastExits: r ? r.exits.map((e) => ({ ...e })) : [],
      restartDelayMs: r?.restartDelayMs ?? null,
      nextStartInMs: r?.nextStartAtMs != null && (state === 'restarting' || state === 'failed') ? Math.max(0, r.nextStartAtMs - now) : null,
      stderr: r ? r.stderr.map((l) => publicText(l)) : [],
      stderrLines: r?.stderrLines ?? 0,
      overruns: r?.overruns ?? 0,
      formatWarning: r?.formatWarning ?? null,
      samplesRead,
      bytesRead: Number(Atomics.load(c, CTRL_BYTES_READ)),
      bytesDiscarded: Number(Atomics.load(c, CTRL_BYTES_DISCARDED)),
      nonFinite: this.#nonFinite,
      blocks: this.#blocks,
      nextSample: this.#next,
      droppedSamples,
      blocksDropped: Number(Atomics.load(c, CTRL_DROPPED_RECORDS)),
      gapSamples: this.#gapSamples,
      discontinuities: this.#discontinuities,
      lastSampleAgeMs: lastData === 0 ? null : Math.max(0, now - lastData),
      queue: {
        capacityBytes: this.#capacityBytes,
        capacityMs: (this.#capacityFrames * 1000) / this.#opts.sampleRateHz,
        queuedBytes,
        queuedMs: (queuedSamples * 1000) / this.#opts.sampleRateHz,
      },
      threadRestarts: this.#threadRestarts,
      sinkErrors: this.#sinkErrors,
      queueErrors: this.#queueErrors,
    };
  }

  #spawnReader(): void {
    Atomics.store(this.#sig, SIG_STATUS_PENDING, 0);
    const w = new Worker(READER, {
      workerData: {
        command: this.#opts.command,
        frameBytes: this.#frameBytes,
        recordFrames: this.#recordFrames,
        restartMinMs: this.#opts.restartMinMs,
        restartMaxMs: this.#opts.restartMaxMs,
        killGraceMs: this.#opts.killGraceMs,
        longRunMs: LONG_RUN_MS,
        ring: this.#ring,
        ctrl: this.#ctrlBuf,
        sig: this.#sigBuf,
      },
    });
    this.#worker = w;
    w.on('message', (m: ReaderStatus | { type: 'stopped' }) => {
      if (m.type === 'status') {
        this.#reader = m;
        this.#threadError = null;
        this.#threadFailuresInRow = 0;
        Atomics.store(this.#sig, SIG_STATUS_PENDING, 0);
      } else if (m.type === 'stopped') {
        this.#stoppedAck?.();
      }
    });
    let failure: string | null = null;
    w.on('error', (e) => {
      failure = publicText(e);
    });
    w.on('exit', () => {
      if (this.#closing || this.#worker !== w) return;
      // The capture thread ended unasked: end its command too (the pipe's reader is gone), then
      // start a new thread after the shortest restart wait; the counters live on in shared memory.
      this.#killGroupNow();
      this.#worker = null;
      this.#threadRestarts++;
      // The same back-off as the command's restarts; a warning on the 1st, 2nd, 4th, 8th… in a row.
      const delayMs = Math.min(this.#opts.restartMaxMs, this.#opts.restartMinMs * 2 ** Math.min(20, this.#threadFailuresInRow));
      this.#threadFailuresInRow++;
      this.#threadError = `the capture thread ended${failure ? `: ${failure}` : ''}; starting it again`;
      if ((this.#threadFailuresInRow & (this.#threadFailuresInRow - 1)) === 0) process.emitWarning(`capture: ${this.#threadError} (${this.#threadFailuresInRow} in a row)`);
      this.#threadTimer = setTimeout(() => {
        this.#threadTimer = null;
        if (!this.#closing) this.#spawnReader();
      }, delayMs);
    });
  }

  /** SIGKILL to the command's process group from this thread (the capture thread is gone or stuck). */
  #killGroupNow(): void {
    const pid = this.#reader?.pid;
    if (pid == null) return;
    try {
      process.kill(-pid, 'SIGKILL');
    } catch {
      // already gone
    }
  }

  async #loop(): Promise<void> {
    let empty = false;
    for (;;) {
      if (this.#held && !this.#closing) {
        await new Promise<void>((r) => (this.#release = r));
        this.#release = null;
        continue;
      }
      try {
        empty = this.#drainSlice();
      } catch (e) {
        // Cannot happen (the queue's records are written by one thread only); should it, the queue
        // is emptied and the next record's index turns what it held into a gap, counted.
        this.#queueErrors++;
        if (this.#queueErrors === 1) process.emitWarning(`capture: ${publicText(e)}; queue emptied`);
        Atomics.store(this.#ctrl, CTRL_TAIL, Atomics.load(this.#ctrl, CTRL_HEAD));
        empty = false;
      }
      if (this.#closing && empty && this.#worker === null) break;
      if (!empty) {
        await new Promise<void>((r) => setImmediate(r));
        continue;
      }
      // Nothing waiting: ask the capture thread for the doorbell, then look once more before sleeping.
      Atomics.store(this.#sig, SIG_SLEEPING, 1);
      const bell = Atomics.load(this.#sig, SIG_BELL);
      if (this.#queue.queuedBytes() === 0) {
        const w = Atomics.waitAsync(this.#sig, SIG_BELL, bell, IDLE_CHECK_MS);
        if (w.async) await w.value;
      }
      Atomics.store(this.#sig, SIG_SLEEPING, 0);
    }
  }

  /** Deliver up to SLICE_BLOCKS blocks; returns whether the queue is empty (and no gap is pending). */
  #drainSlice(): boolean {
    const rec = this.#rec;
    const m = this.#opts.channels;
    for (let budget = SLICE_BLOCKS; budget > 0; ) {
      if (this.#gapTo > this.#next) {
        const n = Math.min(this.#gapTo - this.#next, this.#recordFrames);
        this.#emit(new Float32Array(m * n), n, true, false);
        this.#gapSamples += n;
        budget--;
        continue;
      }
      if (!this.#queue.peek(rec)) return true;
      if (rec.sampleIndex > this.#next) {
        // Everything before the oldest record still queued was dropped: zeros of exactly that length.
        this.#gapTo = rec.sampleIndex;
        continue;
      }
      const n = rec.frames;
      const data = new Float32Array(m * n);
      const bad = this.#convert(rec.pos + RECORD_HEADER, n, data);
      if (!this.#queue.commit(rec)) continue; // dropped by the capture thread while converting
      if (rec.sampleIndex < this.#next) continue; // cannot happen: indices only grow
      this.#nonFinite += bad;
      const discontinuity = this.#lastRun !== 0 && rec.run !== this.#lastRun;
      this.#lastRun = rec.run;
      this.#emit(data, n, false, discontinuity);
      budget--;
    }
    return false;
  }

  #emit(data: Float32Array, frames: number, gap: boolean, discontinuity: boolean): void {
    const block: Block = {
      streamId: this.#opts.streamId,
      sampleIndex: this.#next,
      sampleRateHz: this.#opts.sampleRateHz,
      channels: this.#opts.channels,
      frames,
      data,
      gap,
      discontinuity,
    };
    this.#next += frames;
    this.#blocks++;
    if (discontinuity) this.#discontinuities++;
    try {
      this.#sink(block);
    } catch {
      this.#sinkErrors++;
    }
  }

  /** Queue bytes at `at` (n interleaved frames) → planar float32; returns the NaN/±∞ count (set to 0). */
  #convert(at: number, n: number, out: Float32Array): number {
    const m = this.#opts.channels;
    const bytes = this.#queue.bytes;
    if (this.#opts.encoding !== 'float32') {
      decodeInterleaved(bytes.subarray(at, at + n * this.#frameBytes), m, n, this.#opts.encoding, out);
      return 0;
    }
    let bad = 0;
    if (LITTLE_ENDIAN_HOST) {
      // Records start 8-byte aligned and their header is 24 bytes: the payload is float-aligned.
      const f = new Float32Array(bytes.buffer, bytes.byteOffset + at, m * n);
      for (let i = 0, p = 0; i < n; i++) {
        for (let c = 0; c < m; c++, p++) {
          const v = f[p];
          if (v - v === 0) out[c * n + i] = v;
          else bad++; // NaN or ±∞: stays 0
        }
      }
      return bad;
    }
    const dv = this.#queue.view;
    for (let i = 0, p = at; i < n; i++) {
      for (let c = 0; c < m; c++, p += 4) {
        const v = dv.getFloat32(p, true);
        if (v - v === 0) out[c * n + i] = v;
        else bad++;
      }
    }
    return bad;
  }
}
