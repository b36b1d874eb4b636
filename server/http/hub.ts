/**
 * The dashboard push: a WebSocket endpoint (default `/api/live`) on the HTTP server, fed by the
 * engine with spectrum rows (binary, shared/messages.ts) and JSON messages (hello, params, status).
 * A row is encoded once and the same bytes go to every client.
 *
 * Limits and what happens when one is hit (every one counted in stats()):
 * - `maxClients` (32): a further upgrade is answered with HTTP 503 and no socket is opened.
 *   Connections still closing count until their socket has closed.
 * - `maxBufferedBytes` (1 MiB, the soft limit): while a client's socket `bufferedAmount` is above
 *   it, what is sent to that client waits in its own queue instead of the socket. The queue holds
 *   at most `queueRows` (64) rows: beyond that its oldest row is dropped (counted per client and in
 *   total), so a client that catches up gets the newest rows, in order. JSON messages wait in the
 *   same queue (order kept) and are not dropped for the row limit, because they carry state
 *   (params, grid) that a dropped row does not; at most `queueRows` of them wait, beyond that the
 *   oldest is dropped (counted). Others are unaffected: a send never waits.
 * - `maxBufferedBytes × 8` (the hard limit): above it, JSON messages are dropped too, so no client
 *   can hold more than that plus its queue in server memory.
 * - `slowClientTimeoutMs` (5000): a client above the soft limit continuously for longer than this
 *   is not slow but stalled; it is closed with 1013 ("try again later"). (The soft limit and not the
 *   hard one starts the clock: rows stop once the soft limit is passed, so a stalled client would
 *   otherwise hover just above it and never reach the hard limit.) A client that drains, however
 *   slowly, gets a reduced row rate instead. The close frame waits behind the buffered data; ws
 *   destroys the socket if the close handshake has not finished 30 s later.
 * - `maxIncomingBytes` (4 KiB): a larger client message closes with 1009. Text messages are ignored
 *   in this version (counted); a binary message closes with 1003.
 */
import type { IncomingMessage } from 'node:http';
import type { Duplex } from 'node:stream';
import { WebSocketServer, type WebSocket } from 'ws';
import { encodeRow, stringifyServerMessage, type ServerMessage, type SpectrumRowInput } from '../../shared/messages.ts';

/** The hub's close codes and HTTP refusals: code, WebSocket close code or HTTP status, reason. */
export const LIVE_ERRORS = {
  ERR_LIVE_FULL: { httpStatus: 503, reason: 'too many dashboard clients' },
  ERR_LIVE_SLOW_CLIENT: { closeCode: 1013, reason: 'client not reading; try again later' },
  ERR_LIVE_BINARY: { closeCode: 1003, reason: 'binary messages are not accepted' },
  ERR_LIVE_TOO_LARGE: { closeCode: 1009, reason: 'message too big' },
  ERR_LIVE_INTERNAL: { closeCode: 1011, reason: 'internal error' },
  ERR_LIVE_SHUTDOWN: { closeCode: 1001, reason: 'server shutting down' },
} as const;
export type LiveErrorCode = keyof typeof LIVE_ERRORS;

export const LIVE_DEFAULTS = {
  path: '/api/live',
  maxClients: 32,
  maxBufferedBytes: 1 << 20,
  queueRows: 64,
  slowClientTimeoutMs: 5000,
  maxIncomingBytes: 4096,
  /** close(): how long clients get to answer the 1001 close frame before their sockets are destroyed. */
  closeGraceMs: 500,
} as const;

/** Ratio of the hard to the soft buffered-bytes limit. */
export const HARD_LIMIT_FACTOR = 8;

export interface LiveHubOptions {
  path?: string;
  maxClients?: number;
  maxBufferedBytes?: number;
  queueRows?: number;
  slowClientTimeoutMs?: number;
  maxIncomingBytes?: number;
  closeGraceMs?: number;
  onConnect?: ((client: LiveClient) => void) | null;
}

/** What the onConnect hook gets: enough to greet one client. */
export interface LiveClient {
  readonly id: number;
  /** "address:port" of the peer. */
  readonly remote: string;
  /** Send one JSON message to this client only (dropped like a broadcast above the hard limit). */
  sendJson(msg: ServerMessage): void;
}

