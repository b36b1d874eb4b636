/**
 * Site scene renderer: what one array, at its pose on the site plan, hears of a site scene
 * (site-scene-file.ts). Several servers render one consistent scene because
 * - the sample clock is UTC: sample index n is the instant n / fs seconds after the Unix epoch
 *   ({@link utcSampleIndex}), and blocks start at the index of the moment rendering starts;
 * - every emitted waveform is a pure function of (seed, source, n): counter-based white noise (an
 *   integer hash of n, never a stateful generator) through a fixed band-pass FIR, or a sine whose
 *   phase is computed from n exactly; so every array hears the same emitted sound, and rendering
 *   does not depend on where blocks start or how long they are.
 *
 * Propagation, per source and microphone (near field, exact per microphone):
 * - the microphone's site position q_m = pose.positionM + R(headingDeg)·p_m (a level array turned
 *   about z; shared/site.ts);
 * - the sound heard at time t left the source at the retarded time t_e, solving
 *   c·(t − t_e) = |q_m − S(t_e)| (fixed-point iteration, contraction |v|/c: to convergence at the
 *   array's origin from t_e = t, then a few steps per microphone from the origin's solution, three
 *   for a 0.1 m ring at 2 m/s); delay D = t − t_e;
 * - spherical spreading: amplitude × 1/r with r = |q_m − S(t_e)| in metres (level given at 1 m;
 *   r clamped at {@link MIN_RANGE_M});
 * - the fractional delay by the project's Kaiser-windowed sinc (fractional-delay.ts, < −85 dB error
 *   to 0.8·Nyquist). Fixed sources: one filter per microphone. Moving sources: delay and gain
 *   recomputed every {@link MOVING_UPDATE_FRAMES} samples on a grid fixed to the absolute sample
 *   index, at the middle of each stretch (at 2 m/s the delay moves 0.09 samples per stretch, so
 *   the arrival time is within ±0.05 samples of the exact one).
 *
 * Levels: dBFS = 20·log10(rms) with full scale ±1 (a full-scale sine is −3 dBFS), the project's
 * convention (scan-pipeline.ts). A source of levelDbAt1m L gives L − 20·log10(r / 1 m) at range r.
 * Sensor self-noise: white, uniform, rms noiseDbfs per channel, counter-based per array and channel.
 */
import type { ArrayGeometry, Block } from '../../shared/types.ts';
import { wrap360, type Pose } from '../../shared/site.ts';
import { ConfigError } from '../config/validate.ts';
import { FractionalDelay } from './fractional-delay.ts';
import { accumulateWindow } from './fractional-delay.ts';
import { bandPass, BAND_FIR_TAPS, fnv1a, mix32 } from './scene-signals.ts';
import { Trajectory } from './scene-trajectory.ts';
import { MAX_SOURCE_SPEED_MPS, type SceneSource, type SiteScene } from './site-scene-file.ts';

/** Samples between the delay updates of a moving source (0.33 ms at 48 kHz). */
export const MOVING_UPDATE_FRAMES = 16;
/** Ranges below this are taken as this, metres (a microphone inside a source is not a level). */
export const MIN_RANGE_M = 0.5;
/**
 * Fixed-point steps of the retarded-time solution; each shrinks the error by |v|/c (0.006 at 2 m/s,
 * 0.15 at the 50 m/s limit). At the array's origin from t_e = t: until a step moves t_e by less than
 * {@link ORIGIN_CONVERGED_SAMPLES} (5 steps at 2 m/s; at most {@link RETARDED_STEPS}). Each
 * microphone then starts from the origin's t_e, off by at most its distance from the origin / c
 * (+ the origin's residual), and takes the steps that bring that under {@link RETARDED_TOLERANCE_S}
 * (3 for a 0.1 m ring at 2 m/s). Absolute sample times near 2^46 carry 1/64-sample steps; the
 * delay itself is computed from a range, so that rounding moves it by |v| × 0.3 µs / c only.
 */
const RETARDED_STEPS = 40;
const ORIGIN_CONVERGED_SAMPLES = 0.05;
const RETARDED_TOLERANCE_S = 1e-9;
const TWO_POW_32 = 4294967296;
const TWO_POW_24 = 16777216;
const SQRT3 = Math.sqrt(3);

/** Sample index of a UTC instant on the site's common clock: round(utcMs / 1000 · fs). */
export function utcSampleIndex(utcMs: number, sampleRateHz: number): number {
  return Math.round((utcMs * sampleRateHz) / 1000);
}

