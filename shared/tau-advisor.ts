/**
 * The τ advisor's mathematics (pure functions; the dashboard and the tests use them). Derivations
 * and sources in docs/tau-advisor.md.
 *
 * 1. Effective number of independent snapshots of an exponentially forgotten estimate
 *    R_k = λ R_{k−1} + (1−λ) x_k x_kᴴ, one snapshot per hop:
 *      K = (1+λ)/(1−λ)                                    independent snapshots (shared/CHECKS.md)
 *      K_eff = (1+λ)/(1−λ) / (1 + 2 Σ_{j≥1} λ^j ρ_j)      overlapped STFT frames
 *    ρ_j = (Σ_n w[n] w[n+jH])² / (Σ_n w[n]²)² is the squared overlap correlation of the analysis
 *    window w at a shift of j hops H: for white Gaussian input the periodograms of frames j hops
 *    apart have the correlation coefficient ρ_j (P. D. Welch, "The use of fast Fourier transform for
 *    the estimation of power spectra", IEEE Trans. Audio Electroacoust. AU-15(2), 1967, from
 *    memory; Welch averages equal weights, here the weights are (1−λ)λ^k). K_eff is the count of
 *    independent snapshots giving the same relative variance Var(P̂)/E[P̂]².
 *    The project's window (server/dsp/stft.ts) is the periodic square-root Hann w[n] = sin(πn/N)
 *    with H = N/2; only ρ_1 is non-zero and it has the closed form ρ_1 = cot²(π/N)/N² (→ 1/π²).
 * 2. Reed–Mallett–Brennan: with K snapshots of M channels, E[SINR/SINR_opt] = (K+2−M)/(K+1)
 *    (I. S. Reed, J. D. Mallett, L. E. Brennan, IEEE Trans. AES 10(6), 1974); used here with
 *    K = K_eff (an approximation: the rule assumes independent, equally weighted snapshots).
 * 3. Bearing lag: the estimate at a row mixes frames of mean age
 *      A = (N/2)/fs + λ/(1−λ) · H/fs   seconds
 *    (the newest frame is centred N/2 samples before the row's sample index; the exponential
 *    weights (1−λ)λ^k have mean k = λ/(1−λ) hops). With H = N/2 this is exactly τ = H/(fs(1−λ)).
 *    A bearing moving at r deg/s is then seen lagging by about r·A degrees.
 */

/** A value of the advisor for one τ. */
export interface TauAdvice {
  tauS: number;
  lambda: number;
  /** (1+λ)/(1−λ): independent-snapshot count ignoring frame overlap. */
  snapshotsIndependent: number;
  /** K_eff: corrected for the overlap of successive STFT frames. */
  snapshots: number;
  /** RMB mean SINR ratio (K+2−M)/(K+1), ≤ 1; ≤ 0 means K < M − 1 (singular without loading). */
  sinrRatio: number;
  /** −10·log10(sinrRatio), dB (Infinity when sinrRatio ≤ 0). */
  sinrLossDb: number;
  /** True when snapshots < 2M (RMB: about 3 dB lost at K = 2M). */
  fewSnapshots: boolean;
  /** Mean age of the estimate, seconds (the lag per deg/s of bearing rate). */
  meanAgeS: number;
}

/** The STFT a τ applies to. */
export interface StftShape {
  fftSize: number;
  hopSamples: number;
  sampleRateHz: number;
}

/** The project's analysis window, periodic square-root Hann w[n] = sin(πn/N) (server/dsp/stft.ts). */
export function sqrtHann(fftSize: number): Float64Array {
  const w = new Float64Array(fftSize);
  for (let n = 0; n < fftSize; n++) w[n] = Math.sin((Math.PI * n) / fftSize);
  return w;
}

/**
 * Squared overlap correlations ρ_j, j = 1, 2, … while frames j hops apart overlap.
 * @returns ρ_1, ρ_2, … (empty when hop ≥ N)
 */
export function overlapCorrelations(window: ArrayLike<number>, hopSamples: number): number[] {
  const n = window.length;
  if (!(Number.isInteger(hopSamples) && hopSamples >= 1)) throw new RangeError(`hopSamples must be an integer ≥ 1, got ${hopSamples}`);
  let e = 0;
  for (let i = 0; i < n; i++) e += window[i] * window[i];
  if (!(e > 0)) throw new RangeError('window has no energy');
  const out: number[] = [];
  for (let s = hopSamples; s < n; s += hopSamples) {
    let c = 0;
    for (let i = 0; i + s < n; i++) c += window[i] * window[i + s];
    out.push((c * c) / (e * e));
  }
  return out;
}

