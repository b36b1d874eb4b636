/**
 * Built-in scene simulator: renders the scenario of scenario.ts as heard by any array geometry, block
 * by block, deterministically from a seed. Stands in for acquisition hardware (`npm start` with no
 * live source) and gives the tests sources whose true directions are known.
 *
 * Propagation (DESIGN.md §3): a far-field plane wave from unit direction u reaches sensor p_m at
 * τ_m = −(p_m·u)/c relative to the origin; sensor m hears s(t − τ_m).
 * - Broadband sources: band noise through a fractional-delay FIR per sensor (fractional-delay.ts,
 *   < −85 dB error up to 0.8 · Nyquist). A common bulk delay keeps every filter causal.
 * - Tonal sources: evaluated analytically, sin(2πf(t − τ_m) + φ) (tonal.ts), re-anchored to the
 *   exact phase every UPDATE_FRAMES samples so the recurrence inside never drifts.
 * - Diffuse background: independent band noise from fixed directions with integer delays (cheap; the
 *   rounding is irrelevant for a field that is meant to be directionless).
 * - Sensor self-noise: white Gaussian, independent per channel.
 *
 * Moving sources get new delays every UPDATE_FRAMES samples, evaluated at the middle of that
 * stretch. Every noise process owns its generator and the update grid is fixed to the absolute
 * sample index, so the rendered signal depends only on the seed, never on blockFrames.
 */

import type { ArrayGeometry, Block } from '../../shared/types.ts';
import { BandNoise } from './band-noise.ts';
import { accumulateDelayed, accumulateInteger, DelayLine, FractionalDelay } from './fractional-delay.ts';
import { Prng } from './prng.ts';
import { azimuthAtDeg, peakRateDegPerS, TARNWICK_YARD, type Scenario, type SourceSpec } from './scenario.ts';
import { TonalSource } from './tonal.ts';

// The real-time driver lives beside the simulator; importers get both from here.
export { SimulatorSource, type SimulatorSourceOptions, type SimulatorSourceStats } from './simulator-source.ts';

export interface SceneSimulatorOptions {
  geometry: ArrayGeometry;
  sampleRateHz: number;
  blockFrames: number;
  /** uint32; default 1. */
  seed?: number;
  /** Default 343.2 m/s (dry air, 20 °C). */
  speedOfSoundMps?: number;
  /** Default 0. */
  streamId?: number;
}

export interface SourceTruth {
  name: string;
  kind: 'broadband' | 'tonal';
  azimuthDeg: number;
  elevationDeg: number;
  /** rms level at the array centre, dBFS. */
  levelDb: number;
}

export interface SceneDescription {
  site: string;
  siteDescription: string;
  array: { name: string; description?: string; channels: number; maxRadiusM: number };
  sampleRateHz: number;
  speedOfSoundMps: number;
  seed: number;
  sources: { name: string; kind: 'broadband' | 'tonal'; levelDb: number; what: string; motion: string }[];
  background: { levelDb: number; directions: number; lowHz: number; highHz: number };
  selfNoiseDb: number;
  summary: string;
}

/** Samples between delay updates and phase re-anchoring (1.3 ms at 48 kHz). */
const UPDATE_FRAMES = 64;
const MAX_CHANNELS = 1024;
/** Bounds the history rings and the bulk delay; matches the ±100 m coordinate limit of array files. */
const MAX_RADIUS_M = 200;

interface BroadbandState {
  spec: SourceSpec;
  noise: BandNoise;
  line: DelayLine;
  amplitude: number;
  /** channels × taps coefficients and per-channel read offsets for the current update chunk. */
  coeffs: Float64Array;
  offsets: Int32Array;
  /** Chunk index the coefficients belong to; −1 for none. Fixed sources never change chunk. */
  chunk: number;
}

interface DiffuseState {
  noise: BandNoise;
  line: DelayLine;
  amplitude: number;
  delays: Int32Array;
}

function optionError(message: string): RangeError {
  return Object.assign(new RangeError(`SceneSimulator: ${message}`), { code: 'ERR_SIM_OPTION' });
}

function dbToAmplitude(levelDb: number): number {
  return 10 ** (levelDb / 20);
}

