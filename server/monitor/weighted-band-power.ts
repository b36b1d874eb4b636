/**
 * Band power of one STFT frame as a mean square per hop, frequency weighting applied per bin: the
 * value SecondLeq (level-stats.ts) takes for each hop.
 *
 * Conventions of dsp/stft.ts: X[k] = Σ w[n]·x[n]·e^{−j2πkn/N}, unnormalised, w the periodic
 * square-root Hann window, hop N/2, one-sided bins 0 … N/2. The squared window is the periodic Hann
 * window, whose shifts by N/2 sum to exactly 1 (constant overlap-add), so the windowed energies
 * Σ w²[n]·x²[n] of successive frames add up to Σ x²[n]: each frame stands for one hop of signal.
 * By Parseval's theorem for the DFT, Σ_{k=0}^{N−1} |X[k]|² = N·Σ w²x², and for a real signal the
 * bins 1 … N/2 − 1 appear twice in the full spectrum, so
 *   hop mean square = Σ_{k in band} c_k·g_k·|X[k]|² / (N·hop),   c_0 = c_{N/2} = 1, c_k = 2 otherwise,
 * g_k the weighting's power gain at k·fs/N (shared/frequency-weighting.ts). With the whole band
 * (bins 0 … N/2) and Z weighting this is exactly the frame's windowed energy divided by the hop.
 *
 * The frame covering samples [a, a + N) weighs its samples with a Hann window centred at a + N/2;
 * give its hop mean square to the span [a + N/4, a + 3N/4) (hopSpanStart). The levels are
 * indicative: no class-rated meter, no traceable calibration.
 */
import { type WeightingKind, weightingPowerGains } from '../../shared/frequency-weighting.ts';

/** What a WeightedBandPower is planned for. */
export interface WeightedBandPowerOptions {
  /** A, C or Z (IEC 61672-1) */
  weighting: WeightingKind;
  /** N, a multiple of 4 (the project's STFT uses powers of two 256 … 4096); the hop is N/2 */
  fftSize: number;
  sampleRateHz: number;
  /** first bin of the band, integer ≥ 0 (e.g. from dsp/stft.ts bandBinsOf) */
  startBin: number;
  /** bins in the band, integer ≥ 1, startBin + count ≤ N/2 + 1 */
  count: number;
}

/**
 * One band and weighting, planned once: per-bin factors c_k·g_k/(N·hop). Hot methods read their
 * inputs only and allocate nothing; the instance holds no per-call state, so it is re-entrant.
 */
export class WeightedBandPower {
  readonly weighting: WeightingKind;
  readonly fftSize: number;
  /** N/2 samples: the span one frame's mean square stands for */
  readonly hopSamples: number;
  readonly sampleRateHz: number;
  readonly startBin: number;
  readonly count: number;
  /** factors[i] = c_k·g_k/(N·hop) for bin k = startBin + i. Treat as read-only. */
  readonly factors: Float64Array;

  /** @throws TypeError for an unknown weighting, RangeError for sizes out of range */
  constructor(options: WeightedBandPowerOptions) {
    const { weighting, fftSize, sampleRateHz, startBin, count } = options;
    if (!Number.isSafeInteger(fftSize) || fftSize < 4 || fftSize % 4 !== 0) {
      throw new RangeError(`fftSize must be a multiple of 4, ≥ 4, got ${String(fftSize)}`);
    }
    if (!Number.isInteger(count) || count < 1) throw new RangeError(`count must be an integer ≥ 1, got ${String(count)}`);
    // Validates the kind, the rate and the bin range.
    const gains = weightingPowerGains(weighting, fftSize, sampleRateHz, startBin, count);
    this.weighting = weighting;
    this.fftSize = fftSize;
    this.hopSamples = fftSize / 2;
    this.sampleRateHz = sampleRateHz;
    this.startBin = startBin;
    this.count = count;
    const nyquist = fftSize / 2;
    const scale = 1 / (fftSize * this.hopSamples);
    for (let i = 0; i < count; i++) {
      const k = startBin + i;
      gains[i] *= (k === 0 || k === nyquist ? 1 : 2) * scale;
    }
    this.factors = gains;
  }

  /**
   * Hop mean square from per-bin powers |X[k]|² (e.g. a beam's |wᴴx|² per bin).
   * @param binPower binPower[k − firstBin] is the power of bin k; must hold the whole band
   * @param firstBin the bin of binPower[0] (0 when the array holds every bin)
   * @returns full-scale units², ≥ 0 for non-negative powers
   */
  meanSquare(binPower: ArrayLike<number>, firstBin = 0): number {
    const offset = this.startBin - firstBin;
    if (offset < 0 || offset + this.count > binPower.length) {
      throw new RangeError(`binPower (first bin ${firstBin}, length ${binPower.length}) must hold bins ${this.startBin} … ${this.startBin + this.count - 1}`);
    }
    const f = this.factors;
    const n = this.count;
    let sum = 0;
    for (let i = 0; i < n; i++) sum += f[i] * binPower[offset + i];
    return sum;
  }

  /**
   * Hop mean square of the array as one omnidirectional microphone: the mean over channels of each
   * bin's power, from a bin-major snapshot of dsp/stft.ts MultiChannelStft (X_m[k] at
   * snapshot[(k·M + m)·2], interleaved complex, bins 0 … N/2).
   * @param snapshot length ≥ offset + 2·(startBin + count)·channels
   * @param channels M ≥ 1
   * @param offset index of X_0[0].re (a slot of the engine's snapshot ring), default 0
   */
  meanSquareOfSnapshot(snapshot: Float64Array, channels: number, offset = 0): number {
    if (!Number.isInteger(channels) || channels < 1) throw new RangeError(`channels must be an integer ≥ 1, got ${String(channels)}`);
    const stop = offset + 2 * (this.startBin + this.count) * channels;
    if (snapshot.length < stop) {
      throw new RangeError(`snapshot must hold ${this.startBin + this.count} bins × ${channels} channels (${stop} doubles), has ${snapshot.length}`);
    }
    const f = this.factors;
    const n = this.count;
    const perBin = 2 * channels;
    let sum = 0;
    for (let i = 0; i < n; i++) {
      let p = 0;
      const base = offset + (this.startBin + i) * perBin;
      for (let j = base; j < base + perBin; j += 2) {
        const re = snapshot[j];
        const im = snapshot[j + 1];
        p += re * re + im * im;
      }
      sum += f[i] * p;
    }
    return sum / channels;
  }

  /**
   * The first sample of the hop span a frame's mean square stands for: a frame covering samples
   * [frameStartSample, frameStartSample + N) is centred at + N/2 and stands for [+ N/4, + 3N/4).
   */
  hopSpanStart(frameStartSample: number): number {
    return frameStartSample + this.fftSize / 4;
  }
}