/** UTC (ms since the epoch) of a sample index on the site's common clock. */
export function sampleIndexUtcMs(sampleIndex: number, sampleRateHz: number): number {
  return (sampleIndex * 1000) / sampleRateHz;
}

interface SourceState {
  spec: SceneSource;
  trajectory: Trajectory;
  /** Hash key of the emitted waveform: (seed, source name). */
  key: number;
  broadband: boolean;
  /** Tonal: peak amplitude at 1 m (broadband: rms at 1 m, folded into fir). */
  amplitude: number;
  /** Broadband: the band-pass taps (unit-variance output) × rms at 1 m. */
  fir: Float64Array;
  /** Tonal: cycles per sample, and the fraction of cycles per 2^24 samples. */
  cyclesPerSample: number;
  cyclesPer2p24: number;
  /** Moving sources: retarded-time steps per microphone from the array origin's solution. */
  micSteps: number;
  /** Fixed sources: per microphone coefficients (M × taps, 1/r folded in), read offsets, delays. */
  coeffs: Float64Array;
  offsets: Int32Array;
  delays: Float64Array;
}

export interface SiteSceneSimulatorOptions {
  scene: SiteScene;
  /** The array; it must have a pose. */
  geometry: ArrayGeometry;
  sampleRateHz: number;
  blockFrames: number;
  /** uint32; the emitted waveforms depend on it and on the source names only. Default 1. */
  seed?: number;
  streamId?: number;
  /** First sample index; default the UTC index of now. */
  startIndex?: number;
}

export interface SiteSceneTruth {
  name: string;
  kind: 'broadband' | 'tonal';
  /** Site position now (at the sample time), metres. */
  positionM: [number, number, number];
  /** From the array's origin: range, site azimuth, and azimuth in the array's own frame. */
  rangeM: number;
  siteAzimuthDeg: number;
  arrayAzimuthDeg: number;
  elevationDeg: number;
  /** Level at the array's origin from spreading alone, dBFS. */
  levelDb: number;
}

function sceneError(message: string): ConfigError {
  return new ConfigError([{ path: 'simulator.scene', value: null, message: `simulator.scene: ${message}` }]);
}

/**
 * Renders blocks of one array's view of a site scene. Plan once, render many: scratch is
 * allocated in the constructor; next() allocates only the block it returns (the bus keeps it).
 */
export class SiteSceneSimulator {
  readonly scene: SiteScene;
  readonly geometry: ArrayGeometry;
  readonly pose: Pose;
  readonly sampleRateHz: number;
  readonly blockFrames: number;
  readonly seed: number;
  readonly streamId: number;
  readonly channels: number;
  readonly speedOfSoundMps: number;
  /** Microphones' site positions, metres. */
  readonly micX: Float64Array;
  readonly micY: Float64Array;
  readonly micZ: Float64Array;
  readonly #fd = new FractionalDelay();
  readonly #sources: SourceState[] = [];
  readonly #noiseKeys: Uint32Array;
  readonly #noiseRms: number;
  readonly #maxChunks: number;
  /** Per (microphone, chunk) delay (samples) and gain of the current moving source. */
  readonly #chunkDelay: Float64Array;
  readonly #chunkGain: Float64Array;
  readonly #coeffScratch: Float64Array;
  readonly #window: Float64Array;
  readonly #white: Float64Array;
  readonly #mix: Float64Array;
  readonly #pos = new Float64Array(3);
  #sampleIndex: number;
  #discontinuity = false;
  #rendered = false;

