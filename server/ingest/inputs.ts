/**
 * Every input the configuration names, assembled into one block stream on the array's sample
 * clock: own-format frames over UDP and WebSocket (IngestHub), and, as the parts land, RTP
 * sessions, a capture command and the merger of several members. service.ts starts one of these
 * for a live source and knows nothing of the parts.
 */
import type { BlockSink } from '../../shared/types.ts';
import type { LoadedConfig } from '../config/load.ts';
import { ConfigError } from '../config/validate.ts';
import { IngestHub, type StreamStatus, type StreamSwitch } from './ingest-hub.ts';
import { startUdpIngest, type UdpIngest } from './udp.ts';
import { createWebSocketIngest, type WebSocketIngest } from './websocket.ts';

/** How often held frames are checked against the reorder hold time, ms. */
const TICK_MS = 10;

export interface InputHooks {
  /** The processed stream changed (journal it). */
  onSwitch?: (s: StreamSwitch) => void;
}

/** Why a stream cannot be chosen by hand. */
export class InputChoiceError extends Error {
  constructor(
    readonly kind: 'unknown' | 'fixed',
    message: string,
    readonly seen: number[] = [],
  ) {
    super(message);
  }
}

export class Inputs {
  readonly hub: IngestHub | null = null;
  wsIngest: WebSocketIngest | null = null;
  udp: UdpIngest | null = null;
  readonly #loaded: LoadedConfig;
  #ticker: NodeJS.Timeout | null = null;
  #closed = false;

  constructor(loaded: LoadedConfig, sink: BlockSink, hooks: InputHooks = {}) {
    this.#loaded = loaded;
    const { config, geometry } = loaded;
    const fs = config.input.sampleRateHz;
    const channels = geometry.positions.length;
    if (config.input.select === 'pinned' && config.input.streamId === null) {
      throw new ConfigError([{ path: 'input.streamId', value: null, message: 'input.streamId = null: input.select pinned needs the stream id to process' }]);
    }
    if (config.source.kind === 'network') {
      this.hub = new IngestHub(
        {
          sampleRateHz: fs,
          channels,
          encodings: config.input.encodings,
          maxFloatLevelDbfs: config.input.maxFloatLevelDbfs,
          streamId: config.input.streamId,
          maxStreams: config.ingest.maxStreams,
          selection: { mode: config.input.select, eligibleAfterSamples: Math.round((config.input.eligibleAfterMs * fs) / 1000), switchAfterMs: config.input.switchAfterS * 1000 },
          onSwitch: hooks.onSwitch,
          sequencer: {
            reorderWindowFrames: config.ingest.reorderWindowFrames,
            reorderHoldMs: config.ingest.reorderHoldMs,
            maxGapSamples: Math.round(config.ingest.maxGapSeconds * fs),
            maxGapBlockFrames: 4096,
            jumpToleranceSamples: Math.round(config.ingest.jumpToleranceSeconds * fs),
            resyncLimit: config.ingest.resyncLimit,
            resyncWindowMs: config.ingest.resyncWindowSeconds * 1000,
          },
        },
        sink,
      );
      if (config.ingest.websocket.enabled) this.wsIngest = createWebSocketIngest(this.hub, config.ingest.websocket);
    }
  }

  /** Open the sockets and start the commands; call once the HTTP server listens. */
  async listen(): Promise<void> {
    const { config } = this.#loaded;
    const hub = this.hub;
    if (hub && config.ingest.udp.enabled) {
      this.udp = await startUdpIngest(hub, config.server.host, config.ingest.udp.port, { receiveBufferBytes: config.ingest.udp.receiveBufferBytes, queueBytes: config.ingest.udp.queueBytes });
    }
    this.#ticker = setInterval(() => this.tick(), TICK_MS);
    this.#ticker.unref();
  }

  tick(nowMs = performance.now()): void {
    this.hub?.tick(nowMs);
  }

  /** Nothing has arrived yet from any live input. */
  get waiting(): boolean {
    return this.hub ? this.hub.status().every((s) => s.samplesAccepted === 0) : false;
  }

  streams(nowMs = performance.now()): StreamStatus[] {
    return this.hub ? this.hub.status(nowMs) : [];
  }

  /** The processed stream and how it was chosen, for status and GET /api/input. */
  selection(nowMs = performance.now()): Record<string, unknown> {
    const hub = this.hub;
    if (!hub) return { mode: null, selectedStreamId: null };
    const st = hub.status(nowMs).find((s) => s.selected) ?? null;
    return {
      mode: this.#loaded.config.input.select,
      selectedStreamId: hub.selectedStream,
      selected: st ? { streamId: st.streamId, transport: st.transport, remote: st.remote, lastFrameAgoS: st.lastFrameAgoS } : null,
      switches: hub.switches,
      lastSwitch: hub.lastSwitch,
      eligibleAfterMs: this.#loaded.config.input.eligibleAfterMs,
      switchAfterS: this.#loaded.config.input.switchAfterS,
    };
  }

  /** Process own-format stream `id` from now on. */
  selectStream(id: number): void {
    const hub = this.hub;
    if (!hub) throw new InputChoiceError('fixed', `the input is ${this.#loaded.config.source.kind}, not chosen by stream`);
    if (!hub.select(id)) {
      throw new InputChoiceError('unknown', `no stream ${id} has been received`, hub.status().map((s) => s.streamId));
    }
  }

  async close(): Promise<void> {
    if (this.#closed) return;
    this.#closed = true;
    if (this.#ticker) clearInterval(this.#ticker);
    await this.udp?.close();
    await this.wsIngest?.close();
    this.hub?.flush();
  }
}
