/**
 * Mean-square power of one STFT snapshot over a set of bins, each bin weighted by a power gain (a
 * frequency weighting times the sector's band), for the levels of unattended monitoring.
 * Indicative levels only: no class-rated meter, no traceable calibration.
 *
 * Scale. The engine's STFT (server/dsp/stft.ts) windows each frame of N samples with the periodic
 * square-root Hann window w (Σ w² = N/2) and takes an unnormalised FFT. By Parseval,
 * Σ_{k=0}^{N−1} |X_k|² = N Σ_n x_n² w_n², so for a stationary signal of mean square σ²,
 * E Σ_{k=0}^{N−1} |X_k|² = N·σ²·N/2, and over the one-sided bins 1…N/2−1 (the two-sided sum's
 * half, DC and Nyquist aside) σ² = (4/N²)·Σ_{k=1}^{N/2−1} |X_k|². A sine of amplitude A at a bin
 * centre therefore reads A²/2 (−3 dBFS at full scale, as the channel meters read it).
 *
 * Layout: snapshot X_m[k] at offset + (k·M + m)·2 (MultiChannelStft); beam weights for band bin b
 * (bin startBin + b) at b·2M + 2m (re, im), the layout BeamSynthesizer and the workers use.
 * Nothing is allocated.
 */

/** 4/N²: one-sided |X_k|² sums to mean square (see the file's comment). */
export function meanSquareScale(fftSize: number): number {
  return 4 / (fftSize * fftSize);
}

/**
 * Σ_b gains[b]·|w_bᴴ x_b|² · 4/N²: the mean square of a beam's output over the weighted bins.
 * @param gains power gain per band bin (length ≥ count); 0 leaves a bin out
 */
export function beamMeanSquare(snapshot: Float64Array | Float32Array, offset: number, channels: number, weights: Float64Array, startBin: number, count: number, gains: Float64Array, fftSize: number): number {
  const m2 = 2 * channels;
  let sum = 0;
  for (let b = 0; b < count; b++) {
    const g = gains[b];
    if (g === 0) continue;
    const xo = offset + (startBin + b) * m2;
    const wo = b * m2;
    let re = 0;
    let im = 0;
    for (let i = 0; i < m2; i += 2) {
      const wr = weights[wo + i];
      const wi = weights[wo + i + 1];
      const xr = snapshot[xo + i];
      const xi = snapshot[xo + i + 1];
      re += wr * xr + wi * xi; // conj(w)·x
      im += wr * xi - wi * xr;
    }
    sum += g * (re * re + im * im);
  }
  return sum * meanSquareScale(fftSize);
}

/**
 * Σ_b gains[b]·(1/M)Σ_m |x_{m,b}|² · 4/N²: the array as one omnidirectional microphone (the mean of the
 * channels' powers) over the weighted bins.
 */
export function omniMeanSquare(snapshot: Float64Array | Float32Array, offset: number, channels: number, startBin: number, count: number, gains: Float64Array, fftSize: number): number {
  const m2 = 2 * channels;
  let sum = 0;
  for (let b = 0; b < count; b++) {
    const g = gains[b];
    if (g === 0) continue;
    const xo = offset + (startBin + b) * m2;
    let p = 0;
    for (let i = 0; i < m2; i++) p += snapshot[xo + i] * snapshot[xo + i];
    sum += g * p;
  }
  return (sum / channels) * meanSquareScale(fftSize);
}

/**
 * Power gains of a sector's band within the engine's band: gains[b] = weighting[b] inside
 * [lowHz, highHz], 0 outside (bin b at (startBin + b)·fs/N).
 */
export function bandGains(weighting: Float64Array, startBin: number, count: number, fftSize: number, sampleRateHz: number, lowHz: number, highHz: number, out: Float64Array = new Float64Array(count)): Float64Array {
  for (let b = 0; b < count; b++) {
    const f = ((startBin + b) * sampleRateHz) / fftSize;
    out[b] = f >= lowHz && f <= highHz ? weighting[b] : 0;
  }
  return out;
}
