/**
 * The JSON sidecar of one recorded WAV file: where the file sits on the stream's clock, what was
 * recorded (array geometry, source, processing parameters), and everything that happened during it
 * (parameter changes, input gaps written as zeros, clock discontinuities that ended or began it).
 *
 * Sample indices are on the stream's clock (DESIGN.md §3); the WAV frame of a sample index s is
 * s − startSampleIndex, since the file is sample-exact. Wall-clock times are derived from sample
 * indices, never the other way round.
 *
 * Crash safety: the file is replaced atomically (write `<name>.tmp`, then rename over it, which
 * POSIX makes atomic within a directory), at most once per `minIntervalMs` while it changes and once
 * at close with `closed: true`. A killed process leaves the last complete version. A rewrite that
 * fails (disk full) removes its temporary file and leaves the last complete version too.
 */
import { rename, rm, writeFile } from 'node:fs/promises';
import { basename } from 'node:path';
import { writeError, type RecordingEncoding } from './wav-writer.ts';

/**
 * Replace `path` with `text` atomically: write `<path>.tmp`, rename it over `path`. On failure the
 * temporary file is removed and the error rethrown.
 */
export async function writeFileAtomic(path: string, text: string): Promise<void> {
  const tmp = `${path}.tmp`;
  try {
    await writeFile(tmp, text);
    await rename(tmp, path);
  } catch (e) {
    await rm(tmp, { force: true }).catch(() => {});
    throw e;
  }
}

export interface ArrayGeometry {
  name: string;
  /** Sensor positions, metres, [x, y, z] per channel. */
  positions: readonly (readonly number[])[];
}

export interface RecordingSource {
  kind: string;
  [key: string]: unknown;
}

export interface ParamChange {
  /** First sample the new parameters apply to, stream clock. */
  sampleIndex: number;
  wallClock: string;
  /** The parameters after the change, when the caller gave them whole. */
  params?: Record<string, unknown>;
  /** Only what changed, when the caller gave a patch. */
  patch?: Record<string, unknown>;
}

export interface GapNote {
  /** First zero sample, stream clock. */
  sampleIndex: number;
  frames: number;
}

export interface DiscontinuityNote {
  /**
   * Why the timeline broke: 'discontinuity' (the stream flagged a clock jump), 'clock' (a block did
   * not continue the previous one), 'format' (stream id, channels or rate changed).
   */
  kind: 'discontinuity' | 'clock' | 'format';
  /** Where this file's timeline ended (in the earlier file) or began (in the later one). */
  sampleIndex: number;
  /** In the later file: where the earlier file ended. */
  previousEndSampleIndex?: number;
  previousFile?: string;
  /** In the earlier file: where the next file begins. */
  nextSampleIndex?: number;
  nextFile?: string;
}

/** What one channel of a beams recording carries: which beam, steered where, how. */
export interface BeamChannelNote {
  channel: number;
  beamId: number;
  azimuthDeg: number;
  elevationDeg: number;
  method: 'mvdr' | 'delay-and-sum';
  gainDb: number;
  limiter: boolean;
}

/**
 * A beam steered, retuned, added or removed while the recording ran, at its sample index; or
 * (`channels`) the channels' meaning changed within this file (same channel count, other beams).
 */
export type BeamChangeNote =
  | {
      sampleIndex: number;
      wallClock: string;
      kind: 'add' | 'update' | 'remove';
      beamId: number;
      /** The beam's look direction, method, gain and limiter before and after (null: it did not exist). */
      before: Omit<BeamChannelNote, 'channel'> | null;
      after: Omit<BeamChannelNote, 'channel'> | null;
    }
  | { sampleIndex: number; wallClock: string; kind: 'channels'; channels: BeamChannelNote[] };

export interface SidecarDoc {
  format: 'nullsteer-recording';
  version: 1;
  /** The WAV file's name (same directory). */
  file: string;
  track: string;
  /** 1-based part number within the recording. */
  part: number;
  startSampleIndex: number;
  /** ISO 8601 UTC wall-clock time of startSampleIndex. */
  startWallClock: string;
  sampleRateHz: number;
  channels: number;
  encoding: RecordingEncoding;
  container: 'wav' | 'rf64';
  source: RecordingSource;
  array: ArrayGeometry | null;
  /** Processing parameters in force at startSampleIndex. */
  params: Record<string, unknown>;
  changes: ParamChange[];
  gaps: GapNote[];
  discontinuities: DiscontinuityNote[];
  /**
   * The part before this one in the same recording, null for the first: after a rotation the
   * timeline runs on; after a break (see `discontinuities`) it does not.
   */
  previousFile: string | null;
  /** The part after this one in the same recording (rotation or break), null if none (yet). */
  nextFile: string | null;
  /** startSampleIndex + frames. */
  endSampleIndex: number;
  /** Beams recordings: what each channel carries at the part's start (absent for other tracks). */
  beamChannels?: BeamChannelNote[];
  /** Beams recordings: every steer, method, gain or limiter change with its sample index. */
  beamChanges?: BeamChangeNote[];
  /**
   * Frames accepted for the WAV file. While `closed` is false the WAV header may lag by up to its
   * refresh interval; after a crash the WAV header is authoritative.
   */
  frames: number;
  closed: boolean;
}

