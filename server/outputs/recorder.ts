/**
 * Recording: the server's block stream to sample-exact WAV files with JSON sidecars.
 *
 * A {@link Recorder} holds one or more {@link RecorderTrack}s: 'raw' (the input channels, fed with
 * {@link Recorder.push}) and later e.g. 'beams' (one channel per beam, fed with
 * {@link Recorder.pushTrack}). Each track writes parts `<prefix>-<UTC start>-<track>-<NNNN>.wav`
 * plus `.json` (./sidecar.ts) and keeps its timeline sample-exact (DESIGN.md §3): gap blocks become
 * zeros of the same length and are listed in the sidecar; every frame of the stream between start
 * and stop is in exactly one part.
 *
 * A new part begins
 * - on rotation (rotateSeconds or rotateBytes reached, or the 4 GiB RIFF limit), before the block
 *   that would take the part beyond the limit; the next part continues the timeline (its
 *   startSampleIndex is the previous endSampleIndex) and the sidecars name each other;
 * - on a break of the timeline: a block flagged `discontinuity`, a block that does not continue the
 *   previous one, or a change of stream id, channels or rate. Both sidecars note it.
 *
 * push() runs in the block sink's turn and never throws and never waits: the WAV writer queues the
 * encoded samples (./wav-writer.ts). A failure stops the track, is reported once through `onError`
 * and shows in status().
 */
import { access, mkdir, readdir } from 'node:fs/promises';
import { join } from 'node:path';
import type { Block } from '../../shared/types.ts';
import { SidecarWriter, wallClockIso, type ArrayGeometry, type DiscontinuityNote, type RecordingSource } from './sidecar.ts';
import {
  isOutputError,
  outputError,
  RECORDING_ENCODINGS,
  RIFF_MAX_DATA_BYTES,
  WavStreamWriter,
  type OutputError,
  type RecordingEncoding,
} from './wav-writer.ts';

/** What a recording is of, copied into every sidecar. */
export interface RecordingMeta {
  array: ArrayGeometry | null;
  /** Processing parameters at the start. */
  params: Record<string, unknown>;
  source: RecordingSource;
}

export interface TrackOptions {
  /** Track name, part of the file names: 'raw', 'beams' … ([a-z0-9_-]+). */
  name: string;
  /** Fixed channel count; blocks with another count are refused. Default: taken from each part's first block. */
  channels?: number;
  encoding: RecordingEncoding;
  dir: string;
  /** File name stem: `<prefix>-<UTC start>`; the track appends `-<name>-<NNNN>`. */
  stem: string;
  /** Part length limit, s; rotation at the first block boundary that keeps the part within it. */
  rotateSeconds?: number;
  /** Part data size limit, bytes (capped at the RIFF limit unless rf64). */
  rotateBytes?: number;
  /** Turn a part into RF64 beyond 4 GiB instead of rotating (EBU Tech 3306); default false. */
  rf64?: boolean;
  headerRefreshMs?: number;
  sidecarIntervalMs?: number;
  /** Options passed to each WAV writer (tests: small limits). */
  maxDataBytes?: number;
  meta: RecordingMeta;
  /** Wall-clock ms of a stream sample index; default: the arrival time of a part's first block after a break. */
  wallClockOf?: (sampleIndex: number, sampleRateHz: number) => number;
  onError?: (err: OutputError) => void;
}

/** One WAV + sidecar pair as status() shows it. */
export interface PartStatus {
  track: string;
  part: number;
  wav: string;
  sidecar: string;
  startSampleIndex: number;
  frames: number;
  bytes: number;
  closed: boolean;
}

export interface TrackStatus {
  name: string;
  channels: number | null;
  sampleRateHz: number | null;
  encoding: RecordingEncoding;
  parts: number;
  /** Frames over all parts. */
  frames: number;
  /** WAV data bytes over all parts. */
  bytes: number;
  startSampleIndex: number | null;
  /** Sample index after the last frame recorded. */
  endSampleIndex: number | null;
  gapFrames: number;
  breaks: number;
  syncWrites: number;
  files: PartStatus[];
  error: { code: string; message: string } | null;
}

