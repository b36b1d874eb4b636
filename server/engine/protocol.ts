/**
 * The shared memory layout between the engine (main thread) and its bin workers, and the messages
 * they exchange (a union on `type`). Per hop nothing is posted: the main thread writes the snapshot
 * into a ring slot and bumps a counter; workers wake on it with Atomics.waitAsync.
 *
 * ctrl (Int32Array over a SharedArrayBuffer):
 *   [CTRL_WRITE]          hops published so far (the slot of hop h is h mod slots)
 *   [CTRL_DONE + w]       hops worker w has finished (the main thread reuses a slot only when
 *                         every worker is past it)
 * meta (Float64Array, META_STRIDE per slot): hop start sample, λ, flags, scan sequence, loading
 *   mode and its two values.
 * ring (Float64Array, slotDoubles per slot): the full bin-major snapshot of the hop (all N/2+1 bins).
 * results (Float64Array): per worker and result slot, D conventional then D MVDR partial sums.
 * stats (Float64Array, STATS_STRIDE per worker): busy milliseconds, hops, scans, last scan ms,
 *   singular bins (MVDR power 0: R + δI did not factor), non-finite bins left out, covariance
 *   restarts after a non-finite scan (all three counted over the plan's life).
 */
import type { LoadingSpec } from '../dsp/loading.ts';

export const CTRL_WRITE = 0;
export const CTRL_DONE = 8;
export const META_STRIDE = 8;
export const META_SAMPLE = 0;
export const META_LAMBDA = 1;
export const META_FLAGS = 2;
export const META_SCAN_SEQ = 3;
export const META_LOAD_MODE = 4;
export const META_LOAD_A = 5;
export const META_LOAD_B = 6;
export const STATS_STRIDE = 7;
export const STAT_SINGULAR = 4;
export const STAT_NON_FINITE = 5;
export const STAT_RESTARTS = 6;
export const RESULT_SLOTS = 8;
/** Steered beams at most (DESIGN.md: up to 8). */
export const MAX_BEAMS = 8;
/**
 * Doubles per worker and result slot: D conventional, D MVDR, per beam D response + 1 WNG, then per
 * beam the weights of the worker's bins (`weightDoubles` = most bins of any worker × 2·M).
 */
export function resultStride(directions: number, weightDoubles: number): number {
  return 2 * directions + MAX_BEAMS * (directions + 1) + MAX_BEAMS * weightDoubles;
}

/** Flags in meta: which spectra this hop's scan computes (bits of bin-processor.ts), and a reset. */
export const FLAG_RESET = 8;
/** This scan also computes every beam's weights, WNG and response. */
export const FLAG_BEAMS = 16;

export interface BeamSpec {
  id: number;
  /** Index of the look direction in the worker's current grid. */
  lookIndex: number;
  method: 'mvdr' | 'delay-and-sum';
}

/** Loading spec as numbers: mode 0 relative (A = ratio), 1 fixed (A = δ), 2 WNG floor (A = dB, B = max ratio). */
export const LOAD_RELATIVE = 0;
export const LOAD_FIXED = 1;
export const LOAD_WNG = 2;

/** A grid as plan messages carry it (plain arrays) → the DirectionGrid the kernels take. */
export function gridFromMessage(g: { azimuthDeg: number[]; elevationDeg: number[]; nAz: number; nEl: number }) {
  return { count: g.nAz * g.nEl, nAz: g.nAz, nEl: g.nEl, azimuthDeg: Float64Array.from(g.azimuthDeg), elevationDeg: Float64Array.from(g.elevationDeg) };
}

/** Write a loading spec into the hop meta at `o` (the engine's side of loadingAt). */
export function writeLoadingMeta(meta: Float64Array, o: number, l: LoadingSpec): void {
  switch (l.mode) {
    case 'relative':
      meta[o + META_LOAD_MODE] = LOAD_RELATIVE;
      meta[o + META_LOAD_A] = l.ratio; // relative modes are scale-free
      break;
    case 'relative-db':
      meta[o + META_LOAD_MODE] = LOAD_RELATIVE;
      meta[o + META_LOAD_A] = Math.pow(10, l.db / 10);
      break;
    case 'fixed':
      meta[o + META_LOAD_MODE] = LOAD_FIXED;
      meta[o + META_LOAD_A] = l.delta; // in scaled units already
      break;
    case 'wng':
      meta[o + META_LOAD_MODE] = LOAD_WNG;
      meta[o + META_LOAD_A] = l.floorDb;
      meta[o + META_LOAD_B] = l.maxRatio ?? 1e3;
      break;
  }
}

/** The loading spec of the hop whose meta starts at `o` (the layout above). */
export function loadingAt(meta: Float64Array, o: number): LoadingSpec {
  const mode = meta[o + META_LOAD_MODE];
  if (mode === LOAD_RELATIVE) return { mode: 'relative', ratio: meta[o + META_LOAD_A] };
  if (mode === LOAD_FIXED) return { mode: 'fixed', delta: meta[o + META_LOAD_A] };
  return { mode: 'wng', floorDb: meta[o + META_LOAD_A], maxRatio: meta[o + META_LOAD_B] };
}

export interface PlanMessage {
  type: 'plan';
  epoch: number;
  workerIndex: number;
  /**
   * true: build it and hold it, answering 'ready' (or 'refused'); the plan in force keeps running
   * until 'commit' of this epoch switches to it ('abort' drops it). false: build and switch at once
   * (a replacement worker taking over a range).
   */
  staged: boolean;
  ctrl: SharedArrayBuffer;
  meta: SharedArrayBuffer;
  ring: SharedArrayBuffer;
  results: SharedArrayBuffer;
  stats: SharedArrayBuffer;
  slots: number;
  slotDoubles: number;
  /** Index in a slot of this worker's first bin (2·M·bin). */
  binOffsetDoubles: number;
  /** Room per direction vector in the results (≥ D). */
  resultDirections: number;
  /** Room per beam for weights in the results: most bins of any worker × 2·M. */
  weightDoubles: number;
  positions: [number, number, number][];
  freqsHz: number[];
  grid: { azimuthDeg: number[]; elevationDeg: number[]; nAz: number; nEl: number };
  speedOfSoundMps: number;
  snapshotScale: number;
  active: boolean[];
  /** Fast kernels (WebAssembly MVDR, tracked conventional spectrum) or the plain reference ones. */
  fast: boolean;
  beams: BeamSpec[];
}

export type ToWorker =
  | PlanMessage
  | { type: 'commit'; epoch: number }
  | { type: 'abort'; epoch: number }
  /** Test hook: the next plan message is refused with `message`, or never answered ('stall'). */
  | { type: 'plan-fault'; mode: 'refuse' | 'stall'; message: string }
  | { type: 'mask'; epoch: number; active: boolean[] }
  | { type: 'grid'; epoch: number; grid: PlanMessage['grid'] }
  | { type: 'beams'; epoch: number; beams: BeamSpec[] }
  | { type: 'fault'; message: string }
  /** Test hook: corrupt the covariance of the worker's first bin (made not finite). */
  | { type: 'poison' }
  | { type: 'stop' };

export type FromWorker =
  | { type: 'ready'; epoch: number; workerIndex: number }
  /** A plan this worker could not build (e.g. a table over its cap); the plan in force goes on. */
  | { type: 'refused'; epoch: number; workerIndex: number; message: string }
  | { type: 'scanned'; epoch: number; workerIndex: number; scanSeq: number; resultSlot: number; directions: number; scanMs: number; beams: number[] }
  | { type: 'error'; workerIndex: number; message: string; fatal: boolean };
