/** Where the workers of a plan are (their done counters) and the percentiles the engine reports. */
import type { Plan } from './plan-layout.ts';
import { CTRL_DONE, STATS_STRIDE, STAT_NON_FINITE, STAT_RESTARTS, STAT_SINGULAR } from './protocol.ts';

/** Which worker of a plan has done the fewest hops. */
export function slowestWorker(p: { ranges: unknown[]; ctrl: Int32Array }): number {
  let done = Infinity;
  let worker = 0;
  for (let w = 0; w < p.ranges.length; w++) {
    const d = Atomics.load(p.ctrl, CTRL_DONE + w);
    if (d < done) [done, worker] = [d, w];
  }
  return worker;
}

/** Hops done by the slowest worker of a plan (every slot before it is free to overwrite). */
export function slowestDone(p: { ranges: unknown[]; ctrl: Int32Array }): number {
  // The minimum of one pass: each counter only grows, so this never overstates the free slots.
  let done = Infinity;
  for (let w = 0; w < p.ranges.length; w++) done = Math.min(done, Atomics.load(p.ctrl, CTRL_DONE + w));
  return done;
}

export function percentiles(x: Float64Array, n: number): { p50: number; p99: number; count: number } {
  if (n === 0) return { p50: NaN, p99: NaN, count: 0 };
  const a = Array.from(x.subarray(0, n)).sort((p, q) => p - q);
  return { p50: a[Math.floor(0.5 * (n - 1))], p99: a[Math.floor(0.99 * (n - 1))], count: n };
}

/** Each worker's (local thread or remote part) figures in a plan, and the flagged bins over all. */
export function workerFigures(p: Plan) {
  const workers = p.ranges.map((r, w) => ({
    bins: r.count,
    firstBin: p.startBin + r.start,
    hops: p.stats[w * STATS_STRIDE + 1],
    scans: p.stats[w * STATS_STRIDE + 2],
    busyMs: p.stats[w * STATS_STRIDE],
    lastScanMs: p.stats[w * STATS_STRIDE + 3],
  }));
  const total = (k: number) => p.ranges.reduce((n, _r, w) => n + p.stats[w * STATS_STRIDE + k], 0);
  return { workers, sum: { singular: total(STAT_SINGULAR), nonFinite: total(STAT_NON_FINITE), covarianceRestarts: total(STAT_RESTARTS) } };
}