export class SceneSimulator {
  readonly geometry: ArrayGeometry;
  readonly sampleRateHz: number;
  readonly blockFrames: number;
  readonly seed: number;
  readonly speedOfSoundMps: number;
  readonly streamId: number;
  readonly channels: number;
  readonly scenario: Scenario = TARNWICK_YARD;
  readonly #fd = new FractionalDelay();
  readonly #maxRadiusM: number;
  /** Common delay (samples) added to every broadband path so all delays are ≥ taps/2. */
  readonly #bulkSamples: number;
  readonly #broadband: BroadbandState[] = [];
  readonly #tonal: TonalSource[] = [];
  readonly #diffuse: DiffuseState[] = [];
  readonly #selfNoise: Prng[] = [];
  readonly #selfNoiseSigma: number;
  /** channels × UPDATE_FRAMES float64 mixing scratch. */
  readonly #mix: Float64Array;
  readonly #delayScratch: Float64Array;
  #sampleIndex = 0;
  #discontinuity = false;
  /** False after a skip: the tonal recurrences must be re-anchored at the next sample. */
  #anchored = false;

  constructor(options: SceneSimulatorOptions) {
    if (typeof options !== 'object' || options === null) throw new TypeError('SceneSimulator: options must be an object');
    const { geometry, sampleRateHz, blockFrames } = options;
    const seed = options.seed ?? 1;
    const c = options.speedOfSoundMps ?? 343.2;
    const streamId = options.streamId ?? 0;
    if (typeof geometry !== 'object' || geometry === null || !Array.isArray(geometry.positions)) {
      throw new TypeError('SceneSimulator: geometry.positions must be an array of [x, y, z] in metres');
    }
    const m = geometry.positions.length;
    if (m < 1 || m > MAX_CHANNELS) throw optionError(`geometry must have 1…${MAX_CHANNELS} positions, got ${m}`);
    let maxR = 0;
    geometry.positions.forEach((p, i) => {
      if (!Array.isArray(p) || p.length !== 3 || !p.every(Number.isFinite)) {
        throw optionError(`geometry.positions[${i}] must be [x, y, z] finite metres`);
      }
      maxR = Math.max(maxR, Math.hypot(p[0], p[1], p[2]));
    });
    if (maxR > MAX_RADIUS_M) throw optionError(`geometry extends ${maxR.toFixed(2)} m from the origin, limit ${MAX_RADIUS_M} m`);
    if (!Number.isFinite(sampleRateHz) || sampleRateHz < 8000 || sampleRateHz > 384000) {
      throw optionError(`sampleRateHz must be in [8000, 384000], got ${sampleRateHz}`);
    }
    if (!Number.isInteger(blockFrames) || blockFrames < 1 || blockFrames > 65536) {
      throw optionError(`blockFrames must be an integer in [1, 65536], got ${blockFrames}`);
    }
    if (!Number.isInteger(seed) || seed < 0 || seed > 0xffffffff) throw optionError(`seed must be an integer in [0, 2^32), got ${seed}`);
    if (!Number.isFinite(c) || c < 200 || c > 2000) throw optionError(`speedOfSoundMps must be in [200, 2000], got ${c}`);
    if (!Number.isInteger(streamId) || streamId < 0 || streamId > 0xffffffff) {
      throw optionError(`streamId must be an integer in [0, 2^32), got ${streamId}`);
    }
    this.geometry = geometry;
    this.sampleRateHz = sampleRateHz;
    this.blockFrames = blockFrames;
    this.seed = seed;
    this.speedOfSoundMps = c;
    this.streamId = streamId;
    this.channels = m;
    this.#maxRadiusM = maxR;
    this.#mix = new Float64Array(m * UPDATE_FRAMES);
    this.#delayScratch = new Float64Array(m);

    const taps = this.#fd.taps;
    const spreadSamples = Math.ceil((maxR / c) * sampleRateHz);
    this.#bulkSamples = spreadSamples + taps / 2;
    // Longest window read: one update chunk + largest read offset + filter length.
    const capacity = UPDATE_FRAMES + this.#bulkSamples + spreadSamples + taps + 2;
    let stream = 0;
    for (const spec of this.scenario.sources) {
      if (spec.kind === 'broadband') {
        const noise = new BandNoise({ sampleRateHz, lowHz: spec.lowHz, highHz: spec.highHz, seed, stream: stream++ });
        const state: BroadbandState = {
          spec, noise, line: new DelayLine(capacity), amplitude: dbToAmplitude(spec.levelDb),
          coeffs: new Float64Array(m * taps), offsets: new Int32Array(m), chunk: -1,
        };
        if (spec.path.kind === 'fixed') this.#designBroadband(state, 0);
        this.#broadband.push(state);
      } else {
        // The analytic weights are per-direction constants; a moving tone would need them per chunk.
        if (spec.path.kind !== 'fixed') throw new Error(`scenario: tonal source ${spec.name} must have a fixed path`);
        const tau = this.#delaysSamples(spec.path.azimuthDeg, 0).map((d) => d - this.#bulkSamples);
        this.#tonal.push(new TonalSource(spec, sampleRateHz, tau, UPDATE_FRAMES));
      }
    }
    const bg = this.scenario.background;
    const each = dbToAmplitude(bg.levelDb) / Math.sqrt(bg.directions.length);
    for (const dir of bg.directions) {
      const delays = new Int32Array(m);
      this.#delaysSamples(dir.azimuthDeg, dir.elevationDeg).forEach((d, i) => (delays[i] = Math.round(d)));
      const noise = new BandNoise({ sampleRateHz, lowHz: bg.lowHz, highHz: bg.highHz, seed, stream: stream++ });
      this.#diffuse.push({ noise, line: new DelayLine(capacity), amplitude: each, delays });
    }
    for (let ch = 0; ch < m; ch++) this.#selfNoise.push(new Prng(seed, stream++));
    this.#selfNoiseSigma = dbToAmplitude(this.scenario.selfNoiseDb);
  }

