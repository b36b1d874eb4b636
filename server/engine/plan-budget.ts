/**
 * What a processing plan costs in memory, worked out before anything is built, and the budget the
 * plans of one process share (the main chain and the comparison chain).
 *
 * Per worker (bin-processor.ts) the plan holds the steering table of its bins, B_w·D·M complex
 * float64 values (16 bytes each); with the fast kernels, one planar copy of it per kernel (the
 * WebAssembly MVDR scan and the tracked conventional spectrum), so three tables in all; and two
 * per-bin spectra, B_w·D float64 each. Shared by the workers: the snapshot ring (RING_SLOTS + 1
 * slots of 2·M·(N/2 + 1) float64) and the results (W × RESULT_SLOTS × resultStride float64).
 *
 * A change whose plan does not fit is refused before it is built (PlanError 'too-large'); a worker
 * that cannot build its part anyway refuses it ('refused'), and one that does not answer in time
 * makes it fail too ('timeout'). Either way the plan in force keeps running.
 */
import { MAX_STEERING_TABLE_BYTES } from '../dsp/steering.ts';
import { bandBinsOf } from '../dsp/stft.ts';
import { splitBins } from './pool.ts';
import { PlanError } from './plan-error.ts';
import { RESULT_SLOTS, resultStride } from './protocol.ts';

export { PlanError };

/** Ring slots for snapshots (one more takes the hops that are skipped). */
export const RING_SLOTS = 64;
const MIB = 2 ** 20;

export interface PlanShape {
  channels: number;
  fftSize: number;
  bandHz: readonly [number, number];
  sampleRateHz: number;
  /** Directions of the grid as planned (before any shedding coarsens it). */
  directions: number;
  /** Worker threads of the pool. */
  workers: number;
  /** Fast kernels (three steering tables per worker) or the plain ones (one). */
  fast: boolean;
}

export interface PlanCost {
  bins: number;
  /** Workers that get bins (at most one per bin). */
  workers: number;
  /** Steering tables of all workers, with the fast kernels' copies, bytes. */
  steeringBytes: number;
  /** The largest one worker's plain steering table, bytes (the worker's own cap applies to it). */
  largestTableBytes: number;
  ringBytes: number;
  resultsBytes: number;
  /** Everything above plus the per-bin spectra. */
  totalBytes: number;
}

/** The memory a plan of this shape takes, bytes (see the module comment). */
export function planCost(s: PlanShape): PlanCost {
  const band = bandBinsOf(s.fftSize, s.bandHz[0], s.bandHz[1], s.sampleRateHz);
  const ranges = splitBins(Math.max(1, band.count), s.workers);
  const M = s.channels;
  const D = s.directions;
  const tables = s.fast ? 3 : 1;
  let steeringBytes = 0;
  let spectraBytes = 0;
  let largest = 0;
  let mostBins = 0;
  for (const r of ranges) {
    const table = r.count * D * M * 16;
    steeringBytes += tables * table;
    spectraBytes += 2 * r.count * D * 8;
    largest = Math.max(largest, table);
    mostBins = Math.max(mostBins, r.count);
  }
  const ringBytes = 8 * 2 * M * (s.fftSize / 2 + 1) * (RING_SLOTS + 1);
  const resultsBytes = 8 * ranges.length * RESULT_SLOTS * resultStride(D, mostBins * 2 * M);
  return { bins: band.count, workers: ranges.length, steeringBytes, largestTableBytes: largest, ringBytes, resultsBytes, totalBytes: steeringBytes + spectraBytes + ringBytes + resultsBytes };
}

const mib = (bytes: number): string => (bytes / MIB).toFixed(0);

/** A plan some owner (an engine) wants, with its shape and cost. */
export interface PlanDemand {
  owner: object;
  shape: PlanShape;
  cost: PlanCost;
}

/**
 * The plan memory of one process, shared by its engines. `check` refuses a plan that would take the
 * total over the limit (the owner's current plan does not count: a re-plan replaces it); `hold`
 * records what an owner's plan in force takes; `release` forgets it.
 */
export class PlanBudget {
  readonly limitBytes: number;
  /** Name of the setting that holds the limit, for messages. */
  readonly setting: string;
  readonly #held = new Map<object, number>();

  constructor(limitBytes: number, setting = 'engine.maxPlanMiB') {
    if (!(limitBytes > 0)) throw new RangeError(`limitBytes must be > 0, got ${limitBytes}`);
    this.limitBytes = limitBytes;
    this.setting = setting;
  }

  /** Bytes held by the plans in force. */
  get heldBytes(): number {
    let n = 0;
    for (const b of this.#held.values()) n += b;
    return n;
  }

  /**
   * @param fields what the change touched, named in the message (e.g. "grid, fftSize")
   * @throws PlanError 'too-large' naming the need and the limit
   */
  check(owner: object, shape: PlanShape, cost: PlanCost, fields: string): void {
    this.checkAll([{ owner, shape, cost }], fields);
  }

  /**
   * Several plans that replace their owners' plans together (a change of the main chain re-plans
   * the comparison too): they and the plans of every other owner must fit.
   * @throws PlanError 'too-large' naming the need and the limit
   */
  checkAll(plans: PlanDemand[], fields: string): void {
    let others = 0;
    for (const [o, b] of this.#held) if (!plans.some((p) => p.owner === o)) others += b;
    const need = plans.reduce((n, p) => n + p.cost.totalBytes, 0);
    const { shape, cost } = plans[0];
    const what = `${shape.directions} directions × ${cost.bins} bins × ${shape.channels} sensors`;
    const chains = plans.length > 1 ? ` for ${plans.length} chains` : '';
    if (others + need > this.limitBytes) {
      const held = others > 0 ? `, of which ${mib(others)} MiB are held by the other chain` : '';
      throw new PlanError(
        'too-large',
        `${fields}: ${what} need ${mib(need)} MiB of plan memory${chains} (steering tables and their fast-kernel copies, snapshot ring, results) over ${cost.workers} workers; at most ${mib(this.limitBytes)} MiB in all (${this.setting}${held})`,
      );
    }
    for (const p of plans) {
      if (p.cost.largestTableBytes > MAX_STEERING_TABLE_BYTES) {
        throw new PlanError('too-large', `${fields}: ${what} need a steering table of ${mib(p.cost.largestTableBytes)} MiB in one worker; at most ${mib(MAX_STEERING_TABLE_BYTES)} MiB per worker (use more workers, a coarser grid or a narrower band)`);
      }
    }
  }

  hold(owner: object, bytes: number): void {
    this.#held.set(owner, bytes);
  }

  release(owner: object): void {
    this.#held.delete(owner);
  }
}

/** The parameters whose change re-plans, as named in messages: the ones that differ between a and b. */
export function planFields(a: { bandHz: readonly number[]; grid: unknown; fftSize: number } | null, b: { bandHz: readonly number[]; grid: unknown; fftSize: number }): string {
  if (a === null) return 'bandHz, grid, fftSize';
  const f: string[] = [];
  if (JSON.stringify(a.bandHz) !== JSON.stringify(b.bandHz)) f.push('bandHz');
  if (JSON.stringify(a.grid) !== JSON.stringify(b.grid)) f.push('grid');
  if (a.fftSize !== b.fftSize) f.push('fftSize');
  return f.length > 0 ? f.join(', ') : 'bandHz, grid, fftSize';
}
