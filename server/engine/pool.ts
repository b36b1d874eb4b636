/**
 * The bin-worker pool: splits the band's bins into contiguous ranges, one per worker, sends each
 * its plan, and replaces a worker that reports a fatal error or exits unasked (its bins restart
 * from an empty covariance, which the bias-corrected start makes usable after a few hops).
 * The pool itself never throws from a worker's failure: it counts and reports.
 */
import { Worker } from 'node:worker_threads';
import { publicText } from '../public-text.ts';
import { PlanError } from './plan-error.ts';
import { CTRL_DONE, CTRL_WRITE, type FromWorker, type PlanMessage, type ToWorker } from './protocol.ts';

const BOOT = new URL('./bin-worker-boot.mjs', import.meta.url);

export interface WorkerRange {
  start: number;
  count: number;
}

/** Split `bins` into `workers` contiguous ranges as equal as possible (MVDR costs the same per bin). */
export function splitBins(bins: number, workers: number): WorkerRange[] {
  const w = Math.max(1, Math.min(workers, bins));
  const out: WorkerRange[] = [];
  let start = 0;
  for (let i = 0; i < w; i++) {
    const count = Math.floor(bins / w) + (i < bins % w ? 1 : 0);
    out.push({ start, count });
    start += count;
  }
  return out;
}

/**
 * Split `bins` into contiguous ranges in proportion to `weights` (largest remainder), each part at
 * most `caps[i]` bins and at least one while bins last; parts beyond the bins get none (count 0).
 * Used when remote workers of other speeds share the band with the local threads.
 */
export function splitBinsWeighted(bins: number, weights: readonly number[], caps?: readonly number[]): WorkerRange[] {
  const n = weights.length;
  const cap = (i: number) => Math.max(0, Math.floor(caps?.[i] ?? Infinity));
  const w = weights.map((x, i) => (Number.isFinite(x) && x > 0 && cap(i) > 0 ? x : 0));
  const counts = new Array<number>(n).fill(0);
  let left = bins;
  // One bin each first (in order), so that every usable part works while bins last.
  for (let i = 0; i < n && left > 0; i++) if (w[i] > 0) (counts[i] = 1), left--;
  // Then the rest in proportion. Parts whose share would pass their cap are filled to it and the
  // others share what is left; then whole bins, and the last few by largest remainder (ties: first).
  const fixed = w.map((x, i) => x === 0 || counts[i] >= cap(i));
  while (left > 0) {
    const total = w.reduce((a, x, i) => a + (fixed[i] ? 0 : x), 0);
    if (total === 0) break;
    let capped = false;
    for (let i = 0; i < n; i++) {
      if (fixed[i] || counts[i] + (left * w[i]) / total <= cap(i)) continue;
      left -= cap(i) - counts[i];
      counts[i] = cap(i);
      fixed[i] = true;
      capped = true;
    }
    if (capped) continue;
    const share = w.map((x, i) => (fixed[i] ? 0 : (left * x) / total));
    let given = 0;
    for (let i = 0; i < n; i++) (counts[i] += Math.floor(share[i])), (given += Math.floor(share[i]));
    const order = share.map((x, i) => [x - Math.floor(x), i] as const).filter(([, i]) => !fixed[i]).sort((a, b) => b[0] - a[0] || a[1] - b[1]);
    for (let k = 0; k < left - given; k++) counts[order[k % order.length][1]]++;
    left = 0;
  }
  const out: WorkerRange[] = [];
  let start = 0;
  for (const count of counts) {
    out.push({ start, count });
    start += count;
  }
  return out;
}

export interface PoolEvents {
  onScanned(m: Extract<FromWorker, { type: 'scanned' }>): void;
  onError(workerIndex: number, message: string, replaced: boolean): void;
}

export class BinPool {
  readonly size: number;
  #workers: (Worker | null)[];
  #plans: PlanMessage[] = [];
  #events: PoolEvents;
  #closing = false;
  restarts = 0;
  errors = 0;
  lastError: string | null = null;
  /** A plan being built (prepare) and not yet committed. */
  #staged: { epoch: number; plans: PlanMessage[]; ready: Set<number>; settle: (e: PlanError | null) => void } | null = null;

  constructor(size: number, events: PoolEvents) {
    this.size = size;
    this.#events = events;
    this.#workers = Array.from({ length: size }, (_, i) => this.#spawn(i));
  }

