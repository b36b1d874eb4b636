/**
 * Short-time Fourier analysis and weighted overlap-add (WOLA) resynthesis.
 *
 * Conventions (used by every stage after the front end):
 * - FFT size N is a power of two, 256…4096; hop N/2 (50 % overlap).
 * - Window: periodic square-root Hann, w[n] = sin(πn/N), n = 0…N−1. Its square is the periodic
 *   Hann window, which sums to exactly 1 over shifts by N/2 (constant overlap-add), so using w for
 *   both analysis and synthesis reconstructs the input perfectly by overlap-add
 *   (J. B. Allen & L. R. Rabiner, "A unified approach to short-time Fourier analysis and
 *   synthesis", Proc. IEEE 65(11), 1977).
 * - X[k] = Σ_{n=0}^{N−1} w[n] x[n] e^{−j2πkn/N}, no normalisation, bins k = 0…N/2 (N/2 + 1 bins),
 *   bin k centred at k·fs/N Hz. The sign matches dsp/steering.ts: a delayed plane wave
 *   s(t − τ) gives X(f) ≈ S(f)·e^{−j2πfτ}.
 * - Complex data interleaved [re, im, re, im, …] in Float64Array.
 *
 * The FFT itself is fft.js (radix-4, planned once per size); MultiChannelStft.accelerate() switches
 * the streaming analysis to the WebAssembly SIMD transform of dsp/fast/wasm-fft.ts.
 */
import FFT from 'fft.js';
import { PairFft } from './fast/wasm-fft.ts';

/** Smallest FFT size accepted. */
export const MIN_FFT_SIZE = 256;
/** Largest FFT size accepted. */
export const MAX_FFT_SIZE = 4096;

type Samples = Float32Array | Float64Array;

function requireFftSize(fftSize: number): void {
  if (
    !Number.isInteger(fftSize) ||
    fftSize < MIN_FFT_SIZE ||
    fftSize > MAX_FFT_SIZE ||
    (fftSize & (fftSize - 1)) !== 0
  ) {
    throw new RangeError(
      `fftSize must be a power of two in ${MIN_FFT_SIZE}…${MAX_FFT_SIZE}, got ${fftSize}`,
    );
  }
}

/**
 * The periodic square-root Hann window w[n] = sin(πn/N).
 * @param fftSize N, a power of two in 256…4096
 * @returns a new Float64Array of length N
 */
export function sqrtHannWindow(fftSize: number): Float64Array {
  requireFftSize(fftSize);
  const w = new Float64Array(fftSize);
  for (let n = 0; n < fftSize; n++) w[n] = Math.sin((Math.PI * n) / fftSize);
  return w;
}

/**
 * Output delay of the streaming analysis → WOLA chain, in samples: N − hop = N/2. Output sample n
 * of a {@link WolaSynthesizer} fed by a {@link MultiChannelStft} equals input sample n − (N − hop).
 */
export function wolaLatencySamples(fftSize: number): number {
  requireFftSize(fftSize);
  return fftSize - fftSize / 2;
}

/** An inclusive range of STFT bins. */
export interface BinRange {
  /** First bin (inclusive). */
  startBin: number;
  /** Last bin (inclusive); startBin − 1 when the band holds no bin centre. */
  stopBin: number;
  /** Number of bins, stopBin − startBin + 1 (may be 0). */
  count: number;
}

/**
 * The bins of an N-point transform whose centre frequency lies in [loHz, hiHz] (what
 * {@link Stft.bandBins} answers, without a transform: plans are sized before they are built).
 * @param fftSize N @param loHz lower band edge, ≥ 0 @param hiHz upper band edge, ≥ loHz @param sampleRateHz fs, > 0
 */
