/**
 * The site page's live socket (`/api/site/live`): one JSON text message per closed window
 * (`{ type: "window", … }`) and one per change of node state (`{ type: "nodes", nodes }`); on
 * connecting, a `hello` with the latest of both. Each message is serialised once for all clients.
 *
 * Limits and what happens when one is hit (like server/http/hub.ts, smaller: a window is a few kB
 * twice a second):
 * - `maxClients` (32): a further upgrade is answered 503 and no socket is opened;
 * - `maxBufferedBytes` (1 MiB): while a client's socket holds more than this unsent, messages to it
 *   are dropped (counted) — the next window replaces the last anyway, so nothing queues in the server;
 * - `slowClientTimeoutMs` (5000): a client above that limit for longer is closed with 1013;
 * - incoming messages: ignored (counted); larger than 4 KiB closes with 1009.
 */
import type { IncomingMessage } from 'node:http';
import type { Duplex } from 'node:stream';
import { WebSocketServer, type WebSocket } from 'ws';

export const SITE_LIVE_PATH = '/api/site/live';

export interface SiteLiveStats {
  clients: number;
  sent: number;
  dropped: number;
  slowClosed: number;
  refusedFull: number;
  ignoredIncoming: number;
}

interface Client {
  ws: WebSocket;
  slowSinceMs: number | null;
}

export class SiteLive {
  readonly #wss: WebSocketServer;
  readonly #clients = new Set<Client>();
  readonly #maxClients: number;
  readonly #maxBuffered: number;
  readonly #slowMs: number;
  readonly #hello: () => unknown;
  readonly stats: SiteLiveStats = { clients: 0, sent: 0, dropped: 0, slowClosed: 0, refusedFull: 0, ignoredIncoming: 0 };

  constructor(opts: { hello: () => unknown; maxClients?: number; maxBufferedBytes?: number; slowClientTimeoutMs?: number }) {
    this.#hello = opts.hello;
    this.#maxClients = opts.maxClients ?? 32;
    this.#maxBuffered = opts.maxBufferedBytes ?? 1 << 20;
    this.#slowMs = opts.slowClientTimeoutMs ?? 5000;
    this.#wss = new WebSocketServer({ noServer: true, maxPayload: 4096, perMessageDeflate: false });
  }

  /** Take an upgrade for SITE_LIVE_PATH (the caller checked Host and Origin); false when the path is another. */
  handleUpgrade(req: IncomingMessage, socket: Duplex, head: Buffer): boolean {
    if ((req.url ?? '').split('?')[0] !== SITE_LIVE_PATH) return false;
    if (this.#clients.size >= this.#maxClients) {
      this.stats.refusedFull++;
      socket.end('HTTP/1.1 503 Service Unavailable\r\nConnection: close\r\nContent-Length: 0\r\n\r\n');
      return true;
    }
    this.#wss.handleUpgrade(req, socket, head, (ws) => {
      const c: Client = { ws, slowSinceMs: null };
      this.#clients.add(c);
      this.stats.clients = this.#clients.size;
      ws.on('message', () => {
        this.stats.ignoredIncoming++;
      });
      ws.on('error', () => ws.terminate());
      ws.on('close', () => {
        this.#clients.delete(c);
        this.stats.clients = this.#clients.size;
      });
      this.#sendTo(c, JSON.stringify(this.#hello()), Date.now());
    });
    return true;
  }

  #sendTo(c: Client, text: string, nowMs: number): void {
    if (c.ws.readyState !== c.ws.OPEN) return;
    if (c.ws.bufferedAmount > this.#maxBuffered) {
      this.stats.dropped++;
      if (c.slowSinceMs === null) c.slowSinceMs = nowMs;
      else if (nowMs - c.slowSinceMs > this.#slowMs) {
        this.stats.slowClosed++;
        c.ws.close(1013, 'client not reading; try again later');
      }
      return;
    }
    c.slowSinceMs = null;
    c.ws.send(text);
    this.stats.sent++;
  }

  /** Send one message to every client (serialised once). */
  broadcast(msg: unknown): void {
    if (this.#clients.size === 0) return;
    const text = JSON.stringify(msg);
    const now = Date.now();
    for (const c of this.#clients) this.#sendTo(c, text, now);
  }

  close(): void {
    for (const c of this.#clients) c.ws.close(1001, 'server shutting down');
    const t = setTimeout(() => {
      for (const c of this.#clients) c.ws.terminate();
    }, 500);
    t.unref();
    this.#wss.close();
  }
}
