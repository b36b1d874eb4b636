/**
 * Windows of the site service on UTC: window k holds the bearings whose (offset-corrected) UTC lies
 * in [k·w, (k+1)·w). A window closes once the site clock has passed its end by the grace (late
 * messages still count until then); a bearing for a window already closed is late: dropped and
 * counted. A bearing more than `maxAheadS` ahead of the site clock is a broken clock: dropped and
 * counted.
 *
 * The grace follows the nodes' lag. A message whose bearings refer to UTC u arrives at site time
 * t ≥ u: the node's processing latency, the broker's, and, for an edge that has fallen behind real
 * time (a loaded machine rendering a scene on the UTC sample clock), its backlog. A message of window
 * k is on time when it arrives before (k+1)·w + grace, so the grace in force is the largest lag seen
 * in the last LAG_MEMORY_S seconds plus LAG_MARGIN_MS, at least `graceS` (the floor, 0.3 s) and at
 * most `maxGraceS` (5 s: a node lagging more than that is late rather than holding every window, and
 * the page stays within that of real time). A node that catches up lowers it again within
 * LAG_MEMORY_S.
 *
 * Bounds: `maxOpenWindows` (8) windows open at once (a further one drops its bearings, counted);
 * `maxBearingsPerWindow` (16384: 64 nodes × 16 peaks × 16 messages; about 100 bytes each) bearings
 * per window (beyond it a message's bearings are dropped, counted).
 */
import type { Bearing } from './types.ts';

export interface ClosedWindow {
  /** Window index k: the window starts at k·windowS on UTC. */
  index: number;
  startUtcMs: number;
  bearings: Bearing[];
  /** The latest bearings of each node within the window (the page's rays). */
  latestByNode: Map<string, Bearing[]>;
}

/** Lags are remembered for this long (in one-second buckets), seconds. */
export const LAG_MEMORY_S = 10;
/** Added to the largest recent lag, ms. */
export const LAG_MARGIN_MS = 100;
/** Default floor and ceiling of the grace, seconds. */
export const DEFAULT_GRACE_S = 0.3;
export const DEFAULT_MAX_GRACE_S = 5;

export interface WindowCounters {
  late: number;
  ahead: number;
  full: number;
  tooManyOpen: number;
  closed: number;
}

interface OpenWindow {
  index: number;
  bearings: Bearing[];
  latestByNode: Map<string, { utcMs: number; bearings: Bearing[] }>;
}

export class SiteWindows {
  readonly windowMs: number;
  readonly #graceMs: number;
  readonly #maxGraceMs: number;
  /** Largest lag per second of site time, a ring of LAG_MEMORY_S buckets (second index, ms). */
  readonly #lagSecond = new Float64Array(LAG_MEMORY_S).fill(-Infinity);
  readonly #lagMax = new Float64Array(LAG_MEMORY_S);
  readonly #maxAheadMs: number;
  readonly #maxOpen: number;
  readonly #maxBearings: number;
  readonly #open = new Map<number, OpenWindow>();
  /** Highest window index closed so far (−∞ before the first). */
  #lastClosed = -Infinity;
  readonly counters: WindowCounters = { late: 0, ahead: 0, full: 0, tooManyOpen: 0, closed: 0 };

  constructor(opts: { windowS: number; graceS?: number; maxGraceS?: number; maxAheadS?: number; maxOpenWindows?: number; maxBearingsPerWindow?: number }) {
    if (!(opts.windowS > 0)) throw new RangeError('windowS must be > 0');
    this.windowMs = opts.windowS * 1000;
    this.#graceMs = (opts.graceS ?? DEFAULT_GRACE_S) * 1000;
    this.#maxGraceMs = Math.max(this.#graceMs, (opts.maxGraceS ?? DEFAULT_MAX_GRACE_S) * 1000);
    this.#maxAheadMs = (opts.maxAheadS ?? 2) * 1000;
    this.#maxOpen = opts.maxOpenWindows ?? 8;
    this.#maxBearings = opts.maxBearingsPerWindow ?? 16384;
  }

