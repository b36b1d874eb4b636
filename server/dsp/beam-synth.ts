/**
 * Steered-beam audio: one beam y(k) = wᴴ(k) x(k) per STFT snapshot, resynthesised by weighted
 * overlap-add into hop-sized blocks of samples.
 *
 * Pipeline per hop (snapshots from {@link MultiChannelStft}, layout [(k·M + m)·2]):
 * 1. Weight smoothing. setWeights() sets a target; the applied weights follow it once per hop with
 *    the first-order recursion w ← w + α (w_target − w), α = 1 − exp(−hop / (fs·τ)), so a step in
 *    the target reaches 1 − e⁻¹ of the way after τ seconds (one time constant) and its residual
 *    after n hops is exactly (1 − α)ⁿ of the step. The very first setWeights() (and the first after
 *    reset(): there is nothing to glide from) is applied at once. τ = 0 applies every target at once.
 *    The overlap-add itself already cross-fades between frames over one hop (the synthesis windows
 *    overlap); the recursion spreads a large change over many hops so it is heard as a glide, not a
 *    switch.
 * 2. Beam: y(k) = Σ_m conj(w_m(k)) x_m(k) for the band bins startBin … startBin + count − 1 — the
 *    bins the weights cover (MVDR or delay-and-sum from {@link BeamWeights}; J. Capon, Proc. IEEE
 *    57(8), 1969; H. L. Van Trees, Optimum Array Processing, Wiley 2002, ch. 2 and 6). Every bin
 *    outside the band is ZERO: the beam is band-limited to the band the weights were designed for,
 *    and no reference channel is passed through outside it (that would let the unsuppressed
 *    interferer back in at those frequencies).
 * 3. Resynthesis by {@link WolaSynthesizer} (square-root Hann analysis and synthesis windows at hop
 *    N/2, perfect reconstruction by weighted overlap-add: J. B. Allen & L. R. Rabiner, Proc. IEEE
 *    65(11), 1977). Output sample n corresponds to input sample n − {@link latencySamples}
 *    (N − hop); with w = e_m on every bin the output is channel m delayed by that latency.
 * 4. Linear gain, then (optional, off by default) a peak limiter with ceiling −1 dBFS
 *    (10^(−1/20) ≈ 0.891 of full scale 1.0). It has no look-ahead, so it adds no latency:
 *    - a peak envelope follows |y| with an attack and a release time constant
 *      (e ← e + a (|y| − e), a = 1 − exp(−1/(fs·t)), t = attack when |y| > e, else release);
 *    - the gain is min(1, ceiling / e): transparent while the signal stays below the ceiling,
 *      then a gain ride that recovers with the release time;
 *    - with attack 0 (the default) the envelope catches a new peak on its first sample, so |g·y|
 *      never exceeds the ceiling; with attack > 0 the envelope lags a rising peak by about the
 *      attack time, and each sample is finally clamped to ±ceiling to keep the guarantee.
 *    Without look-ahead a limiter can only clip or overshoot the rising edge of a new, louder peak.
 *    Measured here on band-limited noise driven 7.6 dB over the ceiling (gain 10, 200–8000 Hz):
 *    the share of output samples at the ceiling is about 0.2 % with attack 0, 0.8 % at 0.1 ms and
 *    3.9 % at 1 ms (attack 0 and 1 ms are checked in test/unit/beam-synth.test.ts), so the instant
 *    attack distorts least and is the default.
 *
 * Planned once: every buffer is allocated in the constructor; process() allocates nothing.
 */
import { WolaSynthesizer } from './stft.ts';

/** The limiter's ceiling: −1 dBFS, as a linear amplitude re full scale 1.0. */
export const LIMITER_CEILING_DBFS = -1;
export const LIMITER_CEILING = Math.pow(10, LIMITER_CEILING_DBFS / 20);
/** Default weight-smoothing time constant, seconds. */
export const DEFAULT_SMOOTHING_S = 0.05;
/** Default limiter attack time constant, seconds: 0, instant (see the module comment). */
export const DEFAULT_LIMITER_ATTACK_S = 0;
/** Default limiter release time constant, seconds. */
export const DEFAULT_LIMITER_RELEASE_S = 0.1;
/** Largest linear gain accepted (+60 dB). */
export const MAX_BEAM_GAIN = 1000;

