/**
 * Where `nullsteer send` puts its frames: one UDP datagram or one WebSocket binary message per frame
 * (the framing of shared/frame.ts is the same on both).
 *
 * Back-pressure: UDP `send` resolves when the datagram has been handed to the kernel, so awaiting it
 * never lets the process queue more than one datagram. WebSocket `send` queues the message and, when
 * more than `maxBufferedBytes` are waiting for the socket (ws `bufferedAmount`), waits until the
 * queue drains below it; the limit bounds the sender's memory whatever the link speed.
 */
import dgram from 'node:dgram';
import { lookup } from 'node:dns/promises';
import { WebSocket } from 'ws';
import { sleepMs } from './pacer.ts';
import { sendError } from './send-errors.ts';

export interface FrameTransport {
  /** Human-readable target, e.g. `udp://127.0.0.1:9750`. */
  readonly target: string;
  /**
   * True when the frame's bytes may be overwritten as soon as send() has resolved (the transport
   * no longer reads them); false when it may still hold a reference, so each frame needs its own buffer.
   */
  readonly frameReusable: boolean;
  /**
   * Send one frame; rejects with ERR_SEND_TRANSPORT if the transport failed. When `signal` aborts
   * while send() waits for the queue to drain, it resolves at once (the frame stays queued).
   */
  send(frame: Uint8Array, signal?: AbortSignal): Promise<void>;
  /** Flush and close; never rejects. */
  close(): Promise<void>;
}

/** Default WebSocket queue limit, bytes: a few dozen 16 KiB frames. */
export const DEFAULT_WS_MAX_BUFFERED_BYTES = 1 << 20;
/** How long close() waits for the WebSocket closing handshake before dropping the connection. */
const WS_CLOSE_TIMEOUT_MS = 2000;
const WS_CONNECT_TIMEOUT_MS = 10_000;

/**
 * UDP to `host:port`. The host name is resolved once here, not per datagram. The socket is not
 * connected, so a receiver that is not up yet (ICMP port unreachable) does not fail the sender.
 */
export async function openUdpTransport(host: string, port: number): Promise<FrameTransport> {
  let address: string;
  let family: number;
  try {
    ({ address, family } = await lookup(host));
  } catch (e) {
    throw sendError('ERR_SEND_CONNECT', `cannot resolve UDP host ${host}: ${(e as Error).message}`, e);
  }
  const socket = dgram.createSocket(family === 6 ? 'udp6' : 'udp4');
  let failure: Error | null = null;
  socket.on('error', (e) => {
    failure ??= e;
  });
  const target = `udp://${family === 6 ? `[${address}]` : address}:${port}`;
  let closed = false;
  return {
    target,
    // The send callback runs once the kernel has copied the datagram.
    frameReusable: true,
    send(frame) {
      return new Promise((resolve, reject) => {
        if (failure) return reject(sendError('ERR_SEND_TRANSPORT', `${target}: ${failure.message}`, failure));
        socket.send(frame, port, address, (err) => {
          if (err) reject(sendError('ERR_SEND_TRANSPORT', `${target}: ${err.message}`, err));
          else resolve();
        });
      });
    },
    close() {
      if (closed) return Promise.resolve();
      closed = true;
      return new Promise((resolve) => {
        try {
          socket.close(() => resolve());
        } catch {
          resolve(); // already closed after an error
        }
      });
    },
  };
}

export interface WsTransportOptions {
  /** Queue limit before send() waits, bytes (default {@link DEFAULT_WS_MAX_BUFFERED_BYTES}). */
  maxBufferedBytes?: number;
}

/** WebSocket client to `url` (ws: or wss:), binary messages, no compression (PCM barely compresses). */
export async function openWsTransport(url: string, options: WsTransportOptions = {}): Promise<FrameTransport> {
  const maxBufferedBytes = options.maxBufferedBytes ?? DEFAULT_WS_MAX_BUFFERED_BYTES;
  const ws = new WebSocket(url, { perMessageDeflate: false, handshakeTimeout: WS_CONNECT_TIMEOUT_MS });
  let failure: Error | null = null;
  let closedBy: string | null = null;
  const closedEvent = new Promise<void>((resolve) => ws.once('close', () => resolve()));
  ws.on('error', (e) => {
    failure ??= e;
  });
  ws.on('close', (code, reason) => {
    closedBy ??= `the server closed the connection (code ${code}${reason.length ? `: ${reason.toString()}` : ''})`;
  });
  await new Promise<void>((resolve, reject) => {
    const onOpen = () => {
      ws.off('error', onError);
      resolve();
    };
    const onError = (e: Error) => {
      ws.off('open', onOpen);
      reject(sendError('ERR_SEND_CONNECT', `cannot open WebSocket ${url}: ${e.message}`, e));
    };
    ws.once('open', onOpen);
    ws.once('error', onError);
  });
  const problem = () => {
    if (failure) return sendError('ERR_SEND_TRANSPORT', `${url}: ${failure.message}`, failure);
    if (ws.readyState !== WebSocket.OPEN) return sendError('ERR_SEND_TRANSPORT', `${url}: ${closedBy ?? 'the connection is closed'}`);
    return null;
  };
  /**
   * The error to throw once the connection is not open. While it is closing, the peer's close code
   * is known only at the 'close' event: wait for it (bounded) so the message can name the code.
   */
  const closingProblem = async () => {
    if (!failure && closedBy === null && ws.readyState === WebSocket.CLOSING) {
      const timer = setTimeout(() => ws.terminate(), WS_CLOSE_TIMEOUT_MS);
      await closedEvent;
      clearTimeout(timer);
    }
    return problem();
  };
  return {
    target: url,
    // ws may keep a reference to the frame while it sits in the socket's queue.
    frameReusable: false,
    async send(frame, signal) {
      if (problem()) throw await closingProblem();
      ws.send(frame, { binary: true }, (err) => {
        if (err) failure ??= err;
      });
      while (ws.bufferedAmount > maxBufferedBytes && !signal?.aborted) {
        await sleepMs(1, signal);
        if (problem()) throw await closingProblem();
      }
    },
    async close() {
      if (ws.readyState === WebSocket.CLOSED) return;
      if (ws.readyState === WebSocket.OPEN) ws.close(1000, 'end of stream');
      // Queued messages go out before the close frame; wait for the handshake, but not forever.
      const timer = setTimeout(() => ws.terminate(), WS_CLOSE_TIMEOUT_MS);
      await closedEvent;
      clearTimeout(timer);
    },
  };
}
