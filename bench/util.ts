/** Small timing helpers for the benchmark scripts: medians of repeated runs, CPU time, RSS. */

export interface Timing {
  medianS: number;
  minS: number;
  runs: number;
}

/** Run `fn` `runs` times after one warm-up and return the median and minimum wall time. */
export function time(fn: () => void, runs = 5): Timing {
  fn();
  const t: number[] = [];
  for (let i = 0; i < runs; i++) {
    const a = performance.now();
    fn();
    t.push((performance.now() - a) / 1000);
  }
  t.sort((x, y) => x - y);
  return { medianS: t[Math.floor(t.length / 2)], minS: t[0], runs };
}

/** CPU seconds (user + system) spent by this process while `fn` runs. */
export function cpuSeconds(fn: () => void): number {
  const a = process.cpuUsage();
  fn();
  const d = process.cpuUsage(a);
  return (d.user + d.system) / 1e6;
}

export function peakRssMiB(): number {
  return process.resourceUsage().maxRSS / 1024;
}