export function bandBinsOf(fftSize: number, loHz: number, hiHz: number, sampleRateHz: number): BinRange {
  if (!(sampleRateHz > 0) || !Number.isFinite(sampleRateHz)) {
    throw new RangeError(`sampleRateHz must be a finite number > 0, got ${sampleRateHz}`);
  }
  if (!(loHz >= 0) || !Number.isFinite(loHz)) throw new RangeError(`loHz must be finite and ≥ 0, got ${loHz}`);
  if (!(hiHz >= loHz) || !Number.isFinite(hiHz)) {
    throw new RangeError(`hiHz must be finite and ≥ loHz = ${loHz}, got ${hiHz}`);
  }
  const binHz = sampleRateHz / fftSize;
  // A small tolerance so that an edge exactly on a bin centre counts despite rounding.
  const startBin = Math.max(0, Math.ceil(loHz / binHz - 1e-9));
  const stopBin = Math.min(fftSize / 2, Math.floor(hiHz / binHz + 1e-9));
  const count = Math.max(0, stopBin - startBin + 1);
  return { startBin, stopBin: startBin + count - 1, count };
}

/**
 * One planned FFT size: the window, the forward transform of one frame and the windowed inverse
 * of one spectrum. Scratch buffers are owned by the instance; hot methods allocate nothing.
 */
export class Stft {
  /** N, samples per frame. */
  readonly fftSize: number;
  /** Hop between frames, N/2 samples. */
  readonly hop: number;
  /** Number of non-negative-frequency bins, N/2 + 1. */
  readonly bins: number;
  /** The periodic square-root Hann window, length N. Treat as read-only. */
  readonly window: Float64Array;
  readonly #fft: FFT;
  readonly #frame: Float64Array;
  readonly #spectrum: Float64Array;
  readonly #time: Float64Array;

  /** @param fftSize N, a power of two in 256…4096 */
  constructor(fftSize: number) {
    requireFftSize(fftSize);
    this.fftSize = fftSize;
    this.hop = fftSize / 2;
    this.bins = fftSize / 2 + 1;
    this.window = sqrtHannWindow(fftSize);
    this.#fft = new FFT(fftSize);
    this.#frame = new Float64Array(fftSize);
    // fft.js works on full-length complex buffers (2·N doubles) even for real input.
    this.#spectrum = new Float64Array(2 * fftSize);
    this.#time = new Float64Array(2 * fftSize);
  }

  /** Centre frequency of bin k in Hz, k·fs/N. @param k bin, 0…N/2 @param sampleRateHz fs, > 0 */
  binFrequencyHz(k: number, sampleRateHz: number): number {
    return (k * sampleRateHz) / this.fftSize;
  }

  /**
   * The bins whose centre frequency lies in [loHz, hiHz]. At fs = 48 kHz, N = 512 the band
   * 300–6000 Hz gives bins 4…64 (61 bins).
   * @param loHz lower band edge, ≥ 0 @param hiHz upper band edge, ≥ loHz @param sampleRateHz fs, > 0
   */
  bandBins(loHz: number, hiHz: number, sampleRateHz: number): BinRange {
    return bandBinsOf(this.fftSize, loHz, hiHz, sampleRateHz);
  }

  /**
   * Window one frame and transform it.
   * @param out length ≥ 2·bins, interleaved complex; receives X[0…N/2]
   * @param frame raw (unwindowed) samples; reads frame[frameOffset … frameOffset + N − 1]; unchanged
   * @param frameOffset index of the frame's first sample in `frame`
   */
  analyze(out: Float64Array, frame: Samples, frameOffset = 0): void {
    if (out.length < 2 * this.bins) {
      throw new RangeError(`out must have length ≥ 2·bins = ${2 * this.bins}, got ${out.length}`);
    }
    this.analyzeStrided(out, 0, 2, frame, frameOffset);
  }