  /** Sample index of the first sample the next block will carry. */
  get sampleIndex(): number {
    return this.#sampleIndex;
  }

  /** Renders the next contiguous block (new Float32Array, planar channels). */
  next(): Block {
    const frames = this.blockFrames;
    const data = new Float32Array(this.channels * frames);
    const start = this.#sampleIndex;
    for (let i = 0; i < frames; ) {
      const n0 = start + i;
      const chunk = Math.floor(n0 / UPDATE_FRAMES);
      const n = Math.min(frames - i, (chunk + 1) * UPDATE_FRAMES - n0);
      this.#render(data, frames, i, n, n0, chunk);
      i += n;
    }
    this.#sampleIndex = start + frames;
    const discontinuity = this.#discontinuity;
    this.#discontinuity = false;
    return {
      streamId: this.streamId, sampleIndex: start, sampleRateHz: this.sampleRateHz,
      channels: this.channels, frames, data, gap: false, discontinuity,
    };
  }

  /**
   * Jumps the clock forward by `frames` samples without rendering them (the real-time driver uses it
   * after a stall). The next block carries `discontinuity: true`; filter histories are kept, so the
   * first few milliseconds after the jump splice old and new noise, as a restarted sender would.
   */
  skip(frames: number): void {
    if (!Number.isInteger(frames) || frames < 0) throw optionError(`skip frames must be a non-negative integer, got ${frames}`);
    if (frames === 0) return;
    this.#sampleIndex += frames;
    this.#discontinuity = true;
    this.#anchored = false;
  }

  /** True directions of the directional sources at a sample index of the stream clock. */
  truth(sampleIndex: number): SourceTruth[] {
    if (!Number.isFinite(sampleIndex) || sampleIndex < 0) throw optionError(`truth sampleIndex must be ≥ 0, got ${sampleIndex}`);
    const tS = sampleIndex / this.sampleRateHz;
    return this.scenario.sources.map((s) => ({
      name: s.name, kind: s.kind, azimuthDeg: azimuthAtDeg(s.path, tS), elevationDeg: 0, levelDb: s.levelDb,
    }));
  }