interface Part {
  number: number;
  wavName: string;
  jsonName: string;
  writer: WavStreamWriter;
  sidecar: SidecarWriter;
  streamId: number;
  sampleRateHz: number;
  channels: number;
  startSampleIndex: number;
  status: PartStatus;
}

const TRACK_NAME = /^[a-z0-9_-]+$/;

/** @throws ERR_REC_BAD_OPTIONS */
function checkTrackOptions(o: Pick<TrackOptions, 'name' | 'encoding' | 'rotateSeconds' | 'rotateBytes' | 'channels'>): void {
  if (!TRACK_NAME.test(o.name)) throw outputError('ERR_REC_BAD_OPTIONS', `track name ${JSON.stringify(o.name)}, allowed [a-z0-9_-]+`);
  if (!RECORDING_ENCODINGS.includes(o.encoding)) {
    throw outputError('ERR_REC_BAD_OPTIONS', `encoding ${String(o.encoding)}, allowed ${RECORDING_ENCODINGS.join(', ')}`);
  }
  const { rotateSeconds, rotateBytes, channels } = o;
  if (rotateSeconds !== undefined && !(Number.isFinite(rotateSeconds) && rotateSeconds > 0)) {
    throw outputError('ERR_REC_BAD_OPTIONS', `rotateSeconds ${rotateSeconds}, allowed a number > 0`);
  }
  if (rotateBytes !== undefined && !(Number.isSafeInteger(rotateBytes) && rotateBytes > 0)) {
    throw outputError('ERR_REC_BAD_OPTIONS', `rotateBytes ${rotateBytes}, allowed an integer > 0`);
  }
  if (channels !== undefined && !(Number.isInteger(channels) && channels >= 1 && channels <= 65535)) {
    throw outputError('ERR_REC_BAD_OPTIONS', `channels ${channels}, allowed an integer 1–65535`);
  }
}

/** One recorded stream: consecutive WAV parts on one timeline. */
export class RecorderTrack {
  readonly name: string;
  readonly #o: TrackOptions;
  #params: Record<string, unknown>;
  #part: Part | null = null;
  #partCount = 0;
  #files: PartStatus[] = [];
  #closing: Promise<void>[] = [];
  #anchor: { sampleIndex: number; ms: number; sampleRateHz: number } | null = null;
  #frames = 0;
  #bytes = 0;
  #firstSampleIndex: number | null = null;
  #gapFrames = 0;
  #breaks = 0;
  #syncWrites = 0;
  #error: OutputError | null = null;
  #closed = false;

  constructor(options: TrackOptions) {
    checkTrackOptions(options);
    this.name = options.name;
    this.#o = options;
    this.#params = options.meta.params;
  }

