/**
 * The array check on the live input (POST /api/array-check): the next N seconds of the block bus
 * are copied into one preallocated buffer, then dsp/array-check.ts runs on them in a worker thread
 * (array-check-worker.ts) so neither the request nor the engine waits on the analysis. One check
 * at a time. Saving the proposed calibration (POST /api/array-check/calibration) rewrites the array
 * file's `calibration` (config/array-file-update.ts), journals it and hands it to the running
 * engines, which use it from their next hop (the covariance then adapts with τ).
 *
 * Bounds: the capture buffer is at most MAX_CHECK_BYTES (the seconds are shortened to fit, and the
 * answer says so); a block with a gap or a clock jump restarts the capture (zeros or a jump would
 * spoil the cross-spectra), at most MAX_RESTARTS times; the capture gives up when the input does
 * not deliver within its length plus CAPTURE_GRACE_S.
 */
import { describeCalibration } from '../dsp/calibration.ts';
import { Worker } from 'node:worker_threads';
import type { Block, BlockSink, ChannelCalibration } from '../../shared/types.ts';
import { checkArray, DEFAULT_MISPLACED_BOUND_US, type ArrayCheckInput, type ArrayCheckResult } from '../dsp/array-check.ts';
export type { ArrayCheckAnswer } from '../../shared/array-check.ts';
import type { ArrayCheckAnswer } from '../../shared/array-check.ts';

/** Largest capture, bytes (float32 planar): 10 s of 64 channels at 48 kHz would be 123 MB; beyond this the capture is shortened. */
export const MAX_CHECK_BYTES = 64 * 2 ** 20;
/** Extra time the capture waits for the input beyond its own length, s (a loaded machine, a slow sender). */
export const CAPTURE_GRACE_S = 10;
/** Gaps or clock jumps tolerated during a capture (each restarts it) before the check gives up. */
export const MAX_RESTARTS = 5;
/** The analysis itself may take at most this long in its thread, ms, before it is stopped. */
export const ANALYSIS_TIMEOUT_MS = 120_000;
export const MIN_CHECK_SECONDS = 0.5;
export const MAX_CHECK_SECONDS = 10;
export const DEFAULT_CHECK_SECONDS = 2;

export interface ArrayCheckRequest {
  azimuthDeg?: number;
  elevationDeg?: number;
  seconds?: number;
  misplacedBoundUs?: number;
}

export type CheckFailure = { kind: 'running'; startedAt: string } | { kind: 'no-input'; got: number; want: number; waitedS: number; detail: string } | { kind: 'failed'; detail: string };

/** A failed check, as data for the route to turn into its HTTP error. */
export class ArrayCheckError extends Error {
  readonly failure: CheckFailure;
  constructor(failure: CheckFailure) {
    super(failure.kind === 'running' ? 'an array check is already running' : failure.kind === 'no-input' ? failure.detail : failure.detail);
    this.name = 'ArrayCheckError';
    this.failure = failure;
  }
}

export interface ArrayCheckRunnerOptions {
  subscribe: (sink: BlockSink) => () => void;
  channels: number;
  sampleRateHz: number;
  positions: () => ReadonlyArray<readonly [number, number, number]>;
  speedOfSoundMps: number;
  /** The processing band now, Hz. */
  bandHz: () => [number, number];
  /** Run the analysis on this thread instead of a worker (tests of the runner's capture). */
  inline?: boolean;
  maxBytes?: number;
}

const WORKER_BOOT = new URL('./array-check-worker-boot.mjs', import.meta.url);

export class ArrayCheckRunner {
  readonly opts: ArrayCheckRunnerOptions;
  #running: string | null = null;
  #last: ArrayCheckAnswer | null = null;
  checks = 0;
  failures = 0;

  constructor(opts: ArrayCheckRunnerOptions) {
    this.opts = opts;
  }

  get running(): boolean {
    return this.#running !== null;
  }

  get last(): ArrayCheckAnswer | null {
    return this.#last;
  }

