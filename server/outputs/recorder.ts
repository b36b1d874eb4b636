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
 *
 * Disk space: with a reserve (`minFreeBytes`), start() refuses (ERR_REC_NO_SPACE) while the folder's
 * free space is below it, and while recording the free space is looked up again at least every
 * `spaceCheckMs` and every quarter of the reserve recorded; below the reserve the recording stops
 * before the disk fills. A write that fails anyway (disk full, quota, I/O error) stops the whole
 * recording too: every track keeps what reached its file (./wav-writer.ts), frames accepted but not
 * written are counted in `lostFrames`, status shows `recording: false` and the `stopReason`, and
 * `onStop` is told once the files are closed. Nothing in status names a folder by its absolute
 * path: the folder appears as `dirLabel`, files by their names.
 */
import { access, mkdir, readdir, rm } from 'node:fs/promises';
import { basename, join } from 'node:path';
import { bytesPerSample } from '../../shared/frame.ts';
import type { Block } from '../../shared/types.ts';
import { freeBytes, fsErrorText, reserveText } from '../io/disk-space.ts';
import { SidecarWriter, wallClockIso, type ArrayGeometry, type BeamChangeNote, type BeamChannelNote, type DiscontinuityNote, type RecordingSource } from './sidecar.ts';
import {
  isOutputError,
  outputError,
  RECORDING_ENCODINGS,
  RIFF_MAX_DATA_BYTES,
  WavStreamWriter,
  writeError,
  type OutputError,
  type OutputErrorCode,
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
  /** Frames over all parts (after a failed write: the frames on file). */
  frames: number;
  /**
   * Frames a crash now would keep: the closed parts, and the open part up to its last header
   * refresh (every headerRefreshMs). Behind `frames` by the writes not yet refreshed.
   */
  framesOnDisk: number;
  /** Frames accepted but not on file because a write failed (disk full): counted, never silent. */
  lostFrames: number;
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
  /** Beams track: what each channel carries now (null for other tracks). */
  #beamChannels: BeamChannelNote[] | null = null;
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
  #lostFrames = 0;
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
  /**
   * Beams track: what each channel carries from now on (every part opened later starts with it).
   * `channels` must list one entry per channel of the blocks pushed.
   */
  noteBeamChannels(channels: BeamChannelNote[], sampleIndex: number): void {
    if (this.#closed || this.#error) return;
    const had = this.#beamChannels;
    this.#beamChannels = channels;
    const part = this.#part;
    // Another channel count opens a new part (which starts with this description); the same count
    // with other beams changes the open file's meaning from here on: a change entry.
    if (part === null || part.channels !== channels.length) return;
    if (had === null) part.sidecar.setBeamChannels(channels);
    else part.sidecar.addBeamChange({ sampleIndex, wallClock: this.#wallClock(sampleIndex, part.sampleRateHz), kind: 'channels', channels });
  }

  /** Beams track: a beam steered, retuned, added or removed at `sampleIndex`. */
  noteBeamChange(change: DistributiveOmit<BeamChangeNote, 'wallClock'>): void {
    if (this.#closed || this.#error) return;
    const part = this.#part;
    if (part === null) return;
    part.sidecar.addBeamChange({ ...change, wallClock: this.#wallClock(change.sampleIndex, part.sampleRateHz) } as BeamChangeNote);
  }

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

  get encoding(): RecordingEncoding {
    return this.#o.encoding;
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
      framesOnDisk: this.#frames + (p ? p.writer.headerFrames : 0),
      lostFrames: this.#lostFrames,
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
        // The parts of one recording stay linked (previousFile / nextFile) across a break too; the
        // discontinuity notes say that the timeline does not run on between them.
        this.#endPart(part, next.wav);
        this.#anchor = null; // the stream's clock jumped: wall clock re-anchors at this block
        part = this.#openPart(block, previousFile);
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
        ...(this.#beamChannels ? { beamChannels: this.#beamChannels, beamChanges: [] } : {}),
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
      // After a failed write the file holds fewer frames than were accepted: count the rest as lost.
      const lost = w.frames - w.headerFrames;
      if (lost > 0) {
        this.#lostFrames += lost;
        this.#frames -= lost;
        this.#bytes -= lost * w.blockAlignBytes;
        this.#lastEnd = part.startSampleIndex + w.headerFrames;
        part.status.frames = w.headerFrames;
        part.status.bytes = w.headerFrames * w.blockAlignBytes;
        part.sidecar.setFrames(w.headerFrames);
      }
      part.sidecar.set({ container: w.container });
      try {
        await part.sidecar.close();
      } catch (e) {
        this.#fail(e);
      }
      if (w.removed) {
        // No valid WAV came of it (the disk was full before its header): no file, no sidecar.
        await rm(part.sidecar.path, { force: true }).catch(() => {});
        this.#files = this.#files.filter((f) => f !== part.status);
      }
      part.status.closed = true;
    })();
    this.#closing.push(done);
  }

  /** Stop the track on the first failure and report it once. */
  #fail(e: unknown): void {
    if (this.#error) return;
    const err = isOutputError(e) ? e : writeError(`track ${this.name}`, e);
    this.#error = err;
    if (this.#part && !this.#closed) this.#endPart(this.#part, null);
    this.#o.onError?.(err);
  }
}

export interface RecorderStartOptions {
  dir: string;
  /** How status and messages name the folder; default its last name. Never the absolute path. */
  dirLabel?: string;
  /**
   * Free bytes to keep on the folder's disk; default 0 (no check). start() refuses below it and a
   * running recording stops when the free space falls below it.
   */
  minFreeBytes?: number;
  /** Longest time between two free-space checks while recording, ms; default 500. */
  spaceCheckMs?: number;
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
  /** The folder as `dirLabel` names it (never an absolute path); null before the first start. */
  dir: string | null;
  /** ISO time of start(), null before the first start. */
  startedAt: string | null;
  stoppedAt: string | null;
  /** Frames of the raw track. */
  frames: number;
  /** Frames of the raw track a crash now would keep (header refreshed over them). */
  framesOnDisk: number;
  /** WAV data bytes over all tracks. */
  bytes: number;
  files: PartStatus[];
  tracks: Record<string, TrackStatus>;
  error: { code: string; message: string } | null;
  /** Why the last recording stopped by itself (disk full, write error); null when stopped on request or running. */
  stopReason: { code: OutputErrorCode; message: string } | null;
}

type DistributiveOmit<T, K extends PropertyKey> = T extends unknown ? Omit<T, K> : never;

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
  #onStop: ((status: RecorderStatus) => void) | undefined;
  #error: OutputError | null = null;
  #stopReason: { code: OutputErrorCode; message: string } | null = null;
  #label = '';
  /** Free-space watch: bytes recorded since the last check, its time, one check at a time. */
  #space = { sinceBytes: 0, lastMs: 0, checking: false, generation: 0 };

  /**
   * @param options.onError called once per failure of a track. A failed block (wrong channel
   *   count) stops only its track; a failed write (ERR_REC_NO_SPACE, ERR_REC_WRITE_FAILED) stops
   *   the whole recording.
   * @param options.onStop called when a recording stopped by itself, once its files are closed,
   *   with the final status (its `stopReason` says why); not called for stop().
   */
  constructor(options: { onError?: (err: OutputError) => void; onStop?: (status: RecorderStatus) => void } = {}) {
    this.#onError = options.onError;
    this.#onStop = options.onStop;
  }

  get recording(): boolean {
    return this.#recording;
  }

  /**
   * Begin a recording into `dir` (created if missing) with the 'raw' track. Files open at the first
   * block, since its sample index, rate and channel count define them.
   * @throws (rejects) ERR_REC_ALREADY_RECORDING, ERR_REC_BAD_OPTIONS, ERR_REC_EXISTS, ERR_REC_NO_SPACE
   *   (free space below `minFreeBytes`), ERR_REC_WRITE_FAILED
   */
  async start(options: RecorderStartOptions): Promise<RecorderStatus> {
    if (this.#recording) throw outputError('ERR_REC_ALREADY_RECORDING', `started ${this.#startedAt}`);
    if (this.#stopping) throw outputError('ERR_REC_ALREADY_RECORDING', `started ${this.#startedAt}, its files are being closed`);
    const prefix = options.prefix ?? 'nullsteer';
    if (!/^[A-Za-z0-9._-]+$/.test(prefix)) throw outputError('ERR_REC_BAD_OPTIONS', `prefix ${JSON.stringify(prefix)}, allowed [A-Za-z0-9._-]+`);
    const { encoding = 'float32', rotateSeconds, rotateBytes, minFreeBytes = 0, spaceCheckMs = 500 } = options;
    checkTrackOptions({ name: 'raw', encoding, rotateSeconds, rotateBytes });
    if (!(Number.isSafeInteger(minFreeBytes) && minFreeBytes >= 0)) throw outputError('ERR_REC_BAD_OPTIONS', `minFreeBytes ${minFreeBytes}, allowed an integer ≥ 0`);
    if (!(spaceCheckMs > 0)) throw outputError('ERR_REC_BAD_OPTIONS', `spaceCheckMs ${spaceCheckMs}, allowed a number > 0`);
    const label = options.dirLabel ?? basename(options.dir);
    const now = Date.now();
    let existing: string[];
    let free = Infinity;
    try {
      await mkdir(options.dir, { recursive: true });
      await access(options.dir, 2 /* W_OK */);
      existing = await readdir(options.dir);
      if (minFreeBytes > 0) free = await freeBytes(options.dir);
    } catch (e) {
      throw outputError('ERR_REC_WRITE_FAILED', `folder ${JSON.stringify(label)}: ${fsErrorText(e)}`, e);
    }
    if (free < minFreeBytes) throw outputError('ERR_REC_NO_SPACE', reserveText('recordings', label, free, minFreeBytes));
    // Sidecar rewrites of a killed server may have left their temporary files.
    for (const f of existing) if (f.startsWith(`${prefix}-`) && f.endsWith('.json.tmp')) await rm(join(options.dir, f), { force: true }).catch(() => {});
    // A recording started in the same second as an earlier one gets a suffix: -2, -3 …
    let stem = `${prefix}-${fileStamp(now)}`;
    for (let k = 2; existing.some((f) => f.startsWith(`${stem}-`)); k++) {
      if (k > 99) throw outputError('ERR_REC_EXISTS', `${stem}-raw-0001.wav and 98 more this second`);
      stem = `${prefix}-${fileStamp(now)}-${k}`;
    }
    this.#options = options;
    this.#label = label;
    this.#stem = stem;
    this.#tracks = new Map();
    this.#error = null;
    this.#stopReason = null;
    this.#addTrack('raw', undefined, options.encoding); // validates the options
    this.#recording = true;
    this.#startedAt = new Date(now).toISOString();
    this.#stoppedAt = null;
    this.#space = { sinceBytes: 0, lastMs: performance.now(), checking: false, generation: this.#space.generation + 1 };
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
    if (!this.#recording) return;
    const t = this.#tracks.get('raw')!;
    t.push(block);
    this.#watchSpace(block.frames * block.channels * bytesPerSample(t.encoding));
  }

  /** A track of the running recording by name (e.g. 'beams'), or undefined. */
  track(name: string): RecorderTrack | undefined {
    return this.#recording ? this.#tracks.get(name) : undefined;
  }

  /** A block of another track (its sample indices on the same stream clock). Unknown tracks are ignored. */
  pushTrack(name: string, block: Block): void {
    if (!this.#recording) return;
    const t = this.#tracks.get(name);
    if (t === undefined) return;
    t.push(block);
    this.#watchSpace(block.frames * block.channels * bytesPerSample(t.encoding));
  }

  /**
   * Look up the folder's free space (in the background) once `spaceCheckMs` have passed or a
   * quarter of the reserve has been recorded since the last look; below the reserve, stop.
   */
  #watchSpace(bytes: number): void {
    const o = this.#options!;
    const reserve = o.minFreeBytes ?? 0;
    if (reserve <= 0) return;
    const w = this.#space;
    w.sinceBytes += bytes;
    const now = performance.now();
    if (w.checking || (w.sinceBytes < reserve / 4 && now - w.lastMs < (o.spaceCheckMs ?? 500))) return;
    w.checking = true;
    w.sinceBytes = 0;
    w.lastMs = now;
    const generation = w.generation;
    const still = () => generation === this.#space.generation && this.#recording;
    freeBytes(o.dir).then(
      (free) => {
        if (still() && free < reserve) this.#halt(outputError('ERR_REC_NO_SPACE', reserveText('recordings', this.#label, free, reserve)));
      },
      (e) => {
        if (still()) this.#halt(outputError('ERR_REC_WRITE_FAILED', `free space of the folder ${JSON.stringify(this.#label)}: ${fsErrorText(e)}`, e));
      },
    ).finally(() => {
      if (generation === this.#space.generation) this.#space.checking = false;
    });
  }

  /** Stop by itself: close every track (each keeps what reached its file), then tell onStop. */
  #halt(err: OutputError): void {
    if (!this.#recording) return;
    this.#recording = false;
    this.#error ??= err;
    this.#stopReason = { code: err.code, message: err.message };
    this.#stopping = (async () => {
      await Promise.all([...this.#tracks.values()].map((t) => t.close()));
      this.#stoppedAt = new Date().toISOString();
      this.#stopping = null;
      const st = this.status();
      this.#onStop?.(st);
      return st;
    })();
  }

  /** Parameters changed from `sampleIndex` on; noted in every track's current sidecar. */
  noteParams(sampleIndex: number, params: Record<string, unknown>, patch?: Record<string, unknown>): void {
    if (!this.#recording) return;
    for (const t of this.#tracks.values()) t.noteParams(sampleIndex, params, patch);
  }

  /**
   * End the recording: every WAV header and sidecar final. Resolves with the final status.
   * @throws (rejects) ERR_REC_NOT_RECORDING, also when the recording has stopped by itself
   */
  async stop(): Promise<RecorderStatus> {
    if (this.#stopping && this.#stopReason === null) return this.#stopping;
    if (!this.#recording) throw outputError('ERR_REC_NOT_RECORDING', this.#stopReason ? `it stopped by itself (${this.#stopReason.message})` : 'stop()');
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
      dir: this.#options ? this.#label : null,
      startedAt: this.#startedAt,
      stoppedAt: this.#stoppedAt,
      frames: tracks.raw?.frames ?? 0,
      framesOnDisk: tracks.raw?.framesOnDisk ?? 0,
      bytes,
      files,
      tracks,
      error: this.#error ? { code: this.#error.code, message: this.#error.message } : null,
      stopReason: this.#stopReason,
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
        if (err.code === 'ERR_REC_NO_SPACE' || err.code === 'ERR_REC_WRITE_FAILED') this.#halt(err);
      },
    });
    this.#tracks.set(name, track);
    return track;
  }
}
