/**
 * The shared memory of one processing plan and each bin worker's part of it (the layout of
 * protocol.ts): the control words, the per-slot metadata, the snapshot ring, the results and the
 * workers' figures, allocated once per plan; the band's bins split over the workers in contiguous
 * ranges. The engine (engine.ts) fills the ring and reads the results; the workers (bin-worker.ts)
 * get their PlanMessage. Sized beforehand by plan-budget.ts.
 */
import { PeakFinder } from '../dsp/peaks.ts';
import type { ProcessingParams } from './params.ts';
import type { DirectionGrid } from '../dsp/steering.ts';
import type { BinRange } from '../dsp/stft.ts';
import { RING_SLOTS } from './plan-budget.ts';
import { splitBins, splitBinsWeighted, type WorkerRange } from './pool.ts';
import { META_STRIDE, RESULT_SLOTS, resultStride, STATS_STRIDE, type BeamSpec, type PlanMessage } from './protocol.ts';

/** One plan as the engine holds it: views of the shared memory and what the rows need. */
export interface Plan {
  epoch: number;
  grid: DirectionGrid;
  baseGrid: DirectionGrid;
  bins: number;
  startBin: number;
  ranges: WorkerRange[];
  ctrl: Int32Array;
  meta: Float64Array;
  ring: Float64Array;
  results: Float64Array;
  stats: Float64Array;
  slotDoubles: number;
  resultDirections: number;
  weightDoubles: number;
  finder: PeakFinder;
  writeSeq: number;
}

export interface PlanLayoutInput {
  epoch: number;
  /** The band's bins of the transform. */
  band: BinRange;
  fftSize: number;
  sampleRateHz: number;
  workers: number;
  /**
   * Relative speed of each part (the local threads first, then remote workers) and the most bins
   * each may take; absent: `workers` equal parts.
   */
  weights?: readonly number[];
  caps?: readonly number[];
  positions: [number, number, number][];
  /** The grid scanned now (coarser than baseGrid while shedding). */
  grid: DirectionGrid;
  /** The grid as asked for: it sizes the results. */
  baseGrid: DirectionGrid;
  speedOfSoundMps: number;
  active: readonly boolean[];
  fast: boolean;
  beams: BeamSpec[];
  finder: PeakFinder;
}

/** A grid as a worker message carries it (plain arrays). */
export function gridMessage(g: DirectionGrid): PlanMessage['grid'] {
  return { azimuthDeg: Array.from(g.azimuthDeg), elevationDeg: Array.from(g.elevationDeg), nAz: g.nAz, nEl: g.nEl };
}

/** Allocate a plan's shared memory and write each worker's staged PlanMessage. */
export function layoutPlan(i: PlanLayoutInput): { plan: Plan; messages: PlanMessage[] } {
  const M = i.positions.length;
  const ranges = i.weights ? splitBinsWeighted(i.band.count, i.weights, i.caps) : splitBins(i.band.count, i.workers);
  const W = ranges.length;
  const slotDoubles = 2 * M * (i.fftSize / 2 + 1);
  const resultDirections = i.baseGrid.count;
  const ctrlBuf = new SharedArrayBuffer(4 * (16 + W));
  const metaBuf = new SharedArrayBuffer(8 * META_STRIDE * RING_SLOTS);
  // One extra slot at the end takes hops that are skipped (ring full or decimated).
  const ringBuf = new SharedArrayBuffer(8 * slotDoubles * (RING_SLOTS + 1));
  const weightDoubles = Math.max(...ranges.map((r) => r.count)) * 2 * M;
  const resultsBuf = new SharedArrayBuffer(8 * W * RESULT_SLOTS * resultStride(resultDirections, weightDoubles));
  const statsBuf = new SharedArrayBuffer(8 * STATS_STRIDE * W);
  const grid = gridMessage(i.grid);
  const messages: PlanMessage[] = ranges.map((r, w) => ({
    type: 'plan',
    epoch: i.epoch,
    workerIndex: w,
    staged: true,
    ctrl: ctrlBuf,
    meta: metaBuf,
    ring: ringBuf,
    results: resultsBuf,
    stats: statsBuf,
    slots: RING_SLOTS,
    slotDoubles,
    binOffsetDoubles: 2 * M * (i.band.startBin + r.start),
    resultDirections,
    weightDoubles,
    positions: i.positions,
    freqsHz: Array.from({ length: r.count }, (_, k) => ((i.band.startBin + r.start + k) * i.sampleRateHz) / i.fftSize),
    grid,
    speedOfSoundMps: i.speedOfSoundMps,
    snapshotScale: 2 / i.fftSize,
    active: [...i.active],
    fast: i.fast,
    beams: i.beams,
  }));
  const plan: Plan = {
    epoch: i.epoch,
    grid: i.grid,
    baseGrid: i.baseGrid,
    bins: i.band.count,
    startBin: i.band.startBin,
    ranges,
    ctrl: new Int32Array(ctrlBuf),
    meta: new Float64Array(metaBuf),
    ring: new Float64Array(ringBuf),
    results: new Float64Array(resultsBuf),
    stats: new Float64Array(statsBuf),
    slotDoubles,
    resultDirections,
    weightDoubles,
    finder: i.finder,
    writeSeq: 0,
  };
  return { plan, messages };
}

/** The grid spec with every step k times coarser (load shedding). */
export function coarserGrid(spec: ProcessingParams['grid'], k: number): ProcessingParams['grid'] {
  if (k === 1) return spec;
  const c = (r: { startDeg: number; stopDeg: number; stepDeg: number }) => ({ startDeg: r.startDeg, stopDeg: r.stopDeg, stepDeg: r.stepDeg * k });
  return spec.elevationDeg ? { azimuthDeg: c(spec.azimuthDeg), elevationDeg: c(spec.elevationDeg) } : { azimuthDeg: c(spec.azimuthDeg) };
}

/** The peak finder of a grid (azimuth step `fallbackAzStepDeg` when the grid has one azimuth). */
export function peakFinderFor(grid: DirectionGrid, fallbackAzStepDeg: number, o: { peakThresholdDb?: number; maxPeaks?: number }): PeakFinder {
  const azStep = grid.nAz > 1 ? grid.azimuthDeg[1] - grid.azimuthDeg[0] : fallbackAzStepDeg;
  const elStep = grid.nEl > 1 ? grid.elevationDeg[grid.nAz] - grid.elevationDeg[0] : 0;
  return new PeakFinder({
    nAz: grid.nAz,
    nEl: grid.nEl,
    azimuthStepDeg: azStep,
    elevationStepDeg: elStep,
    azimuthStartDeg: grid.azimuthDeg[0],
    elevationStartDeg: grid.elevationDeg[0],
    circularAzimuth: grid.nAz >= 3 && Math.abs(grid.nAz * azStep - 360) < 1e-9,
    thresholdDb: o.peakThresholdDb ?? 3,
    maxPeaks: o.maxPeaks ?? 8,
  });
}