export interface LiveClientStats {
  id: number;
  remote: string;
  connectedAtMs: number;
  rowsSent: number;
  rowsDropped: number;
  messagesSent: number;
  messagesDropped: number;
  bytesSent: number;
  bufferedBytes: number;
  /** Rows and JSON messages waiting in this client's queue. */
  queued: number;
}

export interface LiveHubStats {
  /** Clients receiving rows now. */
  clients: number;
  /** Rows delivered (one per client per row). */
  rowsSent: number;
  /** Rows dropped from a backlogged client's full queue, oldest first (one per client per row). */
  rowsDropped: number;
  /** Payload bytes handed to sockets, rows and JSON. */
  bytesSent: number;
  /** Rows offered (broadcastRow and broadcastRowBytes calls), whether or not anyone was connected. */
  rowsBroadcast: number;
  messagesSent: number;
  messagesDropped: number;
  /** Text messages from clients, ignored. */
  messagesIgnored: number;
  connectionsTotal: number;
  refusedFull: number;
  closedSlow: number;
  closedProtocol: number;
}

/** What waits for a backlogged client: a row (binary) or a JSON message (text). */
type Queued = Uint8Array | string;

interface Client extends Omit<LiveClientStats, 'bufferedBytes' | 'queued'> {
  ws: WebSocket;
  /** Waiting messages, oldest first; rows and texts each at most queueRows. */
  queue: Queued[];
  queuedRows: number;
  /** performance.now() when first seen above the soft limit in the current run, else -1. */
  overSinceMs: number;
  handle: LiveClient;
}

function positiveInt(name: string, v: number): number {
  if (!Number.isInteger(v) || v < 1) throw new RangeError(`${name} must be an integer ≥ 1, got ${v}`);
  return v;
}

export class LiveHub {
  readonly path: string;
  readonly maxClients: number;
  readonly maxBufferedBytes: number;
  readonly hardBufferedBytes: number;
  readonly queueRows: number;
  readonly slowClientTimeoutMs: number;
  readonly maxIncomingBytes: number;
  readonly closeGraceMs: number;
  /** Called for each new client once it can receive; the engine sends `hello` from here. */
  onConnect: ((client: LiveClient) => void) | null;

  readonly #wss: WebSocketServer;
  /** Clients receiving messages. */
  readonly #clients = new Set<Client>();
  /** Every socket not yet closed (receiving or closing): what maxClients counts. */
  readonly #sockets = new Set<WebSocket>();
  readonly #sweep: NodeJS.Timeout;
  #nextId = 1;
  #closed = false;
  #totals = { rowsSent: 0, rowsDropped: 0, bytesSent: 0, rowsBroadcast: 0, messagesSent: 0, messagesDropped: 0, messagesIgnored: 0, connectionsTotal: 0, refusedFull: 0, closedSlow: 0, closedProtocol: 0 };

  /** @throws RangeError for a limit that is not a positive integer (closeGraceMs: negative) */
  constructor(opts: LiveHubOptions = {}) {
    this.path = opts.path ?? LIVE_DEFAULTS.path;
    this.maxClients = positiveInt('maxClients', opts.maxClients ?? LIVE_DEFAULTS.maxClients);
    this.maxBufferedBytes = positiveInt('maxBufferedBytes', opts.maxBufferedBytes ?? LIVE_DEFAULTS.maxBufferedBytes);
    this.hardBufferedBytes = this.maxBufferedBytes * HARD_LIMIT_FACTOR;
    this.queueRows = positiveInt('queueRows', opts.queueRows ?? LIVE_DEFAULTS.queueRows);
    this.slowClientTimeoutMs = positiveInt('slowClientTimeoutMs', opts.slowClientTimeoutMs ?? LIVE_DEFAULTS.slowClientTimeoutMs);
    this.maxIncomingBytes = positiveInt('maxIncomingBytes', opts.maxIncomingBytes ?? LIVE_DEFAULTS.maxIncomingBytes);
    this.closeGraceMs = opts.closeGraceMs ?? LIVE_DEFAULTS.closeGraceMs;
    if (!(this.closeGraceMs >= 0)) throw new RangeError(`closeGraceMs must be ≥ 0, got ${this.closeGraceMs}`);
    this.onConnect = opts.onConnect ?? null;
    this.#wss = new WebSocketServer({ noServer: true, maxPayload: this.maxIncomingBytes, perMessageDeflate: false, clientTracking: false });
    this.#wss.on('connection', (ws: WebSocket, req: IncomingMessage) => this.#accept(ws, req));
    // Stalled clients are found even when no rows are being broadcast.
    this.#sweep = setInterval(() => this.#checkStalled(performance.now()), Math.max(10, Math.min(1000, this.slowClientTimeoutMs / 4)));
    this.#sweep.unref();
  }

