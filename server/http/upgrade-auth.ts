/**
 * The checks on WebSocket upgrades, which reach the HTTP server's 'upgrade' event and never pass
 * through fastify's hooks (app.ts checks REST calls). In the order of access.ts:
 *
 * 1. Host: a foreign name is refused 403 ERR_HTTP_HOST_REFUSED (DNS rebinding).
 * 2. Origin: every upgrade; a browser page of another origin is refused 403 ERR_HTTP_ORIGIN_REFUSED
 *    (a WebSocket is not subject to the same-origin policy, so without this any site the operator
 *    opens could send frames or listen to beam audio).
 * 3. The token, when one is configured, by what the path needs:
 *    - `control` paths (frame ingest): always. Sending frames changes what is processed and recorded.
 *    - `listen` paths (beam audio): always. Steered audio can carry speech; hearing it is more than
 *      reading a status.
 *    - `read` paths (the dashboard's live rows): open while `access.openStatus` is true, like
 *      GET /api/status; the token otherwise.
 *    Taken from `Authorization: Bearer <token>` or, for browsers, which cannot set headers on a
 *    WebSocket, from the query `?token=<token>`. A wrong or missing one is 401 with
 *    `WWW-Authenticate`; failures count against the client's limit shared with REST, beyond which
 *    they are 429 ERR_HTTP_AUTH_LIMITED with Retry-After.
 * A refused upgrade gets its status and the catalogue's JSON body; no socket is opened. Refusals
 * are counted per path (status `upgradesRefused`) and by reason (status `access`).
 */
import { createHash, timingSafeEqual } from 'node:crypto';
import type { IncomingMessage } from 'node:http';
import type { Duplex } from 'node:stream';
import { AuthFailureLimiter, noteRefusal, type AccessRefusal, type AccessStats } from './access.ts';
import { HttpError, type HttpErrorCode } from './errors.ts';
import { shown, type OriginPolicy } from './origin-policy.ts';

export type UpgradeClass = 'control' | 'listen' | 'read';

export interface UpgradeAuthOptions {
  token: string | null;
  openStatus: boolean;
  /** Path (no query) → what it needs; paths not listed are left to the handlers (and their 404). */
  paths: Record<string, UpgradeClass>;
  /** Host and Origin checks (absent: none). */
  originPolicy?: OriginPolicy;
  /** Failed authentications per client IP, shared with the REST routes. */
  authFailures?: AuthFailureLimiter;
  accessStats?: AccessStats;
}

export interface UpgradeAuth {
  /** true: let the upgrade through; false: it has been answered and the socket ended. */
  check(req: IncomingMessage, socket: Duplex): boolean;
  /** Refused upgrades so far, by path. */
  refused(): Record<string, number>;
}

const digest = (s: string): Buffer => createHash('sha256').update(s).digest();

/** The token a request carries: the bearer header first, then `?token=`; null when neither. */
export function upgradeToken(req: IncomingMessage): string | null {
  const m = /^Bearer[ ]+(\S+)\s*$/i.exec(req.headers.authorization ?? '');
  if (m) return m[1];
  const q = (req.url ?? '').indexOf('?');
  if (q < 0) return null;
  const t = new URLSearchParams((req.url ?? '').slice(q + 1)).get('token');
  return t && t.length > 0 ? t : null;
}

const REASONS: Record<number, string> = { 401: 'Unauthorized', 403: 'Forbidden', 429: 'Too Many Requests' };

/** Answer a refused upgrade on the raw socket: the status, extra headers, the catalogue's JSON body. */
function answer(socket: Duplex, e: HttpError, headers: string[] = []): void {
  const body = JSON.stringify(e.toJSON());
  const head = [`HTTP/1.1 ${e.statusCode} ${REASONS[e.statusCode] ?? 'Refused'}`, ...headers, 'Content-Type: application/json; charset=utf-8', 'Connection: close', `Content-Length: ${Buffer.byteLength(body)}`];
  socket.end(`${head.join('\r\n')}\r\n\r\n${body}`);
}

export function createUpgradeAuth(opts: UpgradeAuthOptions): UpgradeAuth {
  const counts: Record<string, number> = {};
  const want = opts.token === null ? null : digest(opts.token);
  const failures = opts.authFailures ?? new AuthFailureLimiter();
  const refuse = (req: IncomingMessage, socket: Duplex, path: string, reason: AccessRefusal, code: HttpErrorCode, params: Record<string, string | number>, headers: string[] = []) => {
    // Only paths the server serves are counted per path, so junk paths cannot grow the table.
    if (path in opts.paths) counts[path] = (counts[path] ?? 0) + 1;
    if (opts.accessStats) noteRefusal(opts.accessStats, reason, 'GET', path, req.socket.remoteAddress);
    answer(socket, new HttpError(code, params), headers);
    return false;
  };
  return {
    check(req, socket) {
      const path = (req.url ?? '').split('?')[0];
      const policy = opts.originPolicy;
      if (policy) {
        const host = req.headers.host;
        if (!policy.hostAllowed(host)) return refuse(req, socket, path, 'host', 'ERR_HTTP_HOST_REFUSED', { host: shown(host) });
        const origin = req.headers.origin;
        if (!policy.originAllowed(origin, host)) return refuse(req, socket, path, 'origin', 'ERR_HTTP_ORIGIN_REFUSED', { origin: shown(origin) });
      }
      if (want === null) return true;
      const cls = opts.paths[path];
      if (cls === undefined || (cls === 'read' && opts.openStatus)) return true;
      const got = upgradeToken(req);
      // Both sides hashed: equal lengths, compared in constant time.
      if (got !== null && timingSafeEqual(digest(got), want)) return true;
      const retryS = failures.fail(req.socket.remoteAddress ?? '');
      if (retryS > 0) return refuse(req, socket, path, 'authLimited', 'ERR_HTTP_AUTH_LIMITED', { burst: failures.burst, perS: failures.perS, retryS }, [`Retry-After: ${retryS}`]);
      return refuse(req, socket, path, 'unauthorized', 'ERR_HTTP_UNAUTHORIZED', { method: 'GET', url: path }, ['WWW-Authenticate: Bearer realm="nullsteer"']);
    },
    refused: () => ({ ...counts }),
  };
}