  constructor(options: SiteSceneSimulatorOptions) {
    const { scene, geometry, sampleRateHz: fs, blockFrames } = options;
    const pose = geometry.pose;
    if (!pose) throw sceneError(`the array "${geometry.name}" has no pose: a site scene needs the array's "pose": { "positionM": [x, y, z], "headingDeg": h } in its array file`);
    if (!Number.isFinite(fs) || fs < 8000 || fs > 384000) throw sceneError(`sample rate ${fs} Hz outside 8000–384000`);
    if (!Number.isInteger(blockFrames) || blockFrames < 1 || blockFrames > 65536) throw sceneError(`blockFrames ${blockFrames} outside 1–65536`);
    const seed = options.seed ?? 1;
    if (!Number.isInteger(seed) || seed < 0 || seed > 0xffffffff) throw sceneError(`seed ${seed} is not a uint32`);
    const start = options.startIndex ?? utcSampleIndex(Date.now(), fs);
    if (!Number.isSafeInteger(start) || start < 0) throw sceneError(`startIndex ${start} is not a non-negative integer`);
    this.scene = scene;
    this.geometry = geometry;
    this.pose = pose;
    this.sampleRateHz = fs;
    this.blockFrames = blockFrames;
    this.seed = seed;
    this.streamId = options.streamId ?? 0;
    this.speedOfSoundMps = scene.speedOfSoundMps;
    this.#sampleIndex = start;
    const m = geometry.positions.length;
    this.channels = m;
    const h = (pose.headingDeg * Math.PI) / 180;
    const ch = Math.cos(h);
    const sh = Math.sin(h);
    this.micX = new Float64Array(m);
    this.micY = new Float64Array(m);
    this.micZ = new Float64Array(m);
    let maxR = 0;
    geometry.positions.forEach((p, i) => {
      this.micX[i] = pose.positionM[0] + ch * p[0] - sh * p[1];
      this.micY[i] = pose.positionM[1] + sh * p[0] + ch * p[1];
      this.micZ[i] = pose.positionM[2] + p[2];
      maxR = Math.max(maxR, Math.hypot(p[0], p[1], p[2]));
    });
    const taps = this.#fd.taps;
    const c = this.speedOfSoundMps;
    for (const spec of scene.sources) {
      const sig = spec.signal;
      if (sig.kind === 'broadband' && sig.lowHz >= 0.45 * fs) throw sceneError(`source "${spec.name}": lowHz ${sig.lowHz} is not below 0.45·fs = ${0.45 * fs} Hz`);
      if (sig.kind === 'tonal' && sig.frequencyHz >= 0.45 * fs) throw sceneError(`source "${spec.name}": frequencyHz ${sig.frequencyHz} is not below 0.45·fs = ${0.45 * fs} Hz`);
      const level = 10 ** (spec.levelDbAt1m / 20);
      const st: SourceState = {
        spec, trajectory: new Trajectory(spec, fs), key: mix32(seed ^ mix32(fnv1a(spec.name))), broadband: sig.kind === 'broadband',
        amplitude: sig.kind === 'broadband' ? level : Math.SQRT2 * level,
        fir: sig.kind === 'broadband' ? bandPass(sig.lowHz / fs, Math.min(sig.highHz, 0.45 * fs) / fs).map((x) => x * level) : new Float64Array(0),
        cyclesPerSample: 0, cyclesPer2p24: 0, micSteps: 1,
        coeffs: new Float64Array(m * taps), offsets: new Int32Array(m), delays: new Float64Array(m),
      };
      if (spec.path) {
        // After N range evaluations the delay is off by (v/c)^N × the starting error.
        const ratio = spec.path.speedMps / c;
        const start = maxR / c + ORIGIN_CONVERGED_SAMPLES / fs;
        st.micSteps = Math.min(20, Math.max(1, Math.ceil(Math.log(RETARDED_TOLERANCE_S / start) / Math.log(ratio))));
      }
      if (sig.kind === 'tonal') {
        st.cyclesPerSample = sig.frequencyHz / fs;
        const whole = st.cyclesPerSample * TWO_POW_24;
        st.cyclesPer2p24 = whole - Math.floor(whole);
      }
      if (st.trajectory.fixed) {
        const [sx, sy, sz] = spec.positionM!;
        for (let i = 0; i < m; i++) {
          const r = Math.hypot(this.micX[i] - sx, this.micY[i] - sy, this.micZ[i] - sz);
          st.delays[i] = (r / c) * fs;
          st.offsets[i] = this.#fd.design(st.coeffs, st.delays[i], 1 / Math.max(r, MIN_RANGE_M), i * taps);
        }
      }
      this.#sources.push(st);
    }
    this.#noiseRms = scene.noiseDbfs === null ? 0 : 10 ** (scene.noiseDbfs / 20);
    const arrayKey = fnv1a(JSON.stringify([geometry.name, pose]));
    this.#noiseKeys = new Uint32Array(m);
    for (let i = 0; i < m; i++) this.#noiseKeys[i] = mix32(seed ^ mix32(arrayKey ^ mix32(i + 0x5bd1e995)));
    this.#maxChunks = Math.ceil(blockFrames / MOVING_UPDATE_FRAMES) + 1;
    this.#chunkDelay = new Float64Array(m * this.#maxChunks);
    this.#chunkGain = new Float64Array(m * this.#maxChunks);
    this.#coeffScratch = new Float64Array(taps);
    // Longest window of emitted samples one block reads: the block, the spread of delays over the
    // aperture and over the source's motion during the block (both sides), and the filter.
    const spread = Math.ceil((2 * maxR * fs) / c) + Math.ceil((2 * blockFrames * MAX_SOURCE_SPEED_MPS) / c) + 4;
    const windowLength = blockFrames + spread + taps + 4;
    this.#window = new Float64Array(windowLength);
    this.#white = new Float64Array(windowLength + BAND_FIR_TAPS);
    this.#mix = new Float64Array(m * blockFrames);
  }