  /**
   * Like {@link analyze}, but bin k goes to out[outOffset + k·outStride] (re) and the next index
   * (im). Used to write one channel straight into a bin-major multichannel snapshot.
   * @param out receives 2·bins doubles at the strided positions; must not be `frame`
   * @param outOffset index of X[0].re in out
   * @param outStride doubles between consecutive bins, ≥ 2
   * @param frame raw samples, reads N from frameOffset; unchanged
   * @param frameOffset index of the frame's first sample in `frame`
   */
  analyzeStrided(out: Float64Array, outOffset: number, outStride: number, frame: Samples, frameOffset: number): void {
    const n = this.fftSize;
    const bins = this.bins;
    if (!Number.isInteger(frameOffset) || frameOffset < 0 || frameOffset + n > frame.length) {
      throw new RangeError(`frame must hold N = ${n} samples from frameOffset ${frameOffset}, has length ${frame.length}`);
    }
    if (!Number.isInteger(outStride) || outStride < 2) throw new RangeError(`outStride must be an integer ≥ 2, got ${outStride}`);
    if (!Number.isInteger(outOffset) || outOffset < 0 || outOffset + (bins - 1) * outStride + 2 > out.length) {
      throw new RangeError(`out too short for ${bins} bins at offset ${outOffset}, stride ${outStride}: length ${out.length}`);
    }
    const w = this.window;
    const f = this.#frame;
    for (let i = 0; i < n; i++) f[i] = w[i] * frame[frameOffset + i];
    const s = this.#spectrum;
    this.#fft.realTransform(s, f);
    // fft.js fills bins 0…N/2 of its full-length buffer; that is all a real signal needs.
    let o = outOffset;
    for (let k = 0; k < bins; k++) {
      out[o] = s[2 * k];
      out[o + 1] = s[2 * k + 1];
      o += outStride;
    }
  }

  /**
   * Inverse transform of a one-sided spectrum, multiplied by the synthesis window (the same
   * sqrt-Hann): one frame ready for overlap-add. The spectrum is taken as that of a real signal:
   * bins 1…N/2−1 are mirrored as conjugates, and the imaginary parts of bins 0 and N/2 (which a
   * real signal cannot have) are dropped.
   * @param out length ≥ N; receives x[n]·w[n], n = 0…N−1. May be the same array as `spectrum`.
   * @param spectrum length ≥ 2·bins, interleaved complex X[0…N/2]; unchanged unless it is `out`
   */
  synthesize(out: Float64Array, spectrum: Float64Array): void {
    const n = this.fftSize;
    const twoBins = 2 * this.bins;
    if (out.length < n) throw new RangeError(`out must have length ≥ N = ${n}, got ${out.length}`);
    if (spectrum.length < twoBins) {
      throw new RangeError(`spectrum must have length ≥ 2·bins = ${twoBins}, got ${spectrum.length}`);
    }
    const s = this.#spectrum;
    for (let i = 0; i < twoBins; i++) s[i] = spectrum[i];
    this.#fft.completeSpectrum(s);
    const t = this.#time;
    this.#fft.inverseTransform(t, s); // includes the 1/N of the inverse DFT
    const w = this.window;
    for (let i = 0; i < n; i++) out[i] = t[2 * i] * w[i];
  }
}

/**
 * Streaming analysis of M channels on one sample clock: buffers samples per channel and, every hop,
 * emits one snapshot of all bins × channels.
 *
 * Snapshot layout (bin-major, then channel, interleaved complex): X_m[k] is at
 * snapshot[(k·M + m)·2] (re) and snapshot[(k·M + m)·2 + 1] (im); length 2·bins·M. Bin-major puts the
 * vector x(f_k) ∈ C^M that the covariance of bin k needs in one contiguous run.
 *
 * Timing: the analyser starts primed with N − hop zeros, so the first frame covers samples
 * [s₀ − (N − hop), s₀ + hop) where s₀ is the first pushed sample index, and one snapshot leaves per
 * hop of input. This keeps the WOLA output the same length as the input (see
 * {@link WolaSynthesizer}).
 */
