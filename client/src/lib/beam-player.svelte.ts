/**
 * Listening to one beam in the browser: the beam-audio WebSocket (`outputs.streamPath`, default
 * /api/beams/audio; same origin, `?token=` when one is set) → this beam's channel
 * (shared/beam-listen.ts: frames carry every beam, one channel each in the order of GET /api/beams)
 * → its sample clock (gaps as zeros of their length) → the audio worklet (beam-player-worklet.ts:
 * jitter buffer, volume, limiter always on) → the AudioContext, created at the stream's sample rate
 * so nothing is resampled here.
 *
 * The hearing caution must be acknowledged before the first play (remembered in localStorage).
 * The volume starts at {@link START_VOLUME_DB}. Stats of the worklet are exposed for the status line
 * and, for the end-to-end test, on `window.__beamPlayer`.
 */
import workletUrl from './beam-player-worklet.ts?worker&url';
import { getBeams, request } from './api.ts';
import { liveUrl } from './live.svelte.ts';
import { BeamTimeline, beamChannel, frameChannels, MAX_BEAM_FRAME_SAMPLES, readBeamChannel } from '../../../shared/beam-listen.ts';
import type { FromWorklet, PlayerOptions, PlayerRecord, PlayerStats, ToWorklet } from './beam-player-protocol.ts';

import { CAUTION_KEY, DEFAULT_STREAM_PATH, JITTER_CAPACITY_MS, JITTER_TARGET_MS, LISTEN_CEILING_DBFS, MAX_GAP_S, MAX_VOLUME_DB, MIN_VOLUME_DB, RECORD_SAMPLES, START_VOLUME_DB } from './beam-player-constants.ts';
export * from './beam-player-constants.ts';

export type PlayerState = 'idle' | 'connecting' | 'playing' | 'stopped';

/** What the end-to-end test reads from the page. */
export interface PlayerHook {
  beamId: number | null;
  sampleRateHz: number | null;
  stats: PlayerStats | null;
  record: PlayerRecord | null;
  framesUsed: number;
  framesUnmapped: number;
  gaps: number;
  gapSamples: number;
}

function readAck(): boolean {
  try {
    return localStorage.getItem(CAUTION_KEY) === 'yes';
  } catch {
    return false;
  }
}

export class BeamPlayer {
  #state = $state<PlayerState>('idle');
  #beamId = $state<number | null>(null);
  #message = $state<string | null>(null);
  #stats = $state.raw<PlayerStats | null>(null);
  #volumeDb = $state(START_VOLUME_DB);
  #acknowledged = $state(readAck());
  #sampleRateHz = $state<number | null>(null);
  #gaps = $state(0);
  #pending = $state<number | null>(null);

  #ws: WebSocket | null = null;
  #ctx: AudioContext | null = null;
  #node: AudioWorkletNode | null = null;
  #nodeReady = false;
  #timeline: BeamTimeline | null = null;
  #listIds: number[] = [];
  #listFetch: Promise<void> | null = null;
  #scratch = new Float32Array(MAX_BEAM_FRAME_SAMPLES);
  #generation = 0;
  #hook: PlayerHook = { beamId: null, sampleRateHz: null, stats: null, record: null, framesUsed: 0, framesUnmapped: 0, gaps: 0, gapSamples: 0 };

  get state(): PlayerState {
    return this.#state;
  }
  get beamId(): number | null {
    return this.#beamId;
  }
  get message(): string | null {
    return this.#message;
  }
  get stats(): PlayerStats | null {
    return this.#stats;
  }
  get sampleRateHz(): number | null {
    return this.#sampleRateHz;
  }
  get gaps(): number {
    return this.#gaps;
  }
  get acknowledged(): boolean {
    return this.#acknowledged;
  }
  get volumeDb(): number {
    return this.#volumeDb;
  }
  set volumeDb(db: number) {
    const v = Math.min(MAX_VOLUME_DB, Math.max(MIN_VOLUME_DB, Number.isFinite(db) ? db : START_VOLUME_DB));
    this.#volumeDb = v;
    this.#post({ type: 'volume', db: v });
  }
  /** Audio dropped by the full jitter buffer so far, ms. */
  get droppedMs(): number | null {
    return this.#stats && this.#sampleRateHz ? (1000 * this.#stats.droppedSamples) / this.#sampleRateHz : null;
  }
  /** Buffered audio now, ms. */
  get bufferedMs(): number | null {
    return this.#stats && this.#sampleRateHz ? (1000 * this.#stats.bufferedSamples) / this.#sampleRateHz : null;
  }