  /** Capture and analyse; rejects with ArrayCheckError. */
  async run(req: ArrayCheckRequest): Promise<ArrayCheckAnswer> {
    if (this.#running !== null) throw new ArrayCheckError({ kind: 'running', startedAt: this.#running });
    const startedAt = new Date().toISOString();
    this.#running = startedAt;
    try {
      const o = this.opts;
      const M = o.channels;
      const fs = o.sampleRateHz;
      const secondsRequested = req.seconds ?? DEFAULT_CHECK_SECONDS;
      const maxFrames = Math.floor((o.maxBytes ?? MAX_CHECK_BYTES) / (4 * M));
      const frames = Math.min(Math.round(secondsRequested * fs), maxFrames);
      const cap = await this.#capture(frames, secondsRequested);
      const input: ArrayCheckInput = {
        data: cap.data,
        channels: M,
        frames,
        sampleRateHz: fs,
        positions: o.positions().map((p) => [p[0], p[1], p[2]] as [number, number, number]),
        speedOfSoundMps: o.speedOfSoundMps,
        bandHz: o.bandHz(),
        direction: req.azimuthDeg === undefined ? null : { azimuthDeg: req.azimuthDeg, elevationDeg: req.elevationDeg ?? 0 },
        misplacedBoundUs: req.misplacedBoundUs ?? DEFAULT_MISPLACED_BOUND_US,
      };
      const result = o.inline ? checkArray(input) : await analyseInWorker(input);
      const answer: ArrayCheckAnswer = { ...result, startedAt, finishedAt: new Date().toISOString(), seconds: frames / fs, secondsRequested, sampleIndex: cap.sampleIndex, restarts: cap.restarts };
      this.#last = answer;
      this.checks++;
      return answer;
    } catch (e) {
      this.failures++;
      if (e instanceof ArrayCheckError) throw e;
      throw new ArrayCheckError({ kind: 'failed', detail: e instanceof Error ? e.message : String(e) });
    } finally {
      this.#running = null;
    }
  }

  /** The next `frames` contiguous samples of every channel, planar. */
  #capture(frames: number, secondsRequested: number): Promise<{ data: Float32Array; sampleIndex: number; restarts: number }> {
    const M = this.opts.channels;
    const data = new Float32Array(M * frames);
    let filled = 0;
    let first = 0;
    let expected: number | null = null;
    let restarts = 0;
    const waitS = secondsRequested + CAPTURE_GRACE_S;
    return new Promise((resolve, reject) => {
      let unsubscribe: () => void = () => {};
      const finish = (f: () => void) => {
        clearTimeout(timer);
        unsubscribe();
        f();
      };
      const timer = setTimeout(
        () => finish(() => reject(new ArrayCheckError({ kind: 'no-input', got: filled, want: frames, waitedS: waitS, detail: filled === 0 ? 'no samples arrived; is a source sending?' : 'the input stopped or was interrupted too often' }))),
        waitS * 1000,
      );
      const sink = (b: Block) => {
        if (b.channels !== M) return;
        if (b.gap || b.discontinuity || (expected !== null && b.sampleIndex !== expected)) {
          // Zeros or a jump inside the span would spoil the cross-spectra: start again after it.
          if (filled > 0 || b.discontinuity) restarts++;
          filled = 0;
          expected = b.gap ? null : b.sampleIndex + b.frames;
          if (restarts > MAX_RESTARTS) {
            finish(() => reject(new ArrayCheckError({ kind: 'no-input', got: 0, want: frames, waitedS: waitS, detail: `the input had ${restarts} gaps or clock jumps during the capture` })));
            return;
          }
          if (b.gap) return;
        }
        if (filled === 0) first = b.sampleIndex;
        expected = b.sampleIndex + b.frames;
        const take = Math.min(b.frames, frames - filled);
        for (let c = 0; c < M; c++) data.set(b.data.subarray(c * b.frames, c * b.frames + take), c * frames + filled);
        filled += take;
        if (filled === frames) finish(() => resolve({ data, sampleIndex: first, restarts }));
      };
      unsubscribe = this.opts.subscribe(sink);
    });
  }
}

/** Run checkArray in its own thread; the samples are transferred, not copied. */
function analyseInWorker(input: ArrayCheckInput): Promise<ArrayCheckResult> {
  return new Promise((resolve, reject) => {
    const w = new Worker(WORKER_BOOT, { workerData: input, transferList: [input.data.buffer as ArrayBuffer] });
    let done = false;
    const end = (f: () => void) => {
      if (done) return;
      done = true;
      clearTimeout(timer);
      f();
      void w.terminate();
    };
    const timer = setTimeout(() => end(() => reject(new Error(`the analysis took longer than ${ANALYSIS_TIMEOUT_MS / 1000} s`))), ANALYSIS_TIMEOUT_MS);
    w.on('message', (m: { type: 'result'; result: ArrayCheckResult } | { type: 'error'; message: string }) => end(() => (m.type === 'result' ? resolve(m.result) : reject(new Error(m.message)))));
    w.on('error', (e) => end(() => reject(e)));
    w.on('exit', (code) => end(() => reject(new Error(`the analysis thread ended (code ${code}) without an answer`))));
  });
}