/** ρ_1 of the periodic sqrt-Hann at 50 % overlap, closed form cot²(π/N)/N² (docs/tau-advisor.md). */
export function sqrtHannRho1(fftSize: number): number {
  const c = 1 / Math.tan(Math.PI / fftSize);
  return (c * c) / (fftSize * fftSize);
}

/** (1+λ)/(1−λ). */
export function independentSnapshots(lambda: number): number {
  requireLambda(lambda);
  return (1 + lambda) / (1 - lambda);
}

/** K_eff = (1+λ)/(1−λ) / (1 + 2 Σ_j λ^j ρ_j). */
export function effectiveSnapshots(lambda: number, rho: readonly number[]): number {
  requireLambda(lambda);
  let s = 0;
  let lj = 1;
  for (const r of rho) {
    lj *= lambda;
    s += lj * r;
  }
  return (1 + lambda) / (1 - lambda) / (1 + 2 * s);
}

/** RMB mean SINR ratio (K+2−M)/(K+1). */
export function rmbSinrRatio(snapshots: number, channels: number): number {
  if (!(snapshots > 0) || !(channels >= 1)) throw new RangeError(`need snapshots > 0 and channels ≥ 1, got ${snapshots}, ${channels}`);
  return (snapshots + 2 - channels) / (snapshots + 1);
}

/** RMB loss in dB, −10·log10 of the mean SINR ratio (Infinity when the ratio is ≤ 0). */
export function rmbLossDb(snapshots: number, channels: number): number {
  const r = rmbSinrRatio(snapshots, channels);
  return r > 0 ? -10 * Math.log10(r) : Infinity;
}

/** λ = 1 − H/(fs τ). */
export function lambdaOfTau(tauS: number, s: StftShape): number {
  return 1 - s.hopSamples / (s.sampleRateHz * tauS);
}

/** τ = H/(fs (1−λ)). */
export function tauOfLambda(lambda: number, s: StftShape): number {
  return s.hopSamples / (s.sampleRateHz * (1 - lambda));
}

/** Mean age of the estimate, seconds: (N/2)/fs + λ/(1−λ)·H/fs. */
export function meanAgeS(lambda: number, s: StftShape): number {
  requireLambda(lambda);
  return (s.fftSize / 2 + (lambda / (1 - lambda)) * s.hopSamples) / s.sampleRateHz;
}

/** Everything the advisor shows for one τ (null when τ is not above one hop). */
export function adviseTau(tauS: number, channels: number, s: StftShape, rho: readonly number[] = overlapCorrelations(sqrtHann(s.fftSize), s.hopSamples)): TauAdvice | null {
  const lambda = lambdaOfTau(tauS, s);
  if (!(lambda > 0 && lambda < 1)) return null;
  const k = effectiveSnapshots(lambda, rho);
  const ratio = rmbSinrRatio(k, channels);
  return {
    tauS,
    lambda,
    snapshotsIndependent: independentSnapshots(lambda),
    snapshots: k,
    sinrRatio: ratio,
    sinrLossDb: ratio > 0 ? -10 * Math.log10(ratio) : Infinity,
    fewSnapshots: k < 2 * channels,
    meanAgeS: meanAgeS(lambda, s),
  };
}

/**
 * The shortest τ whose K_eff is at least `minSnapshots` (default 2M), rounded up to 3 significant
 * digits (so the rounded value still meets it) and at least `minTauS`.
 */
export function suggestTau(channels: number, s: StftShape, opts: { minSnapshots?: number; minTauS?: number; rho?: readonly number[] } = {}): number {
  const target = opts.minSnapshots ?? 2 * channels;
  const rho = opts.rho ?? overlapCorrelations(sqrtHann(s.fftSize), s.hopSamples);
  // K_eff increases with λ (numerator grows without bound, the overlap factor stays within [1, 1+2Σρ]).
  let lo = 0;
  let hi = 1 - 1e-12;
  if (effectiveSnapshots(1e-12, rho) >= target) hi = 1e-12;
  else
    for (let i = 0; i < 200 && hi - lo > 1e-15; i++) {
      const mid = (lo + hi) / 2;
      if (effectiveSnapshots(mid, rho) >= target) hi = mid;
      else lo = mid;
    }
  const tau = Math.max(tauOfLambda(hi, s), opts.minTauS ?? 0);
  return roundUp3(tau);
}

/** Round up to 3 significant digits. */
export function roundUp3(x: number): number {
  if (!(x > 0) || !Number.isFinite(x)) return x;
  const e = Math.floor(Math.log10(x)) - 2;
  const f = Math.pow(10, e);
  const r = Math.ceil(x / f) * f;
  return Number(r.toPrecision(3));
}

function requireLambda(lambda: number): void {
  if (!(lambda >= 0 && lambda < 1)) throw new RangeError(`lambda must be in [0, 1), got ${lambda}`);
}
