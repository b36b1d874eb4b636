/**
 * The pre-trigger ring of raw input and the beam synthesised from it for an event's clip.
 *
 * A recording that starts at the trigger only holds the aftermath, so the server keeps the last
 * `monitor.preTriggerS` seconds of the raw input (all channels, float32): M × fs × preTriggerS × 4
 * bytes, allocated once (24 channels at 48 kHz for 10 s: 46 MB; status shows the figure). At a trigger
 * the beam toward the event's direction is synthesised over the span the ring still holds, with the
 * weights in force at the trigger, by the same STFT and overlap-add synthesis as live beams
 * (MultiChannelStft + BeamSynthesizer, weights applied at once, no glide): output sample i of the
 * clip is the beam at input sample `from + i`, on the stream's clock like live beam audio
 * (beam-audio.ts: the hop from the analysis frame starting at s carries samples [s, s + hop)).
 *
 * Gaps arrive as blocks of zeros (the ingest's rule) and stay zeros; a discontinuity (the stream's
 * clock jumped) empties the ring, since what it held belongs to another stretch of time.
 */
import { BeamSynthesizer } from '../dsp/beam-synth.ts';
import { MultiChannelStft } from '../dsp/stft.ts';

/** Most memory the service gives the ring, bytes: a very large array gets a shorter ring (status says how long). */
export const PRE_TRIGGER_MAX_BYTES = 256 * 1024 * 1024;

export class RawRing {
  readonly channels: number;
  readonly capacity: number;
  /** Planar: channel c's ring at [c·capacity, (c+1)·capacity). */
  readonly #data: Float32Array;
  /** Sample index one past the newest sample held (null: empty). */
  #end: number | null = null;
  #held = 0;
  /** Times the ring was emptied because the stream's clock jumped. */
  resets = 0;

  constructor(channels: number, capacitySamples: number) {
    if (!Number.isInteger(channels) || channels < 1) throw new RangeError(`channels must be an integer ≥ 1, got ${channels}`);
    if (!Number.isInteger(capacitySamples) || capacitySamples < 1) throw new RangeError(`capacitySamples must be an integer ≥ 1, got ${capacitySamples}`);
    this.channels = channels;
    this.capacity = capacitySamples;
    this.#data = new Float32Array(channels * capacitySamples);
  }

  get bytes(): number {
    return this.#data.byteLength;
  }

  /** [first, end) of the samples held, or null when empty. */
  get span(): [number, number] | null {
    return this.#end === null ? null : [this.#end - this.#held, this.#end];
  }

  /** A planar block (channel c sample i at data[c·frames + i]) starting at `sampleIndex`. */
  push(data: Float32Array, frames: number, sampleIndex: number, discontinuity = false): void {
    if (this.#end !== null && (discontinuity || sampleIndex !== this.#end)) {
      this.#held = 0;
      this.#end = null;
      this.resets++;
    }
    const cap = this.capacity;
    const from = Math.max(0, frames - cap); // only the last `capacity` frames of a long block matter
    for (let c = 0; c < this.channels; c++) {
      const src = c * frames, dst = c * cap;
      for (let i = from; i < frames; i++) this.#data[dst + ((sampleIndex + i) % cap)] = data[src + i];
    }
    this.#end = sampleIndex + frames;
    this.#held = Math.min(cap, this.#held + frames);
  }

  /** Copy samples [from, to) into `out` (planar, channel c at c·(to − from)); they must be held. */
  read(from: number, to: number, out: Float32Array): void {
    const s = this.span;
    if (!s || from < s[0] || to > s[1] || to < from) throw new RangeError(`samples ${from}…${to} are not in the ring (${s ? `${s[0]}…${s[1]}` : 'empty'})`);
    const n = to - from, cap = this.capacity;
    for (let c = 0; c < this.channels; c++) for (let i = 0; i < n; i++) out[c * n + i] = this.#data[c * cap + ((from + i) % cap)];
  }
}

/**
 * The beam with `weights` (band-bin layout, BeamSynthesizer.setWeights) over input samples
 * [from, to) held in `ring`; returns the samples, or null when the ring does not hold the frames
 * that overlap-add into [from, to): from − (N − hop) to the end of the last frame starting before `to`.
 * The analysis needs N − hop samples before `from`; the output is aligned as live beam audio is.
 */
export function synthesizeFromRing(ring: RawRing, from: number, to: number, weights: Float64Array, o: { fftSize: number; band: { startBin: number; count: number }; sampleRateHz: number }): Float32Array | null {
  const N = o.fftSize, hop = N / 2;
  const span = ring.span;
  // Frames start on multiples of hop relative to the first pushed sample; start one frame early.
  const a = from - (N - hop);
  // Frames start at from + k·hop; the last one that writes into [from, to) ends N samples later.
  const need = from + Math.floor((to - 1 - from) / hop) * hop + N;
  if (!span || a < span[0] || need > span[1] || to <= from) return null;
  const n = need - a;
  const planar = new Float32Array(ring.channels * n);
  ring.read(a, need, planar);
  const stft = new MultiChannelStft(ring.channels, N);
  const synth = new BeamSynthesizer({ channels: ring.channels, fftSize: N, bins: { startBin: o.band.startBin, count: o.band.count }, sampleRateHz: o.sampleRateHz, smoothingS: 0 });
  synth.setWeights(weights);
  const out = new Float32Array(to - from);
  const hopOut = new Float32Array(hop);
  stft.push(planar, n, a, (snap, frameStart) => {
    synth.process(snap, hopOut);
    // As beam-audio.ts: the hop of the frame starting at s carries samples [s, s + hop).
    for (let i = 0; i < hop; i++) {
      const k = frameStart + i - from;
      if (k >= 0 && k < out.length) out[k] = hopOut[i];
    }
  });
  return out;
}
