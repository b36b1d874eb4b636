/**
 * Token buckets keyed by client (IP): the control-rate limit on changes and the limit on failed
 * authentications (app.ts, upgrade-auth.ts). Bounded: at most MAX_BUCKETS keys are kept; beyond
 * it, refilled buckets are dropped first, then the oldest (a dropped key starts again full, which
 * errs towards the client, never towards growing memory).
 */

/** Buckets kept at most. */
export const MAX_BUCKETS = 4096;

/** A token bucket per key (client IP). `take` answers 0 when allowed, else the seconds to wait. */
export function tokenBuckets(perS: number, burst: number, now: () => number) {
  const buckets = new Map<string, { tokens: number; t: number }>();
  const refill = (b: { tokens: number; t: number }, t: number) => {
    b.tokens = Math.min(burst, b.tokens + ((t - b.t) / 1000) * perS);
    b.t = t;
  };
  return {
    get size() {
      return buckets.size;
    },
    take(key: string): number {
      const t = now();
      let b = buckets.get(key);
      if (!b) {
        if (buckets.size >= MAX_BUCKETS) {
          for (const [k, v] of buckets) {
            refill(v, t);
            if (v.tokens >= burst) buckets.delete(k);
          }
          for (const k of buckets.keys()) {
            if (buckets.size < MAX_BUCKETS / 2) break;
            buckets.delete(k);
          }
        }
        b = { tokens: burst, t };
        buckets.set(key, b);
      } else refill(b, t);
      if (b.tokens >= 1) {
        b.tokens -= 1;
        return 0;
      }
      return (1 - b.tokens) / perS;
    },
  };
}

