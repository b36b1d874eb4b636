/**
 * Load shedding when processing falls behind (../shared/DESIGN.md §4), in this order:
 *   step 1–2  spectrum rate halved, then quartered
 *   step 3    direction grid twice as coarse (azimuth and elevation steps doubled)
 *   step 4–5  covariance updates on every 2nd, then every 4th hop
 * Ingest and recording never wait for processing: shedding only thins what the workers compute.
 *
 * Policy: the load is the busiest worker's busy time over wall time in the last window, or the ring
 * backlog as a fraction of the ring, whichever is higher. Two consecutive windows above `highLoad`
 * raise the step by one; `recoverWindows` consecutive windows below `lowLoad` lower it by one.
 */

export const MAX_SHED_STEP = 5;

export interface ShedPolicy {
  windowMs: number;
  highLoad: number;
  lowLoad: number;
  recoverWindows: number;
}

export const DEFAULT_SHED_POLICY: ShedPolicy = { windowMs: 500, highLoad: 0.85, lowLoad: 0.5, recoverWindows: 6 };

export interface ShedEffect {
  rateDivisor: number;
  gridCoarsening: number;
  covarianceDecimation: number;
}

export function shedEffect(step: number): ShedEffect {
  return {
    rateDivisor: step >= 2 ? 4 : step >= 1 ? 2 : 1,
    gridCoarsening: step >= 3 ? 2 : 1,
    covarianceDecimation: step >= 5 ? 4 : step >= 4 ? 2 : 1,
  };
}

/** One change of step, for status: when (stream sample and wall clock), to what, and the load that caused it. */
export interface ShedChange {
  step: number;
  from: number;
  load: number;
  sampleIndex: number;
  at: string;
}

/** How many changes the history keeps (most recent last). */
export const SHED_HISTORY = 32;

export class LoadShedder {
  step = 0;
  load = 0;
  #above = 0;
  #below = 0;
  readonly policy: ShedPolicy;
  /** Changes of step so far (for status). */
  changes = 0;
  /** The last SHED_HISTORY changes. */
  readonly history: ShedChange[] = [];
  readonly #sampleNow: () => number;

  /** `sampleNow` gives the stream position recorded with each change (default: -1, unknown). */
  constructor(policy: ShedPolicy = DEFAULT_SHED_POLICY, sampleNow: () => number = () => -1) {
    this.policy = policy;
    this.#sampleNow = sampleNow;
  }

  #record(from: number): void {
    this.changes++;
    this.history.push({ step: this.step, from, load: this.load, sampleIndex: this.#sampleNow(), at: new Date().toISOString() });
    if (this.history.length > SHED_HISTORY) this.history.shift();
  }

  /** Feed one window's load (0…1+); returns true when the step changed. */
  update(load: number): boolean {
    this.load = load;
    const p = this.policy;
    if (load > p.highLoad) {
      this.#below = 0;
      if (++this.#above >= 2 && this.step < MAX_SHED_STEP) {
        this.step++;
        this.#above = 0;
        this.#record(this.step - 1);
        return true;
      }
    } else if (load < p.lowLoad) {
      this.#above = 0;
      if (++this.#below >= p.recoverWindows && this.step > 0) {
        this.step--;
        this.#below = 0;
        this.#record(this.step + 1);
        return true;
      }
    } else {
      this.#above = 0;
      this.#below = 0;
    }
    return false;
  }
}
