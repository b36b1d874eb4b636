/**
 * A beam's power per bin from one STFT snapshot: P_k = |w_kᴴ x_k|² for the band's bins, the input of
 * weighted-band-power.ts (which weights the bins and scales their sum to a hop mean square).
 *
 * Layout: snapshot X_m[k] at offset + (k·M + m)·2 (MultiChannelStft); beam weights for band bin b
 * (bin startBin + b) at b·2M + 2m (re, im), the layout BeamSynthesizer and the workers use.
 * Nothing is allocated.
 */

/** out[b] = |w_bᴴ x_b|² for b = 0 … count − 1 (bin startBin + b); returns out. */
export function beamBinPowers(snapshot: Float64Array | Float32Array, offset: number, channels: number, weights: Float64Array, startBin: number, count: number, out: Float64Array): Float64Array {
  const m2 = 2 * channels;
  for (let b = 0; b < count; b++) {
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
    out[b] = re * re + im * im;
  }
  return out;
}