export class MultiChannelStft {
  readonly channels: number;
  readonly fftSize: number;
  readonly hop: number;
  readonly bins: number;
  /** Length of a snapshot in doubles, 2·bins·channels. */
  readonly snapshotLength: number;
  readonly #stft: Stft;
  readonly #buffer: Float64Array; // channel c's frame at [c·N, (c+1)·N)
  readonly #snapshot: Float64Array;
  #filled = 0;
  #nextSample: number | null = null;
  #frameStartSample = 0;
  #out: Float64Array | null = null;
  #slot: ((hopStartSample: number) => number) | null = null;
  /** Bins written into `#out` (setOutput); the internal snapshot always gets all bins. */
  #outBins: { startBin: number; count: number };
  /** The WebAssembly transform once accelerate() succeeded; it then holds the frames. */
  #fast: PairFft | null = null;

  /** @param channels M, integer 1…1024 @param fftSize N, a power of two in 256…4096 */
  constructor(channels: number, fftSize: number) {
    if (!Number.isInteger(channels) || channels < 1 || channels > 1024) {
      throw new RangeError(`channels must be an integer in 1…1024, got ${channels}`);
    }
    this.#stft = new Stft(fftSize);
    this.channels = channels;
    this.fftSize = fftSize;
    this.hop = this.#stft.hop;
    this.bins = this.#stft.bins;
    this.snapshotLength = 2 * this.bins * channels;
    this.#buffer = new Float64Array(channels * fftSize);
    this.#snapshot = new Float64Array(this.snapshotLength);
    this.#outBins = { startBin: 0, count: this.bins };
    this.reset();
  }

