/**
 * Beam audio to downstream recorders, live: every hop of beam audio becomes ingest frames in our own
 * wire format (shared/frame.ts, float32, one channel per beam, MTU-sized), sent over UDP to a
 * configured host:port and to every WebSocket listener of the beam-audio path.
 *
 * Limits and policies: UDP send errors are counted, never thrown. The WebSocket listeners are a
 * {@link LiveHub} (server/http/hub.ts), so they get the dashboard's slow-client policy: a frame is
 * encoded once and handed to every listener; while a listener's socket backlog is above
 * `maxBufferedBytes` its frames wait in its own queue of at most `queueFrames`, the oldest dropped
 * and counted (the sequence numbers show the gap to that listener); a listener above the backlog
 * limit for longer than `slowClientTimeoutMs` is closed with 1013 and its place freed; at most
 * `maxClients` at once (HTTP 503 beyond). A listener that reads is never held up by one that does not.
 */
import { createSocket, type Socket } from 'node:dgram';
import type { IncomingMessage } from 'node:http';
import type { Duplex } from 'node:stream';
import { encodeFrame, maxSamplesPerFrame } from '../../shared/frame.ts';
import type { BeamAudioHop } from '../engine/beam-audio.ts';
import { LiveHub } from '../http/hub.ts';

export interface StreamOutOptions {
  sampleRateHz: number;
  streamId: number;
  /** "host:port", or null for no UDP. */
  udpTarget: string | null;
  path: string;
  /** WebSocket listeners at once; default 16. */
  maxClients?: number;
  /** Socket backlog above which a listener's frames wait in its queue, bytes; default 1 MiB. */
  maxBufferedBytes?: number;
  /** Frames a backlogged listener may have waiting (oldest dropped beyond); default 256. */
  queueFrames?: number;
  /** A listener backlogged this long without draining is closed with 1013, ms; default 5000. */
  slowClientTimeoutMs?: number;
}

export const STREAM_OUT_DEFAULTS = { maxClients: 16, maxBufferedBytes: 1 << 20, queueFrames: 256, slowClientTimeoutMs: 5000 } as const;

/** What status shows of the stream out. */
export interface StreamOutStats {
  udpTarget: string | null;
  wsPath: string;
  /** WebSocket listeners receiving frames now. */
  subscribers: number;
  /** Frames made (each sent over UDP and offered to every listener). */
  frames: number;
  samples: number;
  udpErrors: number;
  /** Frames handed to listeners' sockets (one per listener per frame). */
  wsSent: number;
  /** Frames dropped from backlogged listeners' queues (one per listener per frame). */
  wsDropped: number;
  /** Listeners closed with 1013 for not reading. */
  wsClosedSlow: number;
  /** Listeners refused with 503 (maxClients reached). */
  wsRefused: number;
}

export class BeamStreamOut {
  readonly opts: StreamOutOptions;
  #udp: Socket | null = null;
  #host = '';
  #port = 0;
  #seq = 0;
  readonly #listeners: LiveHub;
  frames = 0;
  samples = 0;
  udpErrors = 0;

  constructor(opts: StreamOutOptions) {
    this.opts = opts;
    if (opts.udpTarget) {
      const i = opts.udpTarget.lastIndexOf(':');
      this.#host = opts.udpTarget.slice(0, i).replace(/^\[|\]$/g, '');
      this.#port = Number(opts.udpTarget.slice(i + 1));
      this.#udp = createSocket(this.#host.includes(':') ? 'udp6' : 'udp4');
      this.#udp.on('error', () => this.udpErrors++);
    }
    const d = STREAM_OUT_DEFAULTS;
    // Listeners send nothing; a message of more than 1 KiB closes with 1009, a binary one with 1003.
    this.#listeners = new LiveHub({
      path: opts.path,
      maxClients: opts.maxClients ?? d.maxClients,
      maxBufferedBytes: opts.maxBufferedBytes ?? d.maxBufferedBytes,
      queueRows: opts.queueFrames ?? d.queueFrames,
      slowClientTimeoutMs: opts.slowClientTimeoutMs ?? d.slowClientTimeoutMs,
      maxIncomingBytes: 1024,
    });
  }

  handleUpgrade(req: IncomingMessage, socket: Duplex, head: Buffer): boolean {
    return this.#listeners.handleUpgrade(req, socket, head);
  }

  /** Send one hop of every beam. The hop before the stream's first sample (the STFT primer) is skipped. */
  send(hop: BeamAudioHop): void {
    if (hop.sampleIndex < 0) return;
    const m = hop.ids.length;
    const per = maxSamplesPerFrame(m, 'float32');
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
      this.#listeners.broadcastRowBytes(bytes); // fresh bytes per frame: the listeners' queues may keep them
    }
  }

  stats(): StreamOutStats {
    const h = this.#listeners.stats();
    return {
      udpTarget: this.opts.udpTarget,
      wsPath: this.opts.path,
      subscribers: h.clients,
      frames: this.frames,
      samples: this.samples,
      udpErrors: this.udpErrors,
      wsSent: h.rowsSent,
      wsDropped: h.rowsDropped,
      wsClosedSlow: h.closedSlow,
      wsRefused: h.refusedFull,
    };
  }

  /** Close the listeners (1001, their sockets destroyed after the hub's grace time) and the UDP socket. */
  async close(): Promise<void> {
    await this.#listeners.close();
    await new Promise<void>((r) => (this.#udp ? this.#udp.close(() => r()) : r()));
  }
}