/** Limiter time constants. */
export interface LimiterOptions {
  /** Attack time constant in seconds, 0…10 (0: the envelope jumps to a new peak at once). Default 0. */
  attackS?: number;
  /** Release time constant in seconds, 1 µs…60 s. Default 100 ms. */
  releaseS?: number;
}

/** Options of {@link BeamSynthesizer}. */
export interface BeamSynthesizerOptions {
  /** M, channels of the snapshots, integer 1…1024. */
  channels: number;
  /** N, the STFT size of the snapshots (power of two, 256…4096); hop N/2. */
  fftSize: number;
  /** The band the weights cover: bins startBin … startBin + count − 1 (count ≥ 1, inside 0…N/2). */
  bins: { startBin: number; count: number };
  /** fs in Hz, > 0 (turns the time constants into per-hop and per-sample coefficients). */
  sampleRateHz: number;
  /** Weight-smoothing time constant τ in seconds, ≥ 0; default 0.05. 0: targets apply at once. */
  smoothingS?: number;
  /** Linear output gain, 0…1000; default 1. */
  gain?: number;
  /** true or time constants: enable the −1 dBFS peak limiter; default off. */
  limiter?: boolean | LimiterOptions;
}

type Samples = Float32Array | Float64Array;

function requireFiniteIn(name: string, value: unknown, min: number, max: number): asserts value is number {
  if (typeof value !== 'number') throw new TypeError(`${name} must be a number, got ${typeof value}`);
  if (!(value >= min && value <= max)) throw new RangeError(`${name} must be in ${min}…${max}, got ${value}`);
}

/** Per-step coefficient 1 − exp(−step/τ) of a first-order smoother with time constant τ (0 → 1). */
function smoothingCoefficient(stepS: number, tauS: number): number {
  return tauS === 0 ? 1 : 1 - Math.exp(-stepS / tauS);
}

/**
 * One beam, resynthesised. Not re-entrant across streams: one instance per output stream (it owns
 * the overlap-add accumulator, the applied weights and the limiter envelope).
 */
export class BeamSynthesizer {
  readonly channels: number;
  readonly fftSize: number;
  readonly hop: number;
  /** N/2 + 1, bins per snapshot. */
  readonly bins: number;
  readonly sampleRateHz: number;
  /** First band bin. */
  readonly startBin: number;
  /** Band bins. */
  readonly count: number;
  /** Weight-smoothing time constant τ, seconds. */
  readonly smoothingS: number;
  /** Per-hop smoothing coefficient α = 1 − exp(−hop/(fs·τ)). */
  readonly alpha: number;
  /** Output delay relative to the analysed input, N − hop samples (from the WOLA). */
  readonly latencySamples: number;
  /** Length of the weight vector setWeights() takes, count·M·2. */
  readonly weightsLength: number;
  readonly #wola: WolaSynthesizer;
  readonly #target: Float64Array;
  readonly #applied: Float64Array;
  readonly #spectrum: Float64Array; // 2·bins; entries outside the band stay 0
  readonly #hopOut: Float64Array;
  #hasWeights = false;
  #pendingImmediate = false;
  #settled = true;
  #gain = 1;
  #limiterOn = false;
  #attack = 1;
  #release = 1;
  #envelope = 0;

