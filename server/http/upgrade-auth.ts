/**
 * The token check for WebSocket upgrades, which reach the HTTP server's 'upgrade' event and never
 * pass through fastify's hooks (app.ts checks REST calls).
 *
 * What each path needs when a token is configured:
 * - `control` paths (frame ingest): always the token. Sending frames changes what is processed and
 *   recorded.
 * - `listen` paths (beam audio): always the token. Steered audio can carry speech; hearing it is
 *   more than reading a status.
 * - `read` paths (the dashboard's live rows): open while `access.openStatus` is true, like
 *   GET /api/status; the token otherwise.
 * Without a token nothing is checked (the server then listens on loopback only; see config).
 *
 * The token is taken from `Authorization: Bearer <token>` or, for browsers, which cannot set
 * headers on a WebSocket, from the query `?token=<token>`. A refused upgrade gets HTTP 401 with
 * `WWW-Authenticate` and no socket is opened; refusals are counted per path.
 */
import { createHash, timingSafeEqual } from 'node:crypto';
import type { IncomingMessage } from 'node:http';
import type { Duplex } from 'node:stream';

export type UpgradeClass = 'control' | 'listen' | 'read';

export interface UpgradeAuthOptions {
  token: string | null;
  openStatus: boolean;
  /** Path (no query) → what it needs; paths not listed are left to the handlers (and their 404). */
  paths: Record<string, UpgradeClass>;
}

export interface UpgradeAuth {
  /** true: let the upgrade through; false: it has been answered with 401 and the socket ended. */
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

export function createUpgradeAuth(opts: UpgradeAuthOptions): UpgradeAuth {
  const counts: Record<string, number> = {};
  const want = opts.token === null ? null : digest(opts.token);
  return {
    check(req, socket) {
      if (want === null) return true;
      const path = (req.url ?? '').split('?')[0];
      const cls = opts.paths[path];
      if (cls === undefined || (cls === 'read' && opts.openStatus)) return true;
      const got = upgradeToken(req);
      // Both sides hashed: equal lengths, compared in constant time.
      if (got !== null && timingSafeEqual(digest(got), want)) return true;
      counts[path] = (counts[path] ?? 0) + 1;
      socket.end('HTTP/1.1 401 Unauthorized\r\nWWW-Authenticate: Bearer realm="nullsteer"\r\nConnection: close\r\nContent-Length: 0\r\n\r\n');
      return false;
    },
    refused: () => ({ ...counts }),
  };
}
