/**
 * WebSocket ingest: each binary message is one frame, same bytes as a UDP datagram.
 *
 * Limits: messages above `maxMessageBytes` close the connection with 1009 (message too big) and
 * are counted `too_large`; text messages are counted `not_binary` and the connection stays open;
 * beyond `maxConnections` a new upgrade is answered with HTTP 503.
 */
import type { IncomingMessage, Server } from 'node:http';
import type { Duplex } from 'node:stream';
import { WebSocketServer, type WebSocket } from 'ws';
import type { IngestHub } from './ingest-hub.ts';

export interface WebSocketIngestOptions {
  path: string;
  maxMessageBytes: number;
  maxConnections: number;
}

export interface WebSocketIngest {
  readonly connections: number;
  /** Handle an upgrade for our path; returns false when the path is not ours. */
  handleUpgrade(req: IncomingMessage, socket: Duplex, head: Buffer): boolean;
  close(): Promise<void>;
}

export function createWebSocketIngest(hub: IngestHub, opts: WebSocketIngestOptions): WebSocketIngest {
  // skipUTF8Validation: a text message is refused as not_binary whatever its bytes; validating them
  // would close the connection (1007) on invalid UTF-8 without counting the message.
  const wss = new WebSocketServer({ noServer: true, maxPayload: opts.maxMessageBytes, perMessageDeflate: false, skipUTF8Validation: true });
  const open = new Set<WebSocket>();
  wss.on('connection', (ws: WebSocket, req: IncomingMessage) => {
    open.add(ws);
    const remote = `${req.socket.remoteAddress}:${req.socket.remotePort}`;
    ws.on('message', (data, isBinary) => {
      if (!isBinary) {
        hub.refuse('not_binary', 'text message on the ingest socket', 'websocket');
        return;
      }
      const buf = Array.isArray(data) ? Buffer.concat(data) : Buffer.isBuffer(data) ? data : Buffer.from(data);
      hub.receive(new Uint8Array(buf.buffer, buf.byteOffset, buf.byteLength), 'websocket', remote);
    });
    ws.on('error', (err: Error & { code?: string }) => {
      if (err.code === 'WS_ERR_UNSUPPORTED_MESSAGE_LENGTH') {
        hub.refuse('too_large', `message over ${opts.maxMessageBytes} bytes; connection closed with 1009`, 'websocket');
      }
    });
    ws.on('close', () => open.delete(ws));
  });
  return {
    get connections() {
      return open.size;
    },
    handleUpgrade(req, socket, head) {
      const path = (req.url ?? '').split('?')[0];
      if (path !== opts.path) return false;
      if (open.size >= opts.maxConnections) {
        socket.end('HTTP/1.1 503 Service Unavailable\r\nConnection: close\r\nContent-Length: 0\r\n\r\n');
        return true;
      }
      wss.handleUpgrade(req, socket, head, (ws) => wss.emit('connection', ws, req));
      return true;
    },
    close: () =>
      new Promise<void>((resolve) => {
        for (const ws of open) ws.terminate();
        wss.close(() => resolve());
      }),
  };
}

/**
 * Route HTTP upgrades to the handlers that claim them; others are refused with 404. `admit`, when
 * given, sees every upgrade first and answers the ones it refuses itself (http/upgrade-auth.ts).
 */
export function attachUpgrades(
  server: Server,
  handlers: { handleUpgrade(req: IncomingMessage, socket: Duplex, head: Buffer): boolean }[],
  admit?: (req: IncomingMessage, socket: Duplex) => boolean,
): void {
  server.on('upgrade', (req, socket, head) => {
    socket.on('error', () => socket.destroy());
    if (admit && !admit(req, socket)) return;
    for (const h of handlers) if (h.handleUpgrade(req, socket, head)) return;
    socket.end('HTTP/1.1 404 Not Found\r\nConnection: close\r\nContent-Length: 0\r\n\r\n');
  });
}