  /** Sample index of the first sample the next block will carry. */
  get sampleIndex(): number {
    return this.#sampleIndex;
  }

  /** Renders the next contiguous block (a new Float32Array, planar channels). */
  next(): Block {
    const frames = this.blockFrames;
    const data = new Float32Array(this.channels * frames);
    const start = this.#sampleIndex;
    this.renderInto(data, start);
    this.#sampleIndex = start + frames;
    this.#rendered = true;
    const discontinuity = this.#discontinuity;
    this.#discontinuity = false;
    return { streamId: this.streamId, sampleIndex: start, sampleRateHz: this.sampleRateHz, channels: this.channels, frames, data, gap: false, discontinuity };
  }

  /** Jumps the clock forward (the real-time driver after a stall); the next block is flagged. */
  skip(frames: number): void {
    if (!Number.isInteger(frames) || frames < 0) throw new RangeError(`SiteSceneSimulator.skip: frames must be a non-negative integer, got ${frames}`);
    if (frames === 0) return;
    this.#sampleIndex += frames;
    this.#discontinuity = true;
  }

  /** Moves the clock to `sampleIndex` (the UTC index when streaming starts). Flagged if blocks were already rendered. */
  seek(sampleIndex: number): void {
    if (!Number.isSafeInteger(sampleIndex) || sampleIndex < 0) throw new RangeError(`SiteSceneSimulator.seek: ${sampleIndex} is not a non-negative integer`);
    if (sampleIndex === this.#sampleIndex) return;
    this.#sampleIndex = sampleIndex;
    if (this.#rendered) this.#discontinuity = true;
  }

  /**
   * Renders blockFrames samples from sample index n0 into out (planar, channels × blockFrames).
   * Allocation-free. The result depends only on (scene, seed, array, n0): never on earlier calls.
   */
  renderInto(out: Float32Array, n0: number): void {
    const frames = this.blockFrames;
    const m = this.channels;
    if (out.length < m * frames) throw new RangeError(`SiteSceneSimulator.renderInto: out needs ${m * frames} samples`);
    const mix = this.#mix;
    // Self-noise first (it initialises the mix), then each source: one summation order everywhere.
    const sigma = this.#noiseRms * SQRT3;
    for (let ch = 0; ch < m; ch++) {
      const base = ch * frames;
      if (sigma === 0) {
        mix.fill(0, base, base + frames);
        continue;
      }
      const key = this.#noiseKeys[ch];
      let hi = -1;
      let hiKey = 0;
      for (let i = 0; i < frames; i++) {
        const n = n0 + i;
        const nHi = Math.floor(n / TWO_POW_32);
        if (nHi !== hi) {
          hi = nHi;
          hiKey = mix32(nHi ^ key);
        }
        const u = mix32(mix32((n - nHi * TWO_POW_32) ^ hiKey) ^ key);
        mix[base + i] = sigma * ((u + 0.5) / TWO_POW_32 * 2 - 1);
      }
    }
    for (const st of this.#sources) this.#renderSource(st, n0);
    for (let i = 0; i < m * frames; i++) out[i] = mix[i];
  }

  /**
   * The emitted waveform of a source (its level at 1 m) for sample indices n0 … n0+count−1: the same
   * on every array. For checks and diagnostics; allocates its result.
   */
  emitted(sourceName: string, n0: number, count: number): Float64Array {
    const st = this.#sources.find((x) => x.spec.name === sourceName);
    if (st === undefined) throw new RangeError(`SiteSceneSimulator.emitted: no source named ${JSON.stringify(sourceName)}`);
    const out = new Float64Array(count);
    const step = this.#window.length;
    for (let k = 0; k < count; k += step) {
      const w = Math.min(step, count - k);
      this.#emit(st, n0 + k, w);
      out.set(this.#window.subarray(0, w), k);
    }
    return out;
  }

  /** The sources' positions and their bearings from this array at a sample index. */
  truth(sampleIndex: number): SiteSceneTruth[] {
    const p = new Float64Array(3);
    const pose = this.pose;
    return this.#sources.map((st) => {
      st.trajectory.at(sampleIndex, p);
      const dx = p[0] - pose.positionM[0];
      const dy = p[1] - pose.positionM[1];
      const dz = p[2] - pose.positionM[2];
      const r = Math.hypot(dx, dy, dz);
      const siteAz = wrap360((Math.atan2(dy, dx) * 180) / Math.PI);
      return {
        name: st.spec.name, kind: st.spec.signal.kind, positionM: [p[0], p[1], p[2]] as [number, number, number], rangeM: r,
        siteAzimuthDeg: siteAz, arrayAzimuthDeg: wrap360(siteAz - pose.headingDeg),
        elevationDeg: (Math.atan2(dz, Math.hypot(dx, dy)) * 180) / Math.PI,
        levelDb: st.spec.levelDbAt1m - 20 * Math.log10(Math.max(r, MIN_RANGE_M)),
      };
    });
  }

  /** For status: the scene, this array's pose, and the sources as heard from here now. */
  describe(): Record<string, unknown> {
    const s = this.scene;
    const truth = this.truth(this.#sampleIndex);
    const sources = s.sources.map((src, i) => ({
      name: src.name, kind: src.signal.kind, levelDbAt1m: src.levelDbAt1m,
      what: src.signal.kind === 'broadband' ? `band noise ${src.signal.lowHz}–${src.signal.highHz} Hz` : `tone ${src.signal.frequencyHz} Hz`,
      motion: src.path ? `${src.path.loop ? 'round' : 'there and back along'} ${src.path.pointsM.length} points at ${src.path.speedMps} m/s` : `fixed at [${src.positionM!.join(', ')}] m`,
      rangeM: round2(truth[i].rangeM), arrayAzimuthDeg: round2(truth[i].arrayAzimuthDeg),
    }));
    return {
      kind: 'site-scene', scene: s.name, clock: 'utc', array: this.geometry.name, channels: this.channels, pose: this.pose,
      sampleRateHz: this.sampleRateHz, speedOfSoundMps: this.speedOfSoundMps, seed: this.seed, noiseDbfs: s.noiseDbfs, sources,
      summary: `site scene ${s.name} heard by ${this.geometry.name} at [${this.pose.positionM.join(', ')}] m, heading ${this.pose.headingDeg}°: ` +
        sources.map((x) => `${x.name} (${x.what}, ${x.levelDbAt1m} dBFS at 1 m) ${x.rangeM} m at array azimuth ${x.arrayAzimuthDeg}°`).join('; '),
    };
  }

  /** Accumulates one source into #mix for the block starting at n0. */
  #renderSource(st: SourceState, n0: number): void {
    const frames = this.blockFrames;
    const m = this.channels;
    const fd = this.#fd;
    const taps = fd.taps;
    const half = taps / 2;
    const U = MOVING_UPDATE_FRAMES;
    const firstChunk = Math.floor(n0 / U);
    const chunks = Math.floor((n0 + frames - 1) / U) - firstChunk + 1;
    const cd = this.#chunkDelay;
    const cg = this.#chunkGain;
    let dMin = Infinity;
    let dMax = -Infinity;
    if (st.trajectory.fixed) {
      for (let ch = 0; ch < m; ch++) {
        const d = st.delays[ch];
        if (d < dMin) dMin = d;
        if (d > dMax) dMax = d;
      }
    } else {
      const c = this.speedOfSoundMps;
      const k = this.sampleRateHz / c;
      const p = this.#pos;
      const [ox, oy, oz] = this.pose.positionM;
      for (let j = 0; j < chunks; j++) {
        // Middle of the chunk's samples on the absolute grid.
        const t = (firstChunk + j) * U + (U - 1) / 2;
        // Retarded time at the array's origin from t_e = t; each microphone then starts from it
        // (within the aperture / c of its own) and needs fewer steps.
        let teOrigin = t;
        for (let it = 0; it < RETARDED_STEPS; it++) {
          st.trajectory.at(teOrigin, p);
          const dx = ox - p[0];
          const dy = oy - p[1];
          const dz = oz - p[2];
          const next = t - Math.sqrt(dx * dx + dy * dy + dz * dz) * k;
          const step = next - teOrigin;
          teOrigin = next;
          if (step < ORIGIN_CONVERGED_SAMPLES && step > -ORIGIN_CONVERGED_SAMPLES) break;
        }
        for (let ch = 0; ch < m; ch++) {
          const qx = this.micX[ch];
          const qy = this.micY[ch];
          const qz = this.micZ[ch];
          let te = teOrigin;
          let r = 0;
          for (let it = 0; it < st.micSteps; it++) {
            st.trajectory.at(te, p);
            const dx = qx - p[0];
            const dy = qy - p[1];
            const dz = qz - p[2];
            r = Math.sqrt(dx * dx + dy * dy + dz * dz);
            te = t - r * k;
          }
          const d = r * k;
          cd[ch * this.#maxChunks + j] = d;
          cg[ch * this.#maxChunks + j] = 1 / Math.max(r, MIN_RANGE_M);
          if (d < dMin) dMin = d;
          if (d > dMax) dMax = d;
        }
      }
    }
    // Emitted samples read: n − floor(D) − taps/2 … n − floor(D) + taps/2 − 1.
    const ws = n0 - Math.floor(dMax) - half;
    const we = n0 + frames - 1 - Math.floor(dMin) + half;
    const w = we - ws + 1;
    if (w > this.#window.length) throw new RangeError(`SiteSceneSimulator: window of ${w} samples exceeds ${this.#window.length}`);
    this.#emit(st, ws, w);
    const win = this.#window;
    const mix = this.#mix;
    for (let ch = 0; ch < m; ch++) {
      const outBase = ch * frames;
      if (st.trajectory.fixed) {
        accumulateWindow(mix, outBase, frames, win, n0 - st.offsets[ch] - taps + 1 - ws, st.coeffs, ch * taps, taps);
        continue;
      }
      for (let j = 0; j < chunks; j++) {
        const c0 = (firstChunk + j) * U;
        const i0 = Math.max(c0 - n0, 0);
        const i1 = Math.min(c0 + U - n0, frames);
        const o = fd.design(this.#coeffScratch, cd[ch * this.#maxChunks + j], cg[ch * this.#maxChunks + j], 0);
        accumulateWindow(mix, outBase + i0, i1 - i0, win, n0 + i0 - o - taps + 1 - ws, this.#coeffScratch, 0, taps);
      }
    }
  }

  /** Writes the emitted waveform (level at 1 m) for sample indices ws … ws+w−1 into #window. */
  #emit(st: SourceState, ws: number, w: number): void {
    const win = this.#window;
    if (!st.broadband) {
      const a = st.amplitude;
      const f = st.cyclesPerSample;
      const fHi = st.cyclesPer2p24;
      for (let i = 0; i < w; i++) {
        const n = ws + i;
        // Exact phase at any index: n = hi·2^24 + lo; cycles = frac(f·lo) + frac(frac(f·2^24)·hi).
        const hi = Math.floor(n / TWO_POW_24);
        const lo = n - hi * TWO_POW_24;
        const c1 = f * lo;
        const c2 = fHi * hi;
        const cyc = c1 - Math.floor(c1) + (c2 - Math.floor(c2));
        win[i] = a * Math.sin(2 * Math.PI * cyc);
      }
      return;
    }
    const fir = st.fir;
    const L = fir.length;
    const white = this.#white;
    const key = st.key;
    const first = ws - L + 1;
    let hi = -1;
    let hiKey = 0;
    for (let i = 0; i < w + L - 1; i++) {
      const n = first + i;
      const nHi = Math.floor(n / TWO_POW_32);
      if (nHi !== hi) {
        hi = nHi;
        hiKey = mix32(nHi ^ key);
      }
      const u = mix32(mix32((n - nHi * TWO_POW_32) ^ hiKey) ^ key);
      // Uniform on (−√3, √3): unit variance; the band-pass makes it Gaussian enough.
      white[i] = ((u + 0.5) / TWO_POW_32 * 2 - 1) * SQRT3;
    }
    // win[i] = a · Σ_l fir[l] · white[i + L − 1 − l]; the FIR is symmetric, so = Σ_l (a·fir[l])·white[i + l]
    // (the amplitude is folded into st.fir at construction).
    win.fill(0, 0, w);
    accumulateWindow(win, 0, w, white, 0, fir, 0, L);
  }
}

function round2(x: number): number {
  return Math.round(x * 100) / 100;
}
