/**
 * Beam audio to downstream recorders, live: every hop of beam audio becomes ingest frames in our own
 * wire format (shared/frame.ts, float32, one channel per beam, MTU-sized), sent over UDP to a
 * configured host:port and to every WebSocket subscriber of the beam-audio path.
 *
 * Limits and policies: UDP send errors are counted, never thrown; a WebSocket subscriber with more
 * than `maxBufferedBytes` queued has frames dropped and counted (the sequence numbers show the gap
 * to that subscriber); at most `maxSubscribers` at once (HTTP 503 beyond).
 */
import { createSocket, type Socket } from 'node:dgram';
import type { IncomingMessage } from 'node:http';
import type { Duplex } from 'node:stream';
import { WebSocketServer, type WebSocket } from 'ws';
import { encodeFrame, maxSamplesPerFrame } from '../../shared/frame.ts';
import type { BeamAudioHop } from '../engine/beam-audio.ts';

export interface StreamOutOptions {
  sampleRateHz: number;
  streamId: number;
  /** "host:port", or null for no UDP. */
  udpTarget: string | null;
  path: string;
  maxSubscribers?: number;
  maxBufferedBytes?: number;
}

export class BeamStreamOut {
  readonly opts: StreamOutOptions;
  #udp: Socket | null = null;
  #host = '';
  #port = 0;
  #seq = 0;
  #wss = new WebSocketServer({ noServer: true, perMessageDeflate: false, maxPayload: 1024 });
  #subs = new Set<WebSocket>();
  frames = 0;
  samples = 0;
  udpErrors = 0;
  wsDropped = 0;

  constructor(opts: StreamOutOptions) {
    this.opts = opts;
    if (opts.udpTarget) {
      const i = opts.udpTarget.lastIndexOf(':');
      this.#host = opts.udpTarget.slice(0, i).replace(/^\[|\]$/g, '');
      this.#port = Number(opts.udpTarget.slice(i + 1));
      this.#udp = createSocket(this.#host.includes(':') ? 'udp6' : 'udp4');
      this.#udp.on('error', () => this.udpErrors++);
    }
    this.#wss.on('connection', (ws: WebSocket) => {
      this.#subs.add(ws);
      ws.on('close', () => this.#subs.delete(ws));
      ws.on('error', () => ws.terminate());
    });
  }

  handleUpgrade(req: IncomingMessage, socket: Duplex, head: Buffer): boolean {
    if ((req.url ?? '').split('?')[0] !== this.opts.path) return false;
    if (this.#subs.size >= (this.opts.maxSubscribers ?? 16)) {
      socket.end('HTTP/1.1 503 Service Unavailable\r\nConnection: close\r\nContent-Length: 0\r\n\r\n');
      return true;
    }
    this.#wss.handleUpgrade(req, socket, head, (ws) => this.#wss.emit('connection', ws, req));
    return true;
  }

  /** Send one hop of every beam. The hop before the stream's first sample (the STFT primer) is skipped. */
  send(hop: BeamAudioHop): void {
    if (hop.sampleIndex < 0) return;
    const m = hop.ids.length;
    const per = maxSamplesPerFrame(m, 'float32');
    const limit = this.opts.maxBufferedBytes ?? 1 << 20;
    for (let s = 0; s < hop.frames; s += per) {
      const n = Math.min(per, hop.frames - s);
      const x = new Float32Array(n * m);
      for (let i = 0; i < n; i++) for (let c = 0; c < m; c++) x[i * m + c] = hop.data[c * hop.frames + s + i];
      const bytes = encodeFrame({ streamId: this.opts.streamId, sequence: this.#seq, firstSample: hop.sampleIndex + s, sampleRateHz: this.opts.sampleRateHz, channels: m, samplesPerChannel: n, encoding: 'float32' }, x);
      this.#seq = (this.#seq + 1) >>> 0;
      this.frames++;
      this.samples += n;
      this.#udp?.send(bytes, this.#port, this.#host, (e) => {
        if (e) this.udpErrors++;
      });
      for (const ws of this.#subs) {
        if (ws.bufferedAmount > limit) this.wsDropped++;
        else ws.send(bytes);
      }
    }
  }

  stats() {
    return { udpTarget: this.opts.udpTarget, wsPath: this.opts.path, subscribers: this.#subs.size, frames: this.frames, samples: this.samples, udpErrors: this.udpErrors, wsDropped: this.wsDropped };
  }

  async close(): Promise<void> {
    for (const ws of this.#subs) ws.terminate();
    await new Promise<void>((r) => this.#wss.close(() => r()));
    await new Promise<void>((r) => (this.#udp ? this.#udp.close(() => r()) : r()));
  }
}