/** A calibration for status: what it corrects, in a few numbers. */
export function calibrationSummary(cal: ChannelCalibration | undefined): { inverted: number[]; reordered: number[] } {
  const d = describeCalibration(cal);
  return { inverted: d?.inverted ?? [], reordered: d?.reordered ?? [] };
}

export interface ArrayCheckState {
  running: boolean;
  checks: number;
  failures: number;
  last: ArrayCheckAnswer | null;
  /** The calibration the engine uses now (as in the array file) and where it came from. */
  calibration: ChannelCalibration | null;
  savedAt: string | null;
  /** How a saved calibration takes effect: at once, in the running engines. */
  applies: 'live';
}

export interface SaveCalibrationAnswer {
  saved: true;
  file: string;
  calibration: ChannelCalibration;
  applied: 'live';
  message: string;
}

export interface ArrayCheckControllerDeps {
  runner: ArrayCheckRunner;
  /** The array file (absolute) and the name shown in answers (no folders). */
  arrayPath: string;
  fileLabel: string;
  /** The array file's calibration now (without member offsets). */
  fileCalibration: () => ChannelCalibration | undefined;
  /** Per position, µs: the members' offsets the front end adds to the file's delays (inputs[].offsetUs). */
  memberDelaysUs: number[] | null;
  /** Rewrite the file's calibration (config/array-file-update.ts) and resolve when written. */
  write: (calibration: ChannelCalibration) => Promise<void>;
  /** Hand the calibration (member offsets added) to the running engines. */
  apply: (live: ChannelCalibration) => void;
  journal: (before: ChannelCalibration | null, after: ChannelCalibration, summary: string) => void;
}

/** The controller behind routes/array-check.ts. */
export function createArrayCheckController(d: ArrayCheckControllerDeps) {
  let savedAt: string | null = null;
  const withOffsets = (cal: ChannelCalibration): ChannelCalibration => (d.memberDelaysUs ? { ...cal, delayUs: cal.delayUs.map((x, p) => x + d.memberDelaysUs![p]) } : cal);
  return {
    channels: d.runner.opts.channels,
    state: (): ArrayCheckState => ({ running: d.runner.running, checks: d.runner.checks, failures: d.runner.failures, last: d.runner.last, calibration: d.fileCalibration() ?? null, savedAt, applies: 'live' }),
    run: async (req: ArrayCheckRequest): Promise<ArrayCheckAnswer> => {
      const a = await d.runner.run(req);
      // The check measures the raw input, members' offsets included; the file holds them apart.
      if (d.memberDelaysUs) a.calibration.delayUs = a.calibration.delayUs.map((x, p) => Math.round((x - d.memberDelaysUs![p]) * 10) / 10);
      return a;
    },
    saveCalibration: async (cal: ChannelCalibration): Promise<SaveCalibrationAnswer> => {
      const before = d.fileCalibration() ?? null;
      // A sensitivity already in the file stays unless the new calibration gives one.
      const next: ChannelCalibration = { ...cal };
      if (next.sensitivityMvPerPa === undefined && before?.sensitivityMvPerPa !== undefined) {
        next.sensitivityMvPerPa = before.sensitivityMvPerPa;
        next.fullScaleVolts = before.fullScaleVolts;
      }
      await d.write(next);
      d.apply(withOffsets(next));
      savedAt = new Date().toISOString();
      const s = calibrationSummary(next);
      const parts = [`gains up to ${Math.max(0, ...next.gainDb.map(Math.abs)).toFixed(2)} dB`, `delays up to ${Math.max(0, ...next.delayUs.map(Math.abs)).toFixed(1)} µs`];
      if (s.inverted.length) parts.push(`polarity inverted at ${s.inverted.join(', ')}`);
      if (s.reordered.length) parts.push(`positions ${s.reordered.join(', ')} read other channels`);
      d.journal(before, next, `calibration saved to ${d.fileLabel}: ${parts.join('; ')}`);
      return { saved: true, file: d.fileLabel, calibration: next, applied: 'live', message: `saved to ${d.fileLabel} and applied to the running processing` };
    },
  };
}

export type ArrayCheckController = ReturnType<typeof createArrayCheckController>;