  /** The window index of a UTC time, ms. */
  indexOf(utcMs: number): number {
    return Math.floor(utcMs / this.windowMs);
  }

  /** The grace in force at site time nowMs, ms (see the file's comment). */
  graceMs(nowMs: number): number {
    const sec = Math.floor(nowMs / 1000);
    let lag = -Infinity;
    for (let i = 0; i < LAG_MEMORY_S; i++) if (this.#lagSecond[i] > sec - LAG_MEMORY_S && this.#lagMax[i] > lag) lag = this.#lagMax[i];
    return Math.min(this.#maxGraceMs, Math.max(this.#graceMs, lag + LAG_MARGIN_MS));
  }

  #noteLag(lagMs: number, nowMs: number): void {
    if (!(lagMs > 0)) return;
    const sec = Math.floor(nowMs / 1000);
    const i = ((sec % LAG_MEMORY_S) + LAG_MEMORY_S) % LAG_MEMORY_S;
    if (this.#lagSecond[i] !== sec) {
      this.#lagSecond[i] = sec;
      this.#lagMax[i] = lagMs;
    } else if (lagMs > this.#lagMax[i]) this.#lagMax[i] = lagMs;
  }

  get lastClosedIndex(): number | null {
    return this.#lastClosed === -Infinity ? null : this.#lastClosed;
  }

  /**
   * Add one message's bearings (all of one node, with one corrected UTC `utcMs`); `nowMs` is the site
   * clock. Returns the window index they went to, or a reason they were dropped.
   */
  add(node: string, utcMs: number, bearings: Bearing[], nowMs: number): number | 'late' | 'ahead' | 'full' | 'tooManyOpen' {
    const k = this.indexOf(utcMs);
    // Every message counts towards the grace, a late one too: the next windows wait for its node.
    this.#noteLag(nowMs - utcMs, nowMs);
    if (k <= this.#lastClosed) {
      this.counters.late++;
      return 'late';
    }
    if (utcMs > nowMs + this.#maxAheadMs) {
      this.counters.ahead++;
      return 'ahead';
    }
    let w = this.#open.get(k);
    if (!w) {
      if (this.#open.size >= this.#maxOpen) {
        this.counters.tooManyOpen++;
        return 'tooManyOpen';
      }
      w = { index: k, bearings: [], latestByNode: new Map() };
      this.#open.set(k, w);
    }
    if (w.bearings.length + bearings.length > this.#maxBearings) {
      this.counters.full++;
      return 'full';
    }
    for (const b of bearings) w.bearings.push(b);
    const prev = w.latestByNode.get(node);
    if (!prev || utcMs >= prev.utcMs) w.latestByNode.set(node, { utcMs, bearings });
    return k;
  }

  /**
   * Close every window whose end + grace is at or before `nowMs`, oldest first. Also closes (empty)
   * the windows between, so the index sequence has no holes while the clock runs: a window with no
   * bearings is still a window (the tracker ages its tracks).
   */
  closeDue(nowMs: number): ClosedWindow[] {
    const lastDue = Math.floor((nowMs - this.graceMs(nowMs)) / this.windowMs) - 1;
    if (lastDue <= this.#lastClosed) return [];
    // After a long pause (the broker away) do not replay hundreds of empty windows: at most maxOpen.
    const from = Math.max(this.#lastClosed === -Infinity ? lastDue : this.#lastClosed + 1, lastDue - this.#maxOpen + 1);
    const out: ClosedWindow[] = [];
    for (const k of [...this.#open.keys()]) if (k < from) this.#open.delete(k); // beyond the replay bound: dropped
    for (let k = from; k <= lastDue; k++) {
      const w = this.#open.get(k);
      this.#open.delete(k);
      const latestByNode = new Map<string, Bearing[]>();
      if (w) for (const [n, v] of w.latestByNode) latestByNode.set(n, v.bearings);
      out.push({ index: k, startUtcMs: k * this.windowMs, bearings: w ? w.bearings : [], latestByNode });
      this.counters.closed++;
    }
    this.#lastClosed = lastDue;
    return out;
  }
}
