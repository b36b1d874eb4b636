/**
 * What the server refuses before a request reaches a route or an upgrade reaches its socket, in
 * this order, and the counts status shows (`access`):
 *   1. a foreign `Host` (403 ERR_HTTP_HOST_REFUSED), every request and upgrade;
 *   2. a foreign `Origin` (403 ERR_HTTP_ORIGIN_REFUSED), mutating requests and every upgrade;
 *   3. a mutating request that is not `content-type: application/json` (415), so no page can send
 *      one as a form or plain text without the browser asking first;
 *   4. a missing or wrong token where one is needed (401), limited per client IP: beyond
 *      `burst` failures, refilled at `perS`, further failures are answered 429
 *      ERR_HTTP_AUTH_LIMITED. A request with the right token is never held back by failures (its
 *      own or anyone's), so unauthorised clients cannot starve the operator;
 *   5. authorised changes beyond the control rate per client IP (429 ERR_HTTP_RATE_LIMITED).
 * Failed authentications on upgrades share the HTTP limiter (upgrade-auth.ts).
 */
import { tokenBuckets } from './token-buckets.ts';

export const ACCESS_REFUSALS = ['host', 'origin', 'contentType', 'unauthorized', 'authLimited', 'rateLimited'] as const;
export type AccessRefusal = (typeof ACCESS_REFUSALS)[number];

export interface AccessStats {
  /** Refusals by reason, HTTP requests and upgrades together. */
  refused: Record<AccessRefusal, number>;
  /** The latest refusal: reason, method and path (no query), client address, when (ISO). */
  last: { reason: AccessRefusal; method: string; path: string; remote: string; at: string } | null;
}

export function createAccessStats(): AccessStats {
  return { refused: { host: 0, origin: 0, contentType: 0, unauthorized: 0, authLimited: 0, rateLimited: 0 }, last: null };
}

/** Count one refusal. */
export function noteRefusal(stats: AccessStats, reason: AccessRefusal, method: string, url: string | undefined, remote: string | undefined): void {
  stats.refused[reason]++;
  stats.last = { reason, method, path: (url ?? '').split('?')[0].slice(0, 200), remote: remote ?? '', at: new Date().toISOString() };
}

export const DEFAULT_AUTH_FAILURE_LIMIT = { perS: 1, burst: 20 } as const;

/** Failed authentications per client IP (see the module comment, step 4). */
export class AuthFailureLimiter {
  readonly perS: number;
  readonly burst: number;
  readonly #buckets: ReturnType<typeof tokenBuckets>;

  constructor(opts: { perS: number; burst: number; now?: () => number } = DEFAULT_AUTH_FAILURE_LIMIT) {
    if (!(opts.perS > 0 && Number.isFinite(opts.perS)) || !(Number.isInteger(opts.burst) && opts.burst >= 1)) throw new RangeError('auth failure limit needs perS > 0 and an integer burst ≥ 1');
    this.perS = opts.perS;
    this.burst = opts.burst;
    this.#buckets = tokenBuckets(opts.perS, opts.burst, opts.now ?? (() => performance.now()));
  }

  /** One failed authentication from `ip`: 0 = answer 401; else limited, the seconds to wait (≥ 1). */
  fail(ip: string): number {
    const waitS = this.#buckets.take(ip);
    return waitS === 0 ? 0 : Math.max(1, Math.ceil(waitS));
  }
}
