/**
 * The dashboard's beam player, audio side: an AudioWorkletProcessor that takes one beam's samples
 * from the main thread (beam-player.svelte.ts), holds them in a bounded jitter buffer
 * (jitter-buffer.ts) and plays them through the volume and the always-on peak limiter
 * (peak-limiter.ts). Loaded as its own module (`?worker&url` in beam-player.svelte.ts); it runs in
 * the AudioWorkletGlobalScope, where `sampleRate`, `registerProcessor` and
 * `AudioWorkletProcessor` are globals. No allocation in `process` except the rare stats message.
 */
import { JitterBuffer } from './jitter-buffer.ts';
import { dbToGain, PeakLimiter } from './peak-limiter.ts';
import type { FromWorklet, PlayerOptions, ToWorklet } from './beam-player-protocol.ts';

declare const sampleRate: number;
declare function registerProcessor(name: string, ctor: unknown): void;
declare class AudioWorkletProcessor {
  readonly port: MessagePort;
  constructor(options?: unknown);
}

/** Stats to the main thread every this many render quanta (128 samples each: ~0.17 s at 48 kHz). */
const STATS_EVERY_QUANTA = 64;
/** Limiter release time constant, s. */
const RELEASE_S = 0.05;
/** Volume changes glide with this time constant, s (no clicks). */
const VOLUME_GLIDE_S = 0.02;

class BeamPlayerProcessor extends AudioWorkletProcessor {
  readonly #buf: JitterBuffer;
  readonly #limiter: PeakLimiter;
  #gain: number;
  #gainTarget: number;
  readonly #glide: number;
  #quanta = 0;
  #scratch = new Float32Array(128);
  // What the checks read: the first samples received and played.
  readonly #recordN: number;
  #received: Float32Array;
  #receivedN = 0;
  #receivedFirst = -1;
  #played: Float32Array;
  #playedN = 0;
  #playedFirst = -1;
  #playedStopped = false;
  #recordSent = false;
  #dropsSeen = 0;

  constructor(options: { processorOptions: PlayerOptions }) {
    super(options);
    const o = options.processorOptions;
    const cap = Math.max(256, Math.round((o.capacityMs / 1000) * sampleRate));
    this.#buf = new JitterBuffer({ capacitySamples: cap, targetSamples: Math.min(cap, Math.max(128, Math.round((o.targetMs / 1000) * sampleRate))) });
    this.#limiter = new PeakLimiter({ ceilingDbfs: o.ceilingDbfs, releaseS: RELEASE_S, sampleRateHz: sampleRate });
    this.#gain = this.#gainTarget = dbToGain(o.volumeDb);
    this.#glide = 1 - Math.exp(-128 / (VOLUME_GLIDE_S * sampleRate));
    this.#recordN = Math.max(0, Math.floor(o.recordSamples));
    this.#received = new Float32Array(this.#recordN);
    this.#played = new Float32Array(this.#recordN);
    this.port.onmessage = (ev: MessageEvent<ToWorklet>) => this.#onMessage(ev.data);
  }

  #onMessage(m: ToWorklet): void {
    if (m.type === 'samples') {
      const idx0 = m.firstSample - m.zerosBefore;
      if (m.zerosBefore > 0) {
        this.#buf.push(null, 0, m.zerosBefore, idx0);
        this.#noteReceived(null, m.zerosBefore, idx0);
      }
      this.#buf.push(m.data, 0, m.data.length, m.firstSample);
      this.#noteReceived(m.data, m.data.length, m.firstSample);
    } else if (m.type === 'reset') {
      this.#buf.reset();
      this.#playedStopped = true;
    } else if (m.type === 'volume') {
      if (Number.isFinite(m.db)) this.#gainTarget = dbToGain(Math.min(0, m.db));
    }
  }

  #noteReceived(x: Float32Array | null, n: number, first: number): void {
    if (this.#receivedN >= this.#recordN) return;
    if (this.#receivedN === 0) this.#receivedFirst = first;
    const k = Math.min(n, this.#recordN - this.#receivedN);
    if (x === null) this.#received.fill(0, this.#receivedN, this.#receivedN + k);
    else this.#received.set(x.subarray(0, k), this.#receivedN);
    this.#receivedN += k;
  }

  process(_inputs: Float32Array[][], outputs: Float32Array[][]): boolean {
    const out = outputs[0]?.[0];
    if (!out) return true;
    const n = out.length;
    if (this.#scratch.length < n) this.#scratch = new Float32Array(n);
    const x = this.#scratch;
    const b = this.#buf;
    const indexBefore = b.readIndex;
    const got = b.pull(x, n);
    // Record the first played samples while they stay contiguous (no drop, no underrun between).
    if (got > 0 && !this.#playedStopped && this.#playedN < this.#recordN && indexBefore !== null) {
      if (this.#playedN === 0) this.#playedFirst = indexBefore;
      else if (b.droppedSamples !== this.#dropsSeen) this.#playedStopped = true; // dropped since the last quantum
      if (!this.#playedStopped) {
        const k = Math.min(got, this.#recordN - this.#playedN);
        this.#played.set(x.subarray(0, k), this.#playedN);
        this.#playedN += k;
        if (got < n) this.#playedStopped = true;
      }
    }
    this.#dropsSeen = b.droppedSamples;
    this.#gain += (this.#gainTarget - this.#gain) * this.#glide;
    this.#limiter.process(x, out, n, this.#gain);
    for (let c = 1; c < outputs[0].length; c++) outputs[0][c].set(out);
    if (!this.#recordSent && this.#recordN > 0 && this.#receivedN >= this.#recordN && (this.#playedN >= this.#recordN || this.#playedStopped)) {
      this.#recordSent = true;
      const rec: FromWorklet = { type: 'record', receivedFirstSample: this.#receivedFirst, received: this.#received, playedFirstSample: this.#playedFirst, played: this.#played.subarray(0, this.#playedN) };
      this.port.postMessage(rec);
    }
    if (++this.#quanta % STATS_EVERY_QUANTA === 0) this.#postStats();
    return true;
  }

  #postStats(): void {
    const b = this.#buf;
    const l = this.#limiter;
    const m: FromWorklet = {
      type: 'stats',
      bufferedSamples: b.size,
      pushedSamples: b.pushedSamples,
      playedSamples: b.playedSamples,
      droppedSamples: b.droppedSamples,
      underrunSamples: b.underrunSamples,
      underruns: b.underruns,
      maxAbsOut: l.maxAbsOut,
      limitedSamples: l.limitedSamples,
      readIndex: b.readIndex,
      playing: b.playing,
      ceiling: l.ceiling,
    };
    this.port.postMessage(m);
  }
}

registerProcessor('beam-player', BeamPlayerProcessor);