export interface SidecarWriterOptions {
  /** Least time between two rewrites while the document changes, ms; default 1000. */
  minIntervalMs?: number;
  /**
   * Called once if a rewrite fails (ERR_REC_NO_SPACE or ERR_REC_WRITE_FAILED, naming the file but
   * not its folder); later rewrites are still tried.
   */
  onError?: (err: Error) => void;
}

/** Keeps one sidecar document and its file up to date. */
export class SidecarWriter {
  readonly path: string;
  readonly #doc: SidecarDoc;
  readonly #minIntervalMs: number;
  readonly #onError: ((err: Error) => void) | undefined;
  #lastWriteMs = -Infinity;
  #timer: ReturnType<typeof setTimeout> | null = null;
  #writing: Promise<void> | null = null;
  #dirty = false;
  #closed = false;
  #reported = false;
  #writes = 0;

  /** Takes ownership of `doc` and writes it at once. */
  constructor(path: string, doc: SidecarDoc, options: SidecarWriterOptions = {}) {
    this.path = path;
    this.#doc = doc;
    this.#minIntervalMs = options.minIntervalMs ?? 1000;
    this.#onError = options.onError;
    this.#dirty = true;
    this.#schedule();
  }

  /** The current document (read only; change it through the methods). */
  get doc(): Readonly<SidecarDoc> {
    return this.#doc;
  }
  /** Completed rewrites of the file. */
  get writes(): number {
    return this.#writes;
  }

  setFrames(frames: number): void {
    this.#doc.frames = frames;
    this.#doc.endSampleIndex = this.#doc.startSampleIndex + frames;
    this.#touch();
  }

  /** Record a gap; a gap that continues the previous one extends it. */
  addGap(sampleIndex: number, frames: number): void {
    const gaps = this.#doc.gaps;
    const last = gaps.length > 0 ? gaps[gaps.length - 1] : null;
    if (last !== null && last.sampleIndex + last.frames === sampleIndex) last.frames += frames;
    else gaps.push({ sampleIndex, frames });
    this.#touch();
  }

  addChange(change: ParamChange): void {
    this.#doc.changes.push(change);
    this.#touch();
  }

  addDiscontinuity(note: DiscontinuityNote): void {
    this.#doc.discontinuities.push(note);
    this.#touch();
  }

  /** Beams recordings: what each channel carries (set when the part opens and when the beam set changes). */
  setBeamChannels(channels: BeamChannelNote[]): void {
    this.#doc.beamChannels = channels;
    this.#touch();
  }

  addBeamChange(change: BeamChangeNote): void {
    (this.#doc.beamChanges ??= []).push(change);
    this.#touch();
  }

  /** Set the fields that are only known later: container, nextFile. */
  set(fields: Partial<Pick<SidecarDoc, 'container' | 'nextFile'>>): void {
    Object.assign(this.#doc, fields);
    this.#touch();
  }

  /** Write the final version (`closed: true`); resolves when it is on file. Idempotent. */
  async close(): Promise<void> {
    if (this.#closed) {
      await this.#writing;
      return;
    }
    this.#closed = true;
    this.#doc.closed = true;
    if (this.#timer) clearTimeout(this.#timer);
    this.#timer = null;
    await this.#writing;
    this.#dirty = true;
    await this.#write();
  }

  #touch(): void {
    if (this.#closed) return;
    this.#dirty = true;
    this.#schedule();
  }

  #schedule(): void {
    if (this.#timer !== null || this.#writing !== null || this.#closed) return;
    const wait = Math.max(0, this.#lastWriteMs + this.#minIntervalMs - Date.now());
    this.#timer = setTimeout(() => {
      this.#timer = null;
      void this.#write();
    }, wait);
    this.#timer.unref();
  }

  #write(): Promise<void> {
    this.#dirty = false;
    this.#lastWriteMs = Date.now();
    const text = JSON.stringify(this.#doc, null, 2) + '\n';
    this.#writing = (async () => {
      try {
        await writeFileAtomic(this.path, text);
        this.#writes++;
      } catch (e) {
        if (!this.#reported) {
          this.#reported = true;
          this.#onError?.(writeError(`write ${basename(this.path)}`, e));
        }
        if (this.#closed) throw e;
      } finally {
        this.#writing = null;
        if (this.#dirty) this.#schedule();
      }
    })();
    return this.#writing;
  }
}

/** A sample index's wall-clock time, given one anchor (sample index, ms since the epoch). */
export function wallClockIso(sampleIndex: number, anchorSampleIndex: number, anchorMs: number, sampleRateHz: number): string {
  return new Date(anchorMs + ((sampleIndex - anchorSampleIndex) * 1000) / sampleRateHz).toISOString();
}