  /** The beam waiting for the caution to be acknowledged (null: none). */
  get pending(): number | null {
    return this.#pending;
  }

  /** The listen button: play at once when the caution was acknowledged, otherwise show it first. */
  listen(beamId: number): void {
    if (this.#acknowledged) void this.start(beamId);
    else this.#pending = beamId;
  }

  /** The caution read: remembered, and the beam that waited starts (this click is the user gesture audio needs). */
  acknowledge(): void {
    this.#acknowledged = true;
    try {
      localStorage.setItem(CAUTION_KEY, 'yes');
    } catch {
      // storage refused (private mode): acknowledged for this page only
    }
    const id = this.#pending;
    this.#pending = null;
    if (id !== null) void this.start(id);
  }

  /** Close the caution without playing. */
  cancel(): void {
    this.#pending = null;
  }

  /** Play beam `beamId` (stopping whatever plays). Needs the caution acknowledged. */
  async start(beamId: number): Promise<void> {
    if (!this.#acknowledged) {
      this.#message = 'read and acknowledge the caution first';
      return;
    }
    this.stop();
    const gen = ++this.#generation;
    this.#state = 'connecting';
    this.#beamId = beamId;
    this.#message = null;
    this.#stats = null;
    this.#gaps = 0;
    this.#sampleRateHz = null;
    this.#hook = { beamId, sampleRateHz: null, stats: null, record: null, framesUsed: 0, framesUnmapped: 0, gaps: 0, gapSamples: 0 };
    (globalThis as { __beamPlayer?: PlayerHook }).__beamPlayer = this.#hook;
    // The stream's path as the server is configured (GET /api/recording names it), and the beam order.
    const rec = await request<{ streamOut?: { wsPath?: unknown } }>('GET', '/api/recording');
    const path = rec.ok && typeof rec.data?.streamOut?.wsPath === 'string' ? rec.data.streamOut.wsPath : DEFAULT_STREAM_PATH;
    await this.#fetchList();
    if (gen !== this.#generation) return;
    if (!this.#listIds.includes(beamId)) return this.#fail(`beam ${beamId} is not among the beams (${this.#listIds.join(', ') || 'none'})`);
    let ws: WebSocket;
    try {
      ws = new WebSocket(liveUrl(path));
    } catch (e) {
      return this.#fail(`cannot open the beam audio (${(e as Error).message})`);
    }
    ws.binaryType = 'arraybuffer';
    this.#ws = ws;
    ws.onmessage = (ev) => {
      if (gen === this.#generation && ev.data instanceof ArrayBuffer) this.#onFrame(new Uint8Array(ev.data), gen);
    };
    ws.onclose = (ev) => {
      if (gen !== this.#generation) return;
      const why =
        ev.code === 1013 ? 'the server closed the audio: this page did not keep up (1013)'
        : ev.code === 1006 ? 'the beam audio was refused or cut off (1006): the server may need a token, or be gone'
        : `the beam audio closed (${ev.code}${ev.reason ? ` ${ev.reason}` : ''})`;
      this.#fail(why);
    };
  }

  stop(): void {
    this.#generation++;
    const ws = this.#ws;
    this.#ws = null;
    if (ws) {
      ws.onmessage = null;
      ws.onclose = null;
      ws.close();
    }
    this.#node?.disconnect();
    this.#node = null;
    this.#nodeReady = false;
    void this.#ctx?.close().catch(() => undefined);
    this.#ctx = null;
    this.#timeline = null;
    if (this.#state !== 'idle') this.#state = 'stopped';
  }

  #fail(message: string): void {
    this.stop();
    this.#message = message;
  }

  #post(m: ToWorklet, transfer: Transferable[] = []): void {
    if (this.#node && this.#nodeReady) this.#node.port.postMessage(m, transfer);
  }

  /** GET /api/beams (one request at a time): the ids in stream order. */
  #fetchList(): Promise<void> {
    if (this.#listFetch) return this.#listFetch;
    this.#listFetch = (async () => {
      const r = await getBeams();
      if (r.ok && Array.isArray(r.data?.beams)) this.#listIds = r.data.beams.map((b) => Number(b.id));
    })().finally(() => (this.#listFetch = null));
    return this.#listFetch;
  }

  #onFrame(bytes: Uint8Array, gen: number): void {
    const channels = frameChannels(bytes);
    if (channels === null) return;
    const id = this.#beamId!;
    const ch = beamChannel(this.#listIds, id, channels);
    if (ch < 0) {
      // The list is stale (a beam came or went): drop the frame, ask again; a fresh list without
      // this beam (and of the frame's size) means it was removed.
      this.#hook.framesUnmapped++;
      if (!this.#listFetch) {
        void this.#fetchList().then(() => {
          if (gen === this.#generation && this.#listIds.length === channels && !this.#listIds.includes(id)) this.#fail(`beam ${id} was removed`);
        });
      }
      return;
    }
    const r = readBeamChannel(bytes, ch, this.#scratch);
    if (!r.ok) return;
    if (this.#sampleRateHz === null) {
      this.#sampleRateHz = r.sampleRateHz;
      this.#hook.sampleRateHz = r.sampleRateHz;
      void this.#openAudio(r.sampleRateHz, gen);
      return;
    }
    if (r.sampleRateHz !== this.#sampleRateHz) return this.#fail(`the stream's sample rate changed (${this.#sampleRateHz} → ${r.sampleRateHz} Hz): press listen again`);
    if (!this.#nodeReady || !this.#timeline) return; // the worklet is still loading
    const p = this.#timeline.place(r.firstSample, r.frames);
    if (p.skip >= r.frames) return;
    if (p.restart && this.#hook.framesUsed > 0) this.#post({ type: 'reset' });
    this.#hook.framesUsed++;
    this.#hook.gaps = this.#timeline.gaps;
    this.#hook.gapSamples = this.#timeline.gapSamples;
    this.#gaps = this.#timeline.gaps;
    const data = this.#scratch.slice(p.skip, r.frames); // a copy of its own: transferred to the worklet
    this.#post({ type: 'samples', firstSample: r.firstSample + p.skip, zerosBefore: p.zeros, data }, [data.buffer]);
  }

  async #openAudio(sampleRateHz: number, gen: number): Promise<void> {
    try {
      const ctx = new AudioContext({ sampleRate: sampleRateHz, latencyHint: 'interactive' });
      this.#ctx = ctx;
      await ctx.audioWorklet.addModule(workletUrl);
      if (gen !== this.#generation) return;
      const opts: PlayerOptions = { targetMs: JITTER_TARGET_MS, capacityMs: JITTER_CAPACITY_MS, ceilingDbfs: LISTEN_CEILING_DBFS, volumeDb: this.#volumeDb, recordSamples: RECORD_SAMPLES };
      const node = new AudioWorkletNode(ctx, 'beam-player', { numberOfInputs: 0, numberOfOutputs: 1, outputChannelCount: [1], processorOptions: opts });
      node.port.onmessage = (ev: MessageEvent<FromWorklet>) => {
        if (gen !== this.#generation) return;
        const m = ev.data;
        if (m.type === 'stats') {
          const { type: _t, ...stats } = m;
          this.#stats = stats;
          this.#hook.stats = stats;
        } else if (m.type === 'record') {
          const { type: _t, ...record } = m;
          this.#hook.record = record;
        }
      };
      node.connect(ctx.destination);
      this.#node = node;
      this.#timeline = new BeamTimeline(Math.round(MAX_GAP_S * sampleRateHz));
      this.#nodeReady = true;
      await ctx.resume();
      if (gen === this.#generation) this.#state = 'playing';
    } catch (e) {
      if (gen === this.#generation) this.#fail(`audio could not start: ${(e as Error).message}`);
    }
  }
}