  describe(): SceneDescription {
    const sc = this.scenario;
    const motion = (s: SourceSpec): string =>
      s.path.kind === 'fixed'
        ? `fixed at azimuth ${s.path.azimuthDeg}°`
        : `sweeps ${s.path.centreDeg}° ± ${s.path.halfSpanDeg}° (period ${s.path.periodS} s, ≤ ${peakRateDegPerS(s.path).toFixed(2)}°/s)`;
    const sources = sc.sources.map((s) => ({ name: s.name, kind: s.kind, levelDb: s.levelDb, what: s.what, motion: motion(s) }));
    const g = this.geometry;
    return {
      site: sc.site, siteDescription: sc.siteDescription,
      array: { name: g.name, description: g.description, channels: this.channels, maxRadiusM: this.#maxRadiusM },
      sampleRateHz: this.sampleRateHz, speedOfSoundMps: this.speedOfSoundMps, seed: this.seed, sources,
      background: { levelDb: sc.background.levelDb, directions: sc.background.directions.length, lowHz: sc.background.lowHz, highHz: sc.background.highHz },
      selfNoiseDb: sc.selfNoiseDb,
      summary: `${sc.site} heard by ${g.name} (${this.channels} ch, ${this.sampleRateHz} Hz): ` +
        sources.map((s) => `${s.name} ${s.kind} ${s.levelDb} dBFS, ${s.motion}`).join('; ') +
        `; diffuse background ${sc.background.levelDb} dBFS, self-noise ${sc.selfNoiseDb} dBFS`,
    };
  }

  /**
   * Delay of each channel in samples, bulk included: bulk + τ_m·fs with τ_m = −(p_m·u)/c.
   * @param out length channels; returned
   */
  #delaysSamples(azimuthDeg: number, elevationDeg: number, out: Float64Array = new Float64Array(this.channels)): Float64Array {
    const az = (azimuthDeg * Math.PI) / 180;
    const el = (elevationDeg * Math.PI) / 180;
    const ux = Math.cos(el) * Math.cos(az);
    const uy = Math.cos(el) * Math.sin(az);
    const uz = Math.sin(el);
    const k = this.sampleRateHz / this.speedOfSoundMps;
    const pos = this.geometry.positions;
    for (let i = 0; i < pos.length; i++) {
      const p = pos[i];
      out[i] = this.#bulkSamples - (p[0] * ux + p[1] * uy + p[2] * uz) * k;
    }
    return out;
  }

  /** Coefficients of a broadband source for update chunk `chunk` (direction at the chunk's middle). */
  #designBroadband(state: BroadbandState, chunk: number): void {
    const tS = (chunk * UPDATE_FRAMES + UPDATE_FRAMES / 2) / this.sampleRateHz;
    const delays = this.#delaysSamples(azimuthAtDeg(state.spec.path, tS), 0, this.#delayScratch);
    const taps = this.#fd.taps;
    for (let ch = 0; ch < this.channels; ch++) {
      state.offsets[ch] = this.#fd.design(state.coeffs, delays[ch], state.amplitude, ch * taps);
    }
    state.chunk = chunk;
  }

  /**
   * Renders samples n0 … n0+n−1 (within one update chunk) into data at frame i0. Components are
   * summed in float64 in #mix (stride UPDATE_FRAMES) and rounded to float32 once.
   */
  #render(data: Float32Array, frames: number, i0: number, n: number, n0: number, chunk: number): void {
    const m = this.channels;
    const taps = this.#fd.taps;
    const mix = this.#mix;
    const sigma = this.#selfNoiseSigma;
    for (let ch = 0; ch < m; ch++) {
      // Self-noise first: it also initialises the mix.
      const g = this.#selfNoise[ch];
      const base = ch * UPDATE_FRAMES;
      for (let i = 0; i < n; i++) mix[base + i] = sigma * g.gaussian();
    }
    for (const bb of this.#broadband) {
      if (bb.spec.path.kind !== 'fixed' && bb.chunk !== chunk) this.#designBroadband(bb, chunk);
      bb.noise.pushInto(bb.line, n, 1);
      for (let ch = 0; ch < m; ch++) {
        accumulateDelayed(mix, ch * UPDATE_FRAMES, n, bb.line, bb.coeffs, ch * taps, taps, bb.offsets[ch]);
      }
    }
    for (const d of this.#diffuse) {
      d.noise.pushInto(d.line, n, d.amplitude);
      for (let ch = 0; ch < m; ch++) accumulateInteger(mix, ch * UPDATE_FRAMES, n, d.line, d.delays[ch], 1);
    }
    const anchor = !this.#anchored || n0 % UPDATE_FRAMES === 0;
    for (const t of this.#tonal) t.render(mix, UPDATE_FRAMES, 0, n, n0, anchor);
    this.#anchored = true;
    for (let ch = 0; ch < m; ch++) {
      const src = ch * UPDATE_FRAMES;
      const dst = ch * frames + i0;
      for (let i = 0; i < n; i++) data[dst + i] = mix[src + i];
    }
  }
}