  constructor(options: BeamSynthesizerOptions) {
    const { channels, fftSize, bins, sampleRateHz } = options;
    if (!Number.isInteger(channels) || channels < 1 || channels > 1024) {
      throw new RangeError(`channels must be an integer in 1…1024, got ${channels}`);
    }
    if (!(sampleRateHz > 0) || !Number.isFinite(sampleRateHz)) {
      throw new RangeError(`sampleRateHz must be a finite number > 0, got ${sampleRateHz}`);
    }
    this.#wola = new WolaSynthesizer(fftSize); // validates fftSize
    this.channels = channels;
    this.fftSize = fftSize;
    this.hop = this.#wola.hop;
    this.bins = this.#wola.bins;
    this.sampleRateHz = sampleRateHz;
    this.latencySamples = this.#wola.latencySamples;
    if (typeof bins !== 'object' || bins === null) throw new TypeError('bins must be { startBin, count }');
    const { startBin, count } = bins;
    if (!Number.isInteger(startBin) || !Number.isInteger(count) || startBin < 0 || count < 1 || startBin + count > this.bins) {
      throw new RangeError(`bins must be integers with startBin ≥ 0, count ≥ 1, startBin + count ≤ ${this.bins}; got startBin ${startBin}, count ${count}`);
    }
    this.startBin = startBin;
    this.count = count;
    const smoothingS = options.smoothingS ?? DEFAULT_SMOOTHING_S;
    requireFiniteIn('smoothingS', smoothingS, 0, 3600);
    this.smoothingS = smoothingS;
    this.alpha = smoothingCoefficient(this.hop / sampleRateHz, smoothingS);
    this.weightsLength = 2 * count * channels;
    this.#target = new Float64Array(this.weightsLength);
    this.#applied = new Float64Array(this.weightsLength);
    this.#spectrum = new Float64Array(2 * this.bins);
    this.#hopOut = new Float64Array(this.hop);
    this.setGain(options.gain ?? 1);
    const lim = options.limiter ?? false;
    this.setLimiter(lim !== false, typeof lim === 'object' ? lim : {});
  }

  /** The weights applied at the last process() (count·M·2, per band bin then channel). Read-only view. */
  get appliedWeights(): Float64Array {
    return this.#applied;
  }

  /** Whether setWeights() has been called since construction or reset(); before it, output is silence. */
  get hasWeights(): boolean {
    return this.#hasWeights;
  }

  /** Linear output gain. */
  get gain(): number {
    return this.#gain;
  }

  /** Whether the limiter is on. */
  get limiterEnabled(): boolean {
    return this.#limiterOn;
  }

  /** @param gain linear, 0…1000 */
  setGain(gain: number): void {
    requireFiniteIn('gain', gain, 0, MAX_BEAM_GAIN);
    this.#gain = gain;
  }

