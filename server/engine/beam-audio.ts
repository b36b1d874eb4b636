/**
 * Steered-beam audio on the main thread: every hop, each beam's BeamSynthesizer filters the hop's
 * snapshot with that beam's weights (sent by the workers with each beam scan, smoothed between
 * updates) and resynthesises one hop of samples. The output keeps the input's sample clock: the hop
 * from the analysis frame that starts at sample s carries samples [s, s + hop) of the timeline
 * (the WOLA latency, N − hop, is the delay to the live input). Runs on every hop, also those the
 * workers skip under load, so beam audio never loses samples.
 */
import { BeamSynthesizer } from '../dsp/beam-synth.ts';
import type { BinRange } from '../dsp/stft.ts';
import type { WorkerRange } from './pool.ts';

export interface BeamAudioHop {
  /** Stream-clock index of the first sample. */
  sampleIndex: number;
  frames: number;
  /** Beam ids, one per channel of `data`, in order. */
  ids: number[];
  /** Planar float32, beam i sample k at data[i·frames + k]. */
  data: Float32Array;
}

export interface BeamAudioOptions {
  channels: number;
  fftSize: number;
  band: BinRange;
  sampleRateHz: number;
}

export class BeamAudio {
  readonly opts: BeamAudioOptions;
  #synths = new Map<number, BeamSynthesizer>();
  #ids: number[] = [];
  readonly #bandWeights: Float64Array;

  constructor(opts: BeamAudioOptions) {
    this.opts = opts;
    this.#bandWeights = new Float64Array(opts.band.count * 2 * opts.channels);
  }

  /** Follow the engine's beam list (new beams start silent until their first weights). */
  sync(ids: number[]): void {
    for (const id of ids) {
      if (!this.#synths.has(id)) {
        const o = this.opts;
        this.#synths.set(id, new BeamSynthesizer({ channels: o.channels, fftSize: o.fftSize, bins: { startBin: o.band.startBin, count: o.band.count }, sampleRateHz: o.sampleRateHz, limiter: true }));
      }
    }
    for (const id of [...this.#synths.keys()]) if (!ids.includes(id)) this.#synths.delete(id);
    this.#ids = [...ids];
  }

  /**
   * Weights from one beam scan: beam `ids[i]`'s weights for worker w's bins start at
   * `results[base(w) + i·weightDoubles]`, bin by bin (2·M doubles each).
   */
  setWeights(ids: number[], results: Float64Array, base: (w: number) => number, weightDoubles: number, ranges: WorkerRange[], due?: readonly number[]): void {
    const m2 = 2 * this.opts.channels;
    ids.forEach((id, i) => {
      const synth = this.#synths.get(id);
      if (!synth || (due && !due.includes(id))) return;
      const bw = this.#bandWeights;
      let any = false;
      ranges.forEach((r, w) => {
        const o = base(w) + i * weightDoubles;
        bw.set(results.subarray(o, o + r.count * m2), r.start * m2);
        if (!any) for (let k = 0; k < r.count * m2; k++) if (bw[r.start * m2 + k] !== 0) { any = true; break; }
      });
      if (any) synth.setWeights(bw);
    });
  }

  /** Output gain (dB) and limiter of one beam. */
  setOutput(id: number, gainDb: number, limiter: boolean): void {
    const s = this.#synths.get(id);
    if (!s) return;
    s.setGain(Math.pow(10, gainDb / 20));
    s.setLimiter(limiter);
  }

  /** The smoothed weights beam `id` applied on its last hop (band-bin layout), or null (see BeamSynthesizer.appliedWeights). */
  weightsOf(id: number): Float64Array | null {
    const s = this.#synths.get(id);
    return s?.hasWeights ? s.appliedWeights : null;
  }

  /** Delay of beam audio behind the input: the WOLA latency N − hop, seconds. */
  get latencyS(): number {
    return this.opts.fftSize / 2 / this.opts.sampleRateHz;
  }

  /** One hop of every beam, or null without beams. */
  process(snapshot: Float64Array, offset: number, hopStart: number): BeamAudioHop | null {
    const n = this.#ids.length;
    if (n === 0) return null;
    const hop = this.opts.fftSize / 2;
    const data = new Float32Array(n * hop);
    for (let i = 0; i < n; i++) this.#synths.get(this.#ids[i])!.process(snapshot, data.subarray(i * hop, (i + 1) * hop), offset);
    return { sampleIndex: hopStart, frames: hop, ids: [...this.#ids], data };
  }
}
