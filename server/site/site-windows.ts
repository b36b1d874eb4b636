/**
 * Windows of the site service on UTC: window k holds the bearings whose (offset-corrected) UTC lies
 * in [k·w, (k+1)·w). A window closes once the site clock has passed its end by `graceS` (late
 * messages still count until then); a bearing for a window already closed is late: dropped and
 * counted. A bearing more than `maxAheadS` ahead of the site clock is a broken clock: dropped and
 * counted.
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
  readonly #maxAheadMs: number;
  readonly #maxOpen: number;
  readonly #maxBearings: number;
  readonly #open = new Map<number, OpenWindow>();
  /** Highest window index closed so far (−∞ before the first). */
  #lastClosed = -Infinity;
  readonly counters: WindowCounters = { late: 0, ahead: 0, full: 0, tooManyOpen: 0, closed: 0 };

  constructor(opts: { windowS: number; graceS?: number; maxAheadS?: number; maxOpenWindows?: number; maxBearingsPerWindow?: number }) {
    if (!(opts.windowS > 0)) throw new RangeError('windowS must be > 0');
    this.windowMs = opts.windowS * 1000;
    this.#graceMs = (opts.graceS ?? 0.3) * 1000;
    this.#maxAheadMs = (opts.maxAheadS ?? 2) * 1000;
    this.#maxOpen = opts.maxOpenWindows ?? 8;
    this.#maxBearings = opts.maxBearingsPerWindow ?? 16384;
  }

  /** The window index of a UTC time, ms. */
  indexOf(utcMs: number): number {
    return Math.floor(utcMs / this.windowMs);
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
    const lastDue = Math.floor((nowMs - this.#graceMs) / this.windowMs) - 1;
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