  #spawn(i: number): Worker {
    const w = new Worker(BOOT);
    w.on('message', (m: FromWorker) => this.#message(i, w, m));
    w.on('error', (e) => this.#failed(i, w, publicText(e)));
    w.on('exit', (code) => {
      if (!this.#closing && this.#workers[i] === w) this.#failed(i, w, `worker exited with code ${code}`);
    });
    return w;
  }

  #message(i: number, w: Worker, m: FromWorker): void {
    if (this.#workers[i] !== w) return;
    switch (m.type) {
      case 'ready': {
        const st = this.#staged;
        if (st && m.epoch === st.epoch) {
          st.ready.add(i);
          if (st.ready.size === this.size) st.settle(null);
        }
        return;
      }
      case 'refused':
        if (this.#staged && m.epoch === this.#staged.epoch) this.#staged.settle(new PlanError('refused', `the bin workers could not build the plan: ${m.message}`));
        return;
      case 'scanned':
        this.#events.onScanned(m);
        return;
      case 'error':
        if (m.fatal) this.#failed(i, w, m.message);
        else {
          this.errors++;
          this.lastError = publicText(m.message);
          this.#events.onError(i, m.message, false);
        }
        return;
    }
  }

  #failed(i: number, w: Worker, message: string): void {
    if (this.#workers[i] !== w || this.#closing) return;
    this.errors++;
    this.lastError = publicText(message);
    this.#workers[i] = null;
    void w.terminate();
    const plan = this.#plans[i];
    const fresh = this.#spawn(i);
    this.#workers[i] = fresh;
    this.restarts++;
    // A plan being built cannot complete without this worker's part.
    this.#staged?.settle(new PlanError('refused', `bin worker ${i} failed while building the plan: ${message.split('\n')[0]}`));
    if (plan) {
      // Start after everything already published: the replacement never sees a half-written slot.
      const ctrl = new Int32Array(plan.ctrl);
      Atomics.store(ctrl, CTRL_DONE + i, Atomics.load(ctrl, CTRL_WRITE));
      fresh.postMessage(plan);
    }
    this.#events.onError(i, message, true);
  }

  /**
   * Send every worker its part of a new plan to build, while the plan in force keeps running.
   * Resolves when all have built it (then `commit` switches them); rejects with a PlanError when
   * one refuses it or fails, or when they have not all answered within `timeoutMs`, after telling
   * every worker to drop it.
   */
  prepare(plans: PlanMessage[], timeoutMs: number): Promise<void> {
    if (plans.length !== this.size) return Promise.reject(new RangeError(`${plans.length} plans for ${this.size} workers`));
    this.#staged?.settle(new PlanError('refused', 'a newer plan replaced this one'));
    const epoch = plans[0].epoch;
    return new Promise<void>((resolve, reject) => {
      const timer = setTimeout(() => staged.settle(new PlanError('timeout', `the bin workers did not build the plan within ${(timeoutMs / 1000).toFixed(1)} s`)), timeoutMs);
      const staged = {
        epoch,
        plans,
        ready: new Set<number>(),
        settle: (e: PlanError | null) => {
          if (this.#staged !== staged) return;
          clearTimeout(timer);
          if (e === null) return resolve();
          this.#staged = null;
          this.broadcast({ type: 'abort', epoch });
          reject(e);
        },
      };
      this.#staged = staged;
      plans.forEach((p, i) => this.#workers[i]?.postMessage({ ...p, staged: true }));
    });
  }

  /** Switch every worker to the plan `prepare` built (it becomes what a replacement worker gets). */
  commit(epoch: number): void {
    const st = this.#staged;
    if (!st || st.epoch !== epoch) throw new RangeError(`no prepared plan of epoch ${epoch} to commit`);
    this.#staged = null;
    this.#plans = st.plans.map((p) => ({ ...p, staged: false }));
    this.broadcast({ type: 'commit', epoch });
  }

  /** Test hook: worker i refuses its next plan with `message`, or never answers it ('stall'). */
  faultNextPlan(i: number, mode: 'refuse' | 'stall', message: string): void {
    this.send(i, { type: 'plan-fault', mode, message });
  }

  /** Update the stored plan (mask, grid) so a replacement worker starts with the current state. */
  updatePlans(f: (p: PlanMessage) => void): void {
    this.#plans.forEach(f);
  }

  /** Test hook: end worker i's thread from outside, as a crash would (the exit handler replaces it). */
  kill(i: number): void {
    void this.#workers[i]?.terminate();
  }

  send(i: number, m: ToWorker): void {
    this.#workers[i]?.postMessage(m);
  }

  broadcast(m: ToWorker): void {
    for (const w of this.#workers) w?.postMessage(m);
  }

  async close(): Promise<void> {
    this.#closing = true;
    this.#staged?.settle(new PlanError('refused', 'the engine is closing'));
    await Promise.all(this.#workers.map((w) => w?.terminate()));
  }
}
