/**
 * Which `Host` and `Origin` headers the server answers to. A web page the operator has open is a
 * client of the server too: without these checks any site could drive it (a cross-site POST or
 * WebSocket) or, through DNS rebinding, read it under a name of its own.
 *
 * - Host (every request and upgrade): its name (port ignored) must be the bound address, a loopback
 *   name (localhost, 127.0.0.1, ::1), one of `server.allowedHosts`, or, when bound to every
 *   interface (0.0.0.0, ::), one of the machine's interface addresses. A rebinding attack names
 *   its own domain in Host, which is none of these.
 * - Origin (mutating requests and every upgrade): absent (not a browser: curl, the command-line
 *   tools) is accepted; otherwise it must be the server's own origin (`http://` + the Host header)
 *   or one of `server.allowedOrigins`. `Origin: null` (sandboxed frames, files) is refused.
 */
import { networkInterfaces } from 'node:os';

const LOOPBACK_NAMES = ['localhost', '127.0.0.1', '::1'];
const WILDCARD = new Set(['0.0.0.0', '::', '[::]']);

/** The host name of a Host header, lowercase, without port, brackets or a trailing dot; null when malformed. */
export function hostName(header: string | undefined): string | null {
  if (typeof header !== 'string' || header.length === 0 || header.length > 300) return null;
  const h = header.trim().toLowerCase();
  let name: string;
  if (h.startsWith('[')) {
    const end = h.indexOf(']');
    if (end < 0) return null;
    name = h.slice(1, end);
    const rest = h.slice(end + 1);
    if (rest !== '' && !/^:\d{1,5}$/.test(rest)) return null;
  } else {
    const colon = h.indexOf(':');
    if (colon >= 0 && h.indexOf(':', colon + 1) >= 0) return null; // a bare IPv6 address needs brackets
    name = colon < 0 ? h : h.slice(0, colon);
    if (colon >= 0 && !/^\d{1,5}$/.test(h.slice(colon + 1))) return null;
  }
  name = name.replace(/\.$/, '');
  return /^[a-z0-9.:_-]+$/.test(name) ? name : null;
}

export interface OriginPolicyOptions {
  /** The address the server binds to (config server.host). */
  host: string;
  allowedHosts?: readonly string[];
  allowedOrigins?: readonly string[];
}

export class OriginPolicy {
  readonly #hosts = new Set<string>();
  readonly #origins = new Set<string>();

  constructor(opts: OriginPolicyOptions) {
    const add = (h: string) => {
      const n = hostName(h.includes(':') && !h.startsWith('[') ? `[${h}]` : h);
      if (n !== null) this.#hosts.add(n);
    };
    for (const h of LOOPBACK_NAMES) add(h);
    add(opts.host);
    for (const h of opts.allowedHosts ?? []) add(h);
    if (WILDCARD.has(opts.host)) {
      for (const list of Object.values(networkInterfaces())) for (const a of list ?? []) add(a.address);
    }
    for (const o of opts.allowedOrigins ?? []) {
      try {
        this.#origins.add(new URL(o).origin);
      } catch {
        /* validated by the config schema; an unparsable one allows nothing */
      }
    }
  }

  /** The Host header names this server. */
  hostAllowed(header: string | undefined): boolean {
    const n = hostName(header);
    return n !== null && this.#hosts.has(n);
  }

  /**
   * The Origin header (if any) is this server's own or an allowed one. Call after hostAllowed:
   * "own" means `http://` + the Host header the request carries.
   */
  originAllowed(origin: string | undefined, hostHeader: string | undefined): boolean {
    if (origin === undefined) return true;
    if (typeof origin !== 'string' || origin === 'null' || origin.length > 300) return false;
    let o: string;
    try {
      o = new URL(origin).origin;
    } catch {
      return false;
    }
    if (this.#origins.has(o)) return true;
    return typeof hostHeader === 'string' && o === `http://${hostHeader.trim().toLowerCase()}`;
  }
}

/** A header value as it may appear in a message: JSON-quoted, at most 80 characters. */
export function shown(v: string | undefined): string {
  if (v === undefined) return '(none)';
  return JSON.stringify(v.length > 80 ? `${v.slice(0, 77)}...` : v);
}