  /** Append one block (see the module comment for when a new part begins). Never throws. */
  push(block: Block): void {
    if (this.#closed || this.#error) return;
    try {
      this.#push(block);
    } catch (e) {
      this.#fail(e);
    }
  }

  /**
   * Note new processing parameters from `sampleIndex` on: listed in the current part's sidecar and
   * the initial `params` of later parts.
   * @param params the whole parameter set after the change
   * @param patch optionally, only what changed (then the sidecar lists the patch)
   */
  noteParams(sampleIndex: number, params: Record<string, unknown>, patch?: Record<string, unknown>): void {
    if (this.#closed || this.#error) return;
    this.#params = params;
    const part = this.#part;
    if (part === null) return;
    const wallClock = this.#wallClock(sampleIndex, part.sampleRateHz);
    part.sidecar.addChange(patch !== undefined ? { sampleIndex, wallClock, patch } : { sampleIndex, wallClock, params });
  }

  /** Close the current part (WAV header and sidecar final); resolves when everything is on file. */
  async close(): Promise<void> {
    if (!this.#closed) {
      this.#closed = true;
      if (this.#part) this.#endPart(this.#part, null);
    }
    await Promise.all(this.#closing);
  }

  get error(): OutputError | null {
    return this.#error;
  }

  status(): TrackStatus {
    const p = this.#part;
    if (p) {
      p.status.frames = p.writer.frames;
      p.status.bytes = p.writer.bytes;
    }
    const live = p ? p.writer.frames : 0;
    const liveBytes = p ? p.writer.bytes : 0;
    const frames = this.#frames + live;
    return {
      name: this.name,
      channels: p?.channels ?? this.#o.channels ?? null,
      sampleRateHz: p?.sampleRateHz ?? this.#anchor?.sampleRateHz ?? null,
      encoding: this.#o.encoding,
      parts: this.#partCount,
      frames,
      bytes: this.#bytes + liveBytes,
      startSampleIndex: this.#firstSampleIndex,
      endSampleIndex: p ? p.startSampleIndex + p.writer.frames : this.#lastEnd,
      gapFrames: this.#gapFrames,
      breaks: this.#breaks,
      syncWrites: this.#syncWrites + (p ? p.writer.syncWrites : 0),
      files: this.#files.map((f) => ({ ...f })),
      error: this.#error ? { code: this.#error.code, message: this.#error.message } : null,
    };
  }

  #lastEnd: number | null = null;

  #push(block: Block): void {
    const { frames, channels, sampleRateHz } = block;
    if (!Number.isSafeInteger(frames) || frames < 0 || !Number.isSafeInteger(block.sampleIndex)) {
      throw outputError('ERR_REC_BAD_BLOCK', `frames ${frames}, sampleIndex ${block.sampleIndex}: integers needed`);
    }
    if (this.#o.channels !== undefined && channels !== this.#o.channels) {
      throw outputError('ERR_REC_BAD_BLOCK', `track ${this.name} records ${this.#o.channels} channels, the block has ${channels}`);
    }
    if (!block.gap && block.data.length < channels * frames) {
      throw outputError('ERR_REC_BAD_BLOCK', `${block.data.length} samples, ${channels} channels × ${frames} frames need ${channels * frames}`);
    }
    let part = this.#part;
    if (part !== null) {
      const expected = part.startSampleIndex + part.writer.frames;
      let kind: DiscontinuityNote['kind'] | null = null;
      if (block.discontinuity) kind = 'discontinuity';
      else if (block.streamId !== part.streamId || channels !== part.channels || sampleRateHz !== part.sampleRateHz) kind = 'format';
      else if (block.sampleIndex !== expected) kind = 'clock';
      if (kind !== null) {
        this.#breaks++;
        const next = this.#names(this.#partCount + 1);
        part.sidecar.addDiscontinuity({ kind, sampleIndex: expected, nextSampleIndex: block.sampleIndex, nextFile: next.wav });
        const previousFile = part.wavName;
        this.#endPart(part, null);
        this.#anchor = null; // the stream's clock jumped: wall clock re-anchors at this block
        part = this.#openPart(block, null);
        part.sidecar.addDiscontinuity({ kind, sampleIndex: block.sampleIndex, previousEndSampleIndex: expected, previousFile });
      } else if (this.#rotationDue(part, frames)) {
        const previous = part;
        const nextName = this.#names(this.#partCount + 1).wav;
        this.#endPart(previous, nextName);
        part = this.#openPart(block, previous.wavName);
      }
    } else {
      part = this.#openPart(block, null);
    }
    if (frames > part.writer.framesLeft) {
      throw outputError('ERR_REC_FULL', `a block of ${frames} frames is larger than a whole part (${part.writer.framesLeft} frames)`);
    }
    if (block.gap) {
      part.writer.writeSilence(frames);
      part.sidecar.addGap(block.sampleIndex, frames);
      this.#gapFrames += frames;
    } else {
      part.writer.write(block.data, frames);
    }
    part.sidecar.setFrames(part.writer.frames);
  }

  #rotationDue(part: Part, frames: number): boolean {
    const w = part.writer;
    if (w.frames === 0) return false;
    if (frames > w.framesLeft) return true;
    const { rotateSeconds, rotateBytes } = this.#o;
    if (rotateSeconds !== undefined && w.frames + frames > Math.round(rotateSeconds * part.sampleRateHz)) return true;
    if (rotateBytes !== undefined && w.bytes + frames * w.blockAlignBytes > rotateBytes) return true;
    return false;
  }

  #names(n: number): { wav: string; json: string } {
    const base = `${this.#o.stem}-${this.name}-${String(n).padStart(4, '0')}`;
    return { wav: `${base}.wav`, json: `${base}.json` };
  }

  #wallClock(sampleIndex: number, sampleRateHz: number): string {
    if (this.#o.wallClockOf) return new Date(this.#o.wallClockOf(sampleIndex, sampleRateHz)).toISOString();
    const a = this.#anchor!;
    return wallClockIso(sampleIndex, a.sampleIndex, a.ms, a.sampleRateHz);
  }

  #openPart(block: Block, previousFile: string | null): Part {
    const number = ++this.#partCount;
    const names = this.#names(number);
    const { sampleRateHz, channels } = block;
    if (this.#anchor === null) this.#anchor = { sampleIndex: block.sampleIndex, ms: Date.now(), sampleRateHz };
    if (this.#firstSampleIndex === null) this.#firstSampleIndex = block.sampleIndex;
    const o = this.#o;
    const onError = (e: unknown) => this.#fail(e);
    const writer = WavStreamWriter.create(join(o.dir, names.wav), {
      sampleRateHz,
      channels,
      encoding: o.encoding,
      headerRefreshMs: o.headerRefreshMs,
      onLimit: o.rf64 ? 'rf64' : 'full',
      maxDataBytes: o.rf64 ? o.maxDataBytes : Math.min(o.maxDataBytes ?? RIFF_MAX_DATA_BYTES, RIFF_MAX_DATA_BYTES),
      onError,
    });
    const sidecar = new SidecarWriter(
      join(o.dir, names.json),
      {
        format: 'nullsteer-recording',
        version: 1,
        file: names.wav,
        track: this.name,
        part: number,
        startSampleIndex: block.sampleIndex,
        startWallClock: this.#wallClock(block.sampleIndex, sampleRateHz),
        sampleRateHz,
        channels,
        encoding: o.encoding,
        container: 'wav',
        source: o.meta.source,
        array: o.meta.array,
        params: this.#params,
        changes: [],
        gaps: [],
        discontinuities: [],
        previousFile,
        nextFile: null,
        endSampleIndex: block.sampleIndex,
        frames: 0,
        closed: false,
      },
      // As current as the WAV header: after a kill both lag by at most the refresh interval.
      { minIntervalMs: o.sidecarIntervalMs ?? o.headerRefreshMs ?? 500, onError },
    );
    const status: PartStatus = {
      track: this.name,
      part: number,
      wav: names.wav,
      sidecar: names.json,
      startSampleIndex: block.sampleIndex,
      frames: 0,
      bytes: 0,
      closed: false,
    };
    this.#files.push(status);
    const part: Part = {
      number,
      wavName: names.wav,
      jsonName: names.json,
      writer,
      sidecar,
      streamId: block.streamId,
      sampleRateHz,
      channels,
      startSampleIndex: block.sampleIndex,
      status,
    };
    this.#part = part;
    return part;
  }

  /** Finish `part` in the background (header, pad byte, sidecar with closed: true). */
  #endPart(part: Part, nextFile: string | null): void {
    if (this.#part === part) this.#part = null;
    const w = part.writer;
    part.status.frames = w.frames;
    part.status.bytes = w.bytes;
    this.#frames += w.frames;
    this.#bytes += w.bytes;
    this.#syncWrites += w.syncWrites;
    this.#lastEnd = part.startSampleIndex + w.frames;
    if (nextFile !== null) part.sidecar.set({ nextFile });
    part.sidecar.setFrames(w.frames);
    const done = (async () => {
      try {
        await w.close();
      } catch (e) {
        this.#fail(e);
      }
      part.sidecar.set({ container: w.container });
      try {
        await part.sidecar.close();
      } catch (e) {
        this.#fail(e);
      }
      part.status.closed = true;
    })();
    this.#closing.push(done);
  }

  /** Stop the track on the first failure and report it once. */
  #fail(e: unknown): void {
    if (this.#error) return;
    const err = isOutputError(e) ? e : outputError('ERR_REC_WRITE_FAILED', (e as Error)?.message ?? String(e), e);
    this.#error = err;
    if (this.#part && !this.#closed) this.#endPart(this.#part, null);
    this.#o.onError?.(err);
  }
}

export interface RecorderStartOptions {
  dir: string;
  /** File name prefix; default 'nullsteer'. */
  prefix?: string;
  /** Default 'float32': the blocks are floats, so nothing is quantised or clipped. */
  encoding?: RecordingEncoding;
  rotateSeconds?: number;
  rotateBytes?: number;
  rf64?: boolean;
  /** WAV header refresh, ms; default 500 (a kill loses at most this). */
  headerRefreshMs?: number;
  /** Least time between sidecar rewrites, ms; default the header refresh (500). */
  sidecarIntervalMs?: number;
  maxDataBytes?: number;
  meta: RecordingMeta;
  wallClockOf?: (sampleIndex: number, sampleRateHz: number) => number;
}

export interface RecorderStatus {
  recording: boolean;
  dir: string | null;
  /** ISO time of start(), null before the first start. */
  startedAt: string | null;
  stoppedAt: string | null;
  /** Frames of the raw track. */
  frames: number;
  /** WAV data bytes over all tracks. */
  bytes: number;
  files: PartStatus[];
  tracks: Record<string, TrackStatus>;
  error: { code: string; message: string } | null;
}

/** `20250102T030405Z`: the UTC start time in file names (ISO 8601 basic format, no colons). */
export function fileStamp(ms: number): string {
  return new Date(ms).toISOString().replace(/\.\d+Z$/, 'Z').replace(/[-:]/g, '');
}

/** Start/stop recording of the raw input (and of more tracks, e.g. beams, added with addTrack). */
export class Recorder {
  #tracks = new Map<string, RecorderTrack>();
  #options: RecorderStartOptions | null = null;
  #stem = '';
  #recording = false;
  #stopping: Promise<RecorderStatus> | null = null;
  #startedAt: string | null = null;
  #stoppedAt: string | null = null;
  #onError: ((err: OutputError) => void) | undefined;
  #error: OutputError | null = null;

  /** @param options.onError called once per failure of a track (the track stops; the others go on). */
  constructor(options: { onError?: (err: OutputError) => void } = {}) {
    this.#onError = options.onError;
  }

  get recording(): boolean {
    return this.#recording;
  }

  /**
   * Begin a recording into `dir` (created if missing) with the 'raw' track. Files open at the first
   * block, since its sample index, rate and channel count define them.
   * @throws (rejects) ERR_REC_ALREADY_RECORDING, ERR_REC_BAD_OPTIONS, ERR_REC_EXISTS, ERR_REC_WRITE_FAILED
   */
  async start(options: RecorderStartOptions): Promise<RecorderStatus> {
    if (this.#recording || this.#stopping) throw outputError('ERR_REC_ALREADY_RECORDING', `recording into ${this.#options?.dir} since ${this.#startedAt}`);
    const prefix = options.prefix ?? 'nullsteer';
    if (!/^[A-Za-z0-9._-]+$/.test(prefix)) throw outputError('ERR_REC_BAD_OPTIONS', `prefix ${JSON.stringify(prefix)}, allowed [A-Za-z0-9._-]+`);
    const { encoding = 'float32', rotateSeconds, rotateBytes } = options;
    checkTrackOptions({ name: 'raw', encoding, rotateSeconds, rotateBytes });
    const now = Date.now();
    try {
      await mkdir(options.dir, { recursive: true });
      await access(options.dir, 2 /* W_OK */);
    } catch (e) {
      throw outputError('ERR_REC_WRITE_FAILED', `directory ${options.dir}: ${(e as Error).message}`, e);
    }
    // A recording started in the same second as an earlier one gets a suffix: -2, -3 …
    const existing = await readdir(options.dir);
    let stem = `${prefix}-${fileStamp(now)}`;
    for (let k = 2; existing.some((f) => f.startsWith(`${stem}-`)); k++) {
      if (k > 99) throw outputError('ERR_REC_EXISTS', `${join(options.dir, stem)}-raw-0001.wav and 98 more this second`);
      stem = `${prefix}-${fileStamp(now)}-${k}`;
    }
    this.#options = options;
    this.#stem = stem;
    this.#tracks = new Map();
    this.#error = null;
    this.#addTrack('raw', undefined, options.encoding); // validates the options
    this.#recording = true;
    this.#startedAt = new Date(now).toISOString();
    this.#stoppedAt = null;
    return this.status();
  }

  /**
   * Add a track to the running recording, e.g. 'beams' with one channel per beam.
   * @throws ERR_REC_NOT_RECORDING, ERR_REC_BAD_OPTIONS (name taken or invalid)
   */
  addTrack(name: string, options: { channels?: number; encoding?: RecordingEncoding } = {}): RecorderTrack {
    if (!this.#recording) throw outputError('ERR_REC_NOT_RECORDING', `addTrack(${JSON.stringify(name)})`);
    return this.#addTrack(name, options.channels, options.encoding);
  }

  /** The raw input: one block of the server's stream. Ignored when not recording; never throws. */
  push(block: Block): void {
    if (this.#recording) this.#tracks.get('raw')!.push(block);
  }

  /** A block of another track (its sample indices on the same stream clock). Unknown tracks are ignored. */
  pushTrack(name: string, block: Block): void {
    if (this.#recording) this.#tracks.get(name)?.push(block);
  }

  /** Parameters changed from `sampleIndex` on; noted in every track's current sidecar. */
  noteParams(sampleIndex: number, params: Record<string, unknown>, patch?: Record<string, unknown>): void {
    if (!this.#recording) return;
    for (const t of this.#tracks.values()) t.noteParams(sampleIndex, params, patch);
  }

  /**
   * End the recording: every WAV header and sidecar final. Resolves with the final status.
   * @throws (rejects) ERR_REC_NOT_RECORDING
   */
  async stop(): Promise<RecorderStatus> {
    if (this.#stopping) return this.#stopping;
    if (!this.#recording) throw outputError('ERR_REC_NOT_RECORDING', 'stop()');
    this.#recording = false;
    this.#stopping = (async () => {
      await Promise.all([...this.#tracks.values()].map((t) => t.close()));
      this.#stoppedAt = new Date().toISOString();
      this.#stopping = null;
      return this.status();
    })();
    return this.#stopping;
  }

  status(): RecorderStatus {
    const tracks: Record<string, TrackStatus> = {};
    let bytes = 0;
    const files: PartStatus[] = [];
    for (const [name, t] of this.#tracks) {
      const s = t.status();
      tracks[name] = s;
      bytes += s.bytes;
      files.push(...s.files);
    }
    return {
      recording: this.#recording,
      dir: this.#options?.dir ?? null,
      startedAt: this.#startedAt,
      stoppedAt: this.#stoppedAt,
      frames: tracks.raw?.frames ?? 0,
      bytes,
      files,
      tracks,
      error: this.#error ? { code: this.#error.code, message: this.#error.message } : null,
    };
  }

  #addTrack(name: string, channels: number | undefined, encoding: RecordingEncoding | undefined): RecorderTrack {
    if (this.#tracks.has(name)) throw outputError('ERR_REC_BAD_OPTIONS', `track ${JSON.stringify(name)} exists`);
    const o = this.#options!;
    const track = new RecorderTrack({
      name,
      channels,
      encoding: encoding ?? o.encoding ?? 'float32',
      dir: o.dir,
      stem: this.#stem,
      rotateSeconds: o.rotateSeconds,
      rotateBytes: o.rotateBytes,
      rf64: o.rf64,
      headerRefreshMs: o.headerRefreshMs,
      sidecarIntervalMs: o.sidecarIntervalMs,
      maxDataBytes: o.maxDataBytes,
      meta: o.meta,
      wallClockOf: o.wallClockOf,
      onError: (err) => {
        this.#error ??= err;
        this.#onError?.(err);
      },
    });
    this.#tracks.set(name, track);
    return track;
  }
}