  /**
   * Switch to the WebAssembly SIMD transform (same spectra to rounding, several times faster), keeping
   * the buffered samples. Resolves false, staying on fft.js, where WebAssembly SIMD is missing.
   */
  async accelerate(): Promise<boolean> {
    if (this.#fast) return true;
    let fast: PairFft;
    try {
      fast = await PairFft.create(this.fftSize, this.channels);
    } catch {
      return false;
    }
    if (this.#fast) return true; // a concurrent call got there first
    const n = this.fftSize;
    const fr = fast.frames;
    for (let c = 0; c < this.channels; c++) {
      const base = pairFrameAt(c, n);
      for (let i = 0; i < n; i++) fr[base + 2 * i] = this.#buffer[c * n + i];
    }
    this.#fast = fast;
    return true;
  }

  /** True once {@link accelerate} has switched to the WebAssembly transform. */
  get accelerated(): boolean {
    return this.#fast !== null;
  }

  /**
   * Write each snapshot into `out` at the offset `slot(hopStartSample)` returns (e.g. a slot of a
   * shared ring) instead of the internal buffer; onHop then receives `out` itself. `null` restores
   * the internal buffer. Saves the per-hop copy when another thread consumes the snapshots.
   * With `bins`, only those bins need to be formed (the processing band): the accelerated path
   * writes just them into `out`, and the others keep what they held.
   */
  setOutput(out: Float64Array | null, slot: ((hopStartSample: number) => number) | null = null, bins?: BinRange): void {
    if ((out === null) !== (slot === null)) throw new TypeError('setOutput needs both out and slot, or neither');
    const b = bins ?? { startBin: 0, count: this.bins };
    if (!Number.isInteger(b.startBin) || !Number.isInteger(b.count) || b.startBin < 0 || b.count < 0 || b.startBin + b.count > this.bins) {
      throw new RangeError(`bins ${b.startBin}+${b.count} outside 0…${this.bins - 1}`);
    }
    this.#out = out;
    this.#slot = slot;
    this.#outBins = out === null ? { startBin: 0, count: this.bins } : { startBin: b.startBin, count: b.count };
  }

  /** Sample index the next push() must start at, or null before the first push after reset(). */
  get expectedNextSample(): number | null {
    return this.#nextSample;
  }

  /** Forget all buffered samples and the stream position; the next push() starts a new stream. */
  reset(): void {
    this.#buffer.fill(0);
    this.#fast?.frames.fill(0);
    this.#snapshot.fill(0);
    this.#filled = this.fftSize - this.hop;
    this.#nextSample = null;
    this.#frameStartSample = 0;
  }

  /** Centre frequency of bin k in Hz. */
  binFrequencyHz(k: number, sampleRateHz: number): number {
    return this.#stft.binFrequencyHz(k, sampleRateHz);
  }

  /** The bins whose centre lies in [loHz, hiHz]; see {@link Stft.bandBins}. */
  bandBins(loHz: number, hiHz: number, sampleRateHz: number): BinRange {
    return this.#stft.bandBins(loHz, hiHz, sampleRateHz);
  }

  /**
   * Append a block of samples; calls onHop once for every hop completed (zero or more times).
   * Blocks may be any size; consecutive blocks must be contiguous on the sample clock.
   *
   * The snapshot passed to onHop is ONE buffer reused for every hop: consume or copy it before
   * returning. onHop must not call push() or reset() on this analyser. If onHop throws, the error
   * propagates, the rest of the block is not consumed, and the analyser should be reset().
   *
   * @param block planar samples, channel c sample i at block[c·frames + i]; length ≥ M·frames; unchanged
   * @param frames samples per channel in this block, integer ≥ 0
   * @param firstSampleIndex stream sample index of block sample 0; must equal the previous
   *   push's firstSampleIndex + frames (RangeError otherwise; reset() to start a new stream)
   * @param onHop receives the snapshot (length 2·bins·M, layout above) and the sample index of
   *   the first sample of its analysis frame (the first frame after reset starts N − hop samples
   *   before the stream's first sample)
   * @param channelStride samples between the starts of consecutive channels in `block`, default
   *   `frames`; with `startFrame`, a run of frames inside a longer planar block is pushed without
   *   a copy: channel c sample i is read at block[c·channelStride + startFrame + i]
   * @param startFrame index inside each channel of the first frame to push, default 0
   */
  push(
    block: Samples,
    frames: number,
    firstSampleIndex: number,
    onHop: (snapshot: Float64Array, hopStartSample: number) => void,
    channelStride = frames,
    startFrame = 0,
  ): void {
    const m = this.channels;
    const n = this.fftSize;
    const hop = this.hop;
    if (!Number.isInteger(frames) || frames < 0) throw new RangeError(`frames must be an integer ≥ 0, got ${frames}`);
    if (!Number.isInteger(startFrame) || startFrame < 0 || !Number.isInteger(channelStride) || channelStride < startFrame + frames) {
      throw new RangeError(`startFrame ${startFrame} + frames ${frames} must fit in channelStride ${channelStride}`);
    }
    if (frames > 0 && block.length < (m - 1) * channelStride + startFrame + frames) {
      throw new RangeError(`block must have length ≥ (channels − 1)·channelStride + startFrame + frames = ${(m - 1) * channelStride + startFrame + frames}, got ${block.length}`);
    }
    if (!Number.isSafeInteger(firstSampleIndex)) {
      throw new RangeError(`firstSampleIndex must be a safe integer, got ${firstSampleIndex}`);
    }
    if (this.#nextSample === null) {
      this.#frameStartSample = firstSampleIndex - (n - hop);
      this.#nextSample = firstSampleIndex;
    } else if (firstSampleIndex !== this.#nextSample) {
      throw new RangeError(
        `firstSampleIndex must continue the stream at ${this.#nextSample}, got ${firstSampleIndex} (reset() to start a new stream)`,
      );
    }
    const fast = this.#fast;
    const buf = fast === null ? this.#buffer : fast.frames;
    const snap = this.#snapshot;
    const stft = this.#stft;
    // Where channel c's frame lives and how far apart its samples are: planar (fft.js path) or
    // pair-interleaved (WebAssembly path, see PairFft.frames).
    const step = fast === null ? 1 : 2;
    const frameAt = (c: number) => (fast === null ? c * n : pairFrameAt(c, n));
    let pos = 0;
    while (pos < frames) {
      const filled = this.#filled;
      const take = Math.min(n - filled, frames - pos);
      for (let c = 0; c < m; c++) {
        let dst = frameAt(c) + step * filled;
        const src = c * channelStride + startFrame + pos;
        for (let i = 0; i < take; i++, dst += step) buf[dst] = block[src + i];
      }
      pos += take;
      this.#nextSample += take;
      if (filled + take < n) {
        this.#filled = filled + take;
        break;
      }
      const hopStartSample = this.#frameStartSample;
      const out = this.#out ?? snap;
      const base = this.#slot === null ? 0 : this.#slot(hopStartSample);
      const { startBin, count } = this.#outBins;
      if (fast !== null) {
        out.set(fast.analyze(startBin, count), base + 2 * m * startBin);
        // Advance the state before the callback so that it is consistent even if onHop throws.
        for (let p = 0; p < fast.pairs; p++) buf.copyWithin(2 * p * n, 2 * (p * n + hop), 2 * (p + 1) * n);
      } else {
        for (let c = 0; c < m; c++) stft.analyzeStrided(out, base + 2 * c, 2 * m, buf, c * n);
        for (let c = 0; c < m; c++) buf.copyWithin(c * n, c * n + hop, c * n + n);
      }
      this.#filled = n - hop;
      this.#frameStartSample += hop;
      onHop(out, hopStartSample);
    }
  }
}

/** Where channel c's frame starts in PairFft.frames (pair-interleaved, every second double). */
function pairFrameAt(c: number, n: number): number {
  return (c >> 1) * 2 * n + (c & 1);
}

/**
 * Streaming weighted overlap-add: one spectrum in, one hop of samples out.
 *
 * Each spectrum is inverse-transformed, multiplied by the sqrt-Hann synthesis window and added into
 * an N-sample accumulator; the first hop of the accumulator is then complete and is written out.
 * For the frame that starts at sample s, push() writes samples s … s + hop − 1 of the
 * reconstructed time line. Fed by a {@link MultiChannelStft}, the output stream therefore lags the
 * input by {@link latencySamples} = N − hop samples: output n = input n − (N − hop), exactly (up
 * to rounding) when the spectra are unmodified.
 */
export class WolaSynthesizer {
  readonly fftSize: number;
  readonly hop: number;
  readonly bins: number;
  /** Output delay relative to the analysed input, N − hop samples. */
  readonly latencySamples: number;
  readonly #stft: Stft;
  readonly #frame: Float64Array;
  readonly #accumulator: Float64Array;

  /** @param fftSize N, a power of two in 256…4096 (the analysis size) */
  constructor(fftSize: number) {
    this.#stft = new Stft(fftSize);
    this.fftSize = fftSize;
    this.hop = this.#stft.hop;
    this.bins = this.#stft.bins;
    this.latencySamples = wolaLatencySamples(fftSize);
    this.#frame = new Float64Array(fftSize);
    this.#accumulator = new Float64Array(fftSize);
  }

  /** Clear the overlap-add accumulator (start a new stream). */
  reset(): void {
    this.#accumulator.fill(0);
  }

  /**
   * Overlap-add one frame and emit the next hop of output.
   * @param spectrum length ≥ 2·bins, interleaved complex X[0…N/2] (one channel or one beam); unchanged
   * @param out length ≥ hop; receives hop output samples
   */
  push(spectrum: Float64Array, out: Samples): void {
    const n = this.fftSize;
    const hop = this.hop;
    if (out.length < hop) throw new RangeError(`out must have length ≥ hop = ${hop}, got ${out.length}`);
    const frame = this.#frame;
    this.#stft.synthesize(frame, spectrum);
    const acc = this.#accumulator;
    for (let i = 0; i < n; i++) acc[i] += frame[i];
    for (let i = 0; i < hop; i++) out[i] = acc[i];
    acc.copyWithin(0, hop, n);
    acc.fill(0, n - hop, n);
  }
}