  /**
   * Turn the −1 dBFS peak limiter on or off (see the module comment). Switching it on starts with
   * a released envelope.
   */
  setLimiter(enabled: boolean, options: LimiterOptions = {}): void {
    if (typeof enabled !== 'boolean') throw new TypeError(`limiter enabled must be a boolean, got ${typeof enabled}`);
    const attackS = options.attackS ?? DEFAULT_LIMITER_ATTACK_S;
    const releaseS = options.releaseS ?? DEFAULT_LIMITER_RELEASE_S;
    requireFiniteIn('limiter.attackS', attackS, 0, 10);
    requireFiniteIn('limiter.releaseS', releaseS, 1e-6, 60);
    const dt = 1 / this.sampleRateHz;
    this.#attack = smoothingCoefficient(dt, attackS);
    this.#release = smoothingCoefficient(dt, releaseS);
    if (enabled && !this.#limiterOn) this.#envelope = 0;
    this.#limiterOn = enabled;
  }

  /**
   * New target weights; the applied weights glide toward them (module comment, step 1). The first
   * call after construction or reset() applies them at once.
   * @param w length ≥ count·M·2: weight of band bin b (0…count−1), channel m at w[(b·M + m)·2] (re)
   *   and the next index (im) — i.e. the full-length M-vectors of {@link BeamWeights.compute}
   *   (zeros at masked channels) one after another; copied; must be finite
   */
  setWeights(w: Float64Array): void {
    const n = this.weightsLength;
    if (!(w instanceof Float64Array)) throw new TypeError('weights must be a Float64Array');
    if (w.length < n) throw new RangeError(`weights must have length ≥ count·M·2 = ${n}, got ${w.length}`);
    for (let i = 0; i < n; i++) {
      const v = w[i];
      if (!(v - v === 0)) {
        const bin = Math.floor(i / (2 * this.channels));
        const channel = Math.floor(i / 2) % this.channels;
        throw new RangeError(`weight at band bin ${bin}, channel ${channel} is not finite: ${v}`);
      }
    }
    const target = this.#target;
    for (let i = 0; i < n; i++) target[i] = w[i];
    if (!this.#hasWeights) {
      this.#hasWeights = true;
      this.#pendingImmediate = true;
    }
    this.#settled = false;
  }

  /** Start a new stream: clears the overlap-add, the limiter envelope and the weights (silence until setWeights). */
  reset(): void {
    this.#wola.reset();
    this.#envelope = 0;
    this.#target.fill(0);
    this.#applied.fill(0);
    this.#hasWeights = false;
    this.#pendingImmediate = false;
    this.#settled = true;
  }

  /**
   * One hop: smooth the weights, form the beam on the band bins, overlap-add, gain and limiter.
   * @param snapshot length ≥ 2·bins·M, MultiChannelStft layout (X_m[k] at [(k·M + m)·2]); unchanged
   * @param out length ≥ hop; receives hop output samples (full scale ±1.0); must not be `snapshot`
   * @param snapshotOffset index of X_0[0].re in `snapshot` (e.g. a slot of the engine's shared ring)
   */
  process(snapshot: Float64Array | Float32Array, out: Samples, snapshotOffset = 0): void {
    const M = this.channels;
    const hop = this.hop;
    if (snapshot.length < snapshotOffset + 2 * this.bins * M) {
      throw new RangeError(`snapshot must have length ≥ 2·bins·channels = ${2 * this.bins * M}, got ${snapshot.length}`);
    }
    if (out.length < hop) throw new RangeError(`out must have length ≥ hop = ${hop}, got ${out.length}`);
    this.#smooth();
    const w = this.#applied;
    const spec = this.#spectrum;
    const start = this.startBin;
    const count = this.count;
    const m2 = 2 * M;
    for (let b = 0; b < count; b++) {
      const xo = snapshotOffset + (start + b) * m2;
      const wo = b * m2;
      let re = 0;
      let im = 0;
      for (let i = 0; i < m2; i += 2) {
        const wr = w[wo + i];
        const wi = w[wo + i + 1];
        const xr = snapshot[xo + i];
        const xi = snapshot[xo + i + 1];
        re += wr * xr + wi * xi; // conj(w)·x
        im += wr * xi - wi * xr;
      }
      spec[2 * (start + b)] = re;
      spec[2 * (start + b) + 1] = im;
    }
    const y = this.#hopOut;
    this.#wola.push(spec, y);
    const g = this.#gain;
    if (!this.#limiterOn) {
      for (let i = 0; i < hop; i++) out[i] = g * y[i];
      return;
    }
    const ceiling = LIMITER_CEILING;
    const attack = this.#attack;
    const release = this.#release;
    let env = this.#envelope;
    for (let i = 0; i < hop; i++) {
      let s = g * y[i];
      const a = s < 0 ? -s : s;
      env += (a > env ? attack : release) * (a - env);
      if (env > ceiling) s *= ceiling / env;
      if (s > ceiling) s = ceiling;
      else if (s < -ceiling) s = -ceiling;
      out[i] = s;
    }
    this.#envelope = env;
  }

  /** One step of w ← w + α (w_target − w); exact copy on the first weights or once within rounding. */
  #smooth(): void {
    if (this.#settled) return;
    const target = this.#target;
    const w = this.#applied;
    const n = this.weightsLength;
    if (this.#pendingImmediate || this.alpha === 1) {
      for (let i = 0; i < n; i++) w[i] = target[i];
      this.#pendingImmediate = false;
      this.#settled = true;
      return;
    }
    const alpha = this.alpha;
    let moved = false;
    for (let i = 0; i < n; i++) {
      const before = w[i];
      const after = before + alpha * (target[i] - before);
      w[i] = after;
      if (after !== before) moved = true;
    }
    // Stop the per-hop loop once no weight changes any more (the recursion has hit rounding).
    if (!moved) this.#settled = true;
  }
}