  /** Handle an upgrade for our path; returns false when the path is not ours (attachUpgrades). */
  handleUpgrade(req: IncomingMessage, socket: Duplex, head: Buffer): boolean {
    const path = (req.url ?? '').split('?')[0];
    if (path !== this.path) return false;
    if (this.#closed || this.#sockets.size >= this.maxClients) {
      this.#totals.refusedFull++;
      socket.end(`HTTP/1.1 ${LIVE_ERRORS.ERR_LIVE_FULL.httpStatus} Service Unavailable\r\nConnection: close\r\nContent-Length: 0\r\n\r\n`);
      return true;
    }
    this.#wss.handleUpgrade(req, socket, head, (ws) => this.#wss.emit('connection', ws, req));
    return true;
  }

  #accept(ws: WebSocket, req: IncomingMessage): void {
    this.#totals.connectionsTotal++;
    this.#sockets.add(ws);
    const id = this.#nextId++;
    const remote = `${req.socket.remoteAddress}:${req.socket.remotePort}`;
    const c: Client = {
      ws,
      id,
      remote,
      connectedAtMs: Date.now(),
      rowsSent: 0,
      rowsDropped: 0,
      messagesSent: 0,
      messagesDropped: 0,
      bytesSent: 0,
      queue: [],
      queuedRows: 0,
      overSinceMs: -1,
      handle: { id, remote, sendJson: (msg) => this.#sendText(c, stringifyServerMessage(msg)) },
    };
    this.#clients.add(c);
    ws.on('message', (_data, isBinary) => {
      if (isBinary) {
        this.#totals.closedProtocol++;
        this.#drop(c, 'ERR_LIVE_BINARY');
      } else this.#totals.messagesIgnored++;
    });
    ws.on('error', (err: Error & { code?: string }) => {
      // ws has already sent 1009 for an oversize message; count it, keep the process alive.
      if (err.code === 'WS_ERR_UNSUPPORTED_MESSAGE_LENGTH') this.#totals.closedProtocol++;
      this.#clients.delete(c);
    });
    ws.on('close', () => {
      this.#clients.delete(c);
      this.#sockets.delete(ws);
    });
    if (this.onConnect) {
      try {
        this.onConnect(c.handle);
      } catch {
        this.#drop(c, 'ERR_LIVE_INTERNAL');
      }
    }
  }

  /** Stop sending to `c` (its queue is let go) and close it with the catalogue's close code. */
  #drop(c: Client, code: Exclude<LiveErrorCode, 'ERR_LIVE_FULL'>): void {
    this.#clients.delete(c);
    c.queue.length = 0;
    c.queuedRows = 0;
    const e = LIVE_ERRORS[code];
    c.ws.close(e.closeCode, e.reason);
  }

  /** Soft-limit bookkeeping for one client; returns false when the client was just closed as stalled. */
  #watch(c: Client, buffered: number, now: number): boolean {
    if (buffered <= this.maxBufferedBytes) {
      c.overSinceMs = -1;
      return true;
    }
    if (c.overSinceMs < 0) c.overSinceMs = now;
    else if (now - c.overSinceMs > this.slowClientTimeoutMs) {
      this.#totals.closedSlow++;
      this.#drop(c, 'ERR_LIVE_SLOW_CLIENT');
      return false;
    }
    return true;
  }

  #checkStalled(now: number): void {
    for (const c of this.#clients) if (this.#watch(c, c.ws.bufferedAmount, now)) this.#flush(c);
  }

  /** Hand queued messages to the socket, oldest first, while it is below the soft limit. */
  #flush(c: Client): void {
    while (c.queue.length > 0 && c.ws.readyState === c.ws.OPEN && c.ws.bufferedAmount <= this.maxBufferedBytes) {
      const m = c.queue.shift()!;
      if (typeof m === 'string') this.#write(c, m);
      else {
        c.queuedRows--;
        this.#writeRow(c, m);
      }
    }
  }

  #write(c: Client, text: string): void {
    if (c.ws.bufferedAmount > this.hardBufferedBytes) {
      c.messagesDropped++;
      this.#totals.messagesDropped++;
      return;
    }
    const n = Buffer.byteLength(text);
    c.ws.send(text);
    c.messagesSent++;
    c.bytesSent += n;
    this.#totals.messagesSent++;
    this.#totals.bytesSent += n;
  }

  #writeRow(c: Client, bytes: Uint8Array): void {
    c.ws.send(bytes, { binary: true });
    c.rowsSent++;
    c.bytesSent += bytes.byteLength;
    this.#totals.rowsSent++;
    this.#totals.bytesSent += bytes.byteLength;
  }

  /** Drop the oldest queued message of the kind given (a row: `true`). */
  #dropOldest(c: Client, row: boolean): void {
    const i = c.queue.findIndex((m) => (typeof m !== 'string') === row);
    if (i < 0) return;
    c.queue.splice(i, 1);
    if (row) {
      c.queuedRows--;
      c.rowsDropped++;
      this.#totals.rowsDropped++;
    } else {
      c.messagesDropped++;
      this.#totals.messagesDropped++;
    }
  }

  /** Send now if nothing waits and the socket is below the soft limit; else queue (bounded). */
  #offer(c: Client, m: Queued, now: number): void {
    if (c.ws.readyState !== c.ws.OPEN) return;
    const buffered = c.ws.bufferedAmount;
    if (!this.#watch(c, buffered, now)) return;
    if (c.queue.length > 0) this.#flush(c);
    if (c.queue.length === 0 && c.ws.bufferedAmount <= this.maxBufferedBytes) {
      if (typeof m === 'string') this.#write(c, m);
      else this.#writeRow(c, m);
      return;
    }
    const row = typeof m !== 'string';
    if (row ? c.queuedRows >= this.queueRows : c.queue.length - c.queuedRows >= this.queueRows) this.#dropOldest(c, row);
    c.queue.push(m);
    if (row) c.queuedRows++;
  }

  #sendText(c: Client, text: string): void {
    this.#offer(c, text, performance.now());
  }

  /** Encode `row` once and send the same bytes to every client below the soft limit. */
  broadcastRow(row: SpectrumRowInput): void {
    this.#totals.rowsBroadcast++;
    if (this.#clients.size > 0) this.#sendRow(encodeRow(row));
  }

  /**
   * Send an already encoded row (from shared/messages.ts encodeRow/encodeRowInto). The bytes are
   * handed to every socket (or client queue) as they are: the caller must not overwrite them afterwards.
   */
  broadcastRowBytes(bytes: Uint8Array): void {
    this.#totals.rowsBroadcast++;
    this.#sendRow(bytes);
  }

  #sendRow(bytes: Uint8Array): void {
    const now = performance.now();
    for (const c of this.#clients) this.#offer(c, bytes, now);
  }

  /** Stringify `msg` once and send it to every client (dropped only for those above the hard limit). */
  broadcastJson(msg: ServerMessage): void {
    if (this.#clients.size === 0) return;
    const text = stringifyServerMessage(msg);
    for (const c of this.#clients) this.#sendText(c, text);
  }

  stats(): LiveHubStats {
    return { clients: this.#clients.size, ...this.#totals };
  }

  clientStats(): LiveClientStats[] {
    return [...this.#clients].map((c) => ({
      id: c.id,
      remote: c.remote,
      connectedAtMs: c.connectedAtMs,
      rowsSent: c.rowsSent,
      rowsDropped: c.rowsDropped,
      messagesSent: c.messagesSent,
      messagesDropped: c.messagesDropped,
      bytesSent: c.bytesSent,
      bufferedBytes: c.ws.bufferedAmount,
      queued: c.queue.length,
    }));
  }

  /**
   * Close every client with 1001, destroy the sockets of those that have not answered after
   * `closeGraceMs`, refuse further upgrades. Idempotent.
   */
  async close(): Promise<void> {
    if (this.#closed) return;
    this.#closed = true;
    clearInterval(this.#sweep);
    for (const c of [...this.#clients]) this.#drop(c, 'ERR_LIVE_SHUTDOWN');
    const all = [...this.#sockets];
    await Promise.all(
      all.map(
        (ws) =>
          new Promise<void>((resolve) => {
            if (ws.readyState === ws.CLOSED) return resolve();
            const t = setTimeout(() => ws.terminate(), this.closeGraceMs);
            ws.once('close', () => {
              clearTimeout(t);
              resolve();
            });
          }),
      ),
    );
    await new Promise<void>((resolve) => this.#wss.close(() => resolve()));
  }
}
