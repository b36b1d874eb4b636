/**
 * The array check before a test: with one dominant far-field source (a loudspeaker at a stated
 * direction, or the strongest peak of a conventional scan), find per channel how it departs from
 * the geometry's prediction, name the faults (swapped cables, a microphone in the wrong hole, an
 * inverted polarity, dead and hot channels) and propose a calibration that undoes them.
 *
 * Pure: samples in, a report out; no I/O. The live server runs it in a worker thread
 * (engine/array-check-runner.ts), `nullsteer analyze --array-check` on a file.
 *
 * Method (sign conventions of ../shared/DESIGN.md §3 and dsp/stft.ts: a delay τ multiplies bin f by
 * e^{−j2πfτ}):
 * - Cross-spectra against a reference channel r over the band, averaged over STFT frames:
 *   C_m(f) = E[X_m X_r*] = A e^{j(φ_m−φ_r)} e^{−j2πf(τ_m − τ_r + δ_m − δ_r)}, with τ the far-field
 *   arrival times of the geometry and δ the channels' unexplained extra delays.
 * - The predicted steering phase is removed, Z_m(f) = C_m(f)·e^{+j2πf(τ_m − τ_r)}, leaving a linear
 *   phase in f whose slope is the delay residual and whose intercept the phase residual. It is fitted
 *   without unwrapping: a grid search of |Σ_f w_f Ẑ_m(f) e^{+j2πfδ}| over δ (a delay-domain
 *   correlation, Ẑ = Z/|Z|), then a weighted least-squares line through the now small phases
 *   (two passes). The weights are the coherence ratio γ²/(1 − γ²) (the variance of a cross-spectral
 *   phase estimate falls like (1 − γ²)/γ²; G. C. Carter, "Coherence and time delay estimation",
 *   Proc. IEEE 75(2), 1987, from memory).
 * - Residuals are relative to the reference; the median over the channels that hear the source is
 *   taken as zero, so a faulty reference does not shift everyone.
 * - Gains from the covariance diagonal (band power per channel) against the median channel.
 */
import { MAX_CALIBRATION_DELAY_US, MAX_CALIBRATION_GAIN_DB } from '../config/array-file.ts';
import type { ChannelCalibration } from '../../shared/types.ts';
import { MultiChannelStft } from './stft.ts';
export type { ArrayCheckResult, ArrayFault, ChannelCheck, ChannelFault } from '../../shared/array-check.ts';
import type { ArrayCheckResult, ArrayFault, ChannelCheck, ChannelFault } from '../../shared/array-check.ts';

/**
 * A delay residual beyond this many µs is a misplaced microphone: 20 µs is 6.9 mm of path at
 * 343 m/s, several times a mounting tolerance of 1–2 mm and far above the estimate's scatter (below
 * 0.1 µs for 2.7 s of broadband sound at 10 dB SNR per channel, test/unit/array-check.test.ts), while
 * the wrong hole of an array is centimetres away.
 */
export const DEFAULT_MISPLACED_BOUND_US = 20;
/** A channel this far below the median band power hears nothing (an open cable, a dead capsule). */
export const DEAD_BELOW_MEDIAN_DB = 30;
/** A channel this far above the median is hot (a gain set wrong, a preamplifier fault). */
export const HOT_ABOVE_MEDIAN_DB = 10;
/** A sample at or beyond this magnitude is counted as clipped (full scale is ±1). */
export const CLIP_LEVEL = 0.999;
/** A channel with at least this fraction of its samples clipped is flagged hot. */
export const CLIP_FRACTION = 1e-4;
/** A phase intercept farther than this from the others' (degrees) is nearer π than 0: inverted. */
export const INVERTED_PHASE_DEG = 90;
/**
 * Below this band-mean coherence with the reference a channel does not hear the source well enough
 * for a delay (its row says so; it is not flagged from its delay).
 */
export const MIN_COHERENCE = 0.2;
/** Grid step of the delay search, µs: at 6 kHz a half step is 0.04 rad, well inside the LS refine's reach. */
export const DELAY_SEARCH_STEP_US = 2;
/** The delay search reaches this far beyond the array's largest travel time (µs): cable and converter delays. */
export const DELAY_SEARCH_MARGIN_US = 1000;
/** FFT size of the check (longer frames than the live engine's: finer bins, better phase averages). */
export const DEFAULT_CHECK_FFT_SIZE = 1024;
/** Snapshots kept for the direction scan, at most; and at most this many doubles in all (64 MiB). */
const SCAN_SNAPSHOTS = 64;
const SCAN_DOUBLES = 8 * 2 ** 20;

export interface ArrayCheckInput {
  /** Planar float32 samples, channel c sample i at data[c·frames + i], full scale ±1. */
  data: Float32Array;
  channels: number;
  frames: number;
  sampleRateHz: number;
  /** Sensor positions, metres (the geometry the check compares against). */
  positions: ReadonlyArray<readonly [number, number, number]>;
  speedOfSoundMps: number;
  /** Band of the analysis, Hz. */
  bandHz: [number, number];
  fftSize?: number;
  /** The source's direction; absent: the strongest peak of a conventional azimuth scan (elevation 0). */
  direction?: { azimuthDeg: number; elevationDeg?: number } | null;
  /** Delay residual (µs) above which a microphone is called misplaced (default DEFAULT_MISPLACED_BOUND_US). */
  misplacedBoundUs?: number;
}

/** Far-field arrival times τ_m = −(p_m·u)/c, seconds, for unit vector u toward the source. */
function arrivalTimes(positions: ArrayCheckInput['positions'], azDeg: number, elDeg: number, c: number): Float64Array {
  const az = (azDeg * Math.PI) / 180;
  const el = (elDeg * Math.PI) / 180;
  const ux = Math.cos(el) * Math.cos(az);
  const uy = Math.cos(el) * Math.sin(az);
  const uz = Math.sin(el);
  const t = new Float64Array(positions.length);
  for (let m = 0; m < positions.length; m++) t[m] = -(positions[m][0] * ux + positions[m][1] * uy + positions[m][2] * uz) / c;
  return t;
}

function median(values: number[]): number {
  if (values.length === 0) return 0;
  const s = [...values].sort((a, b) => a - b);
  const k = s.length >> 1;
  return s.length % 2 ? s[k] : (s[k - 1] + s[k]) / 2;
}

function wrapPi(x: number): number {
  let y = x % (2 * Math.PI);
  if (y <= -Math.PI) y += 2 * Math.PI;
  if (y > Math.PI) y -= 2 * Math.PI;
  return y;
}

const round = (x: number, step: number) => Math.round(x / step) * step;
const tidyNum = (x: number, digits: number) => Number(x.toFixed(digits));

/**
 * Fit a linear phase to a residual cross-spectrum: Z(f) ≈ A e^{jφ} e^{−j2πfδ}.
 * @param z interleaved complex, one per bin @param w weight per bin @param f frequency per bin, Hz
 * @param reachS the delay search covers ±reachS
 */
export function fitLinearPhase(z: Float64Array, w: Float64Array, f: Float64Array, reachS: number): { delayS: number; phaseRad: number } {
  const B = f.length;
  // Grid search on the unit-magnitude spectrum (every bin counts by its weight, not its power).
  // Each bin's phasor e^{j2πfδ} advances by a fixed rotation per step: no trigonometry in the loop.
  const step = DELAY_SEARCH_STEP_US * 1e-6;
  const n = Math.ceil(reachS / step);
  const ur = new Float64Array(B);
  const ui = new Float64Array(B);
  const pr = new Float64Array(B);
  const pi = new Float64Array(B);
  const rr = new Float64Array(B);
  const ri = new Float64Array(B);
  for (let b = 0; b < B; b++) {
    const mag = Math.hypot(z[2 * b], z[2 * b + 1]);
    const k = mag === 0 ? 0 : w[b] / mag;
    ur[b] = z[2 * b] * k;
    ui[b] = z[2 * b + 1] * k;
    pr[b] = Math.cos(-2 * Math.PI * f[b] * n * step);
    pi[b] = Math.sin(-2 * Math.PI * f[b] * n * step);
    rr[b] = Math.cos(2 * Math.PI * f[b] * step);
    ri[b] = Math.sin(2 * Math.PI * f[b] * step);
  }
  let best = -1;
  let bestD = 0;
  for (let k = -n; k <= n; k++) {
    let sr = 0;
    let si = 0;
    for (let b = 0; b < B; b++) {
      const c = pr[b];
      const s = pi[b];
      sr += ur[b] * c - ui[b] * s;
      si += ur[b] * s + ui[b] * c;
      pr[b] = c * rr[b] - s * ri[b];
      pi[b] = c * ri[b] + s * rr[b];
    }
    const v = sr * sr + si * si;
    if (v > best) {
      best = v;
      bestD = k * step;
    }
  }
  let delay = bestD;
  let phase = 0;
  // Phase at the grid delay, then two weighted LS passes on the small remaining phases.
  for (let pass = 0; pass < 3; pass++) {
    let sr = 0;
    let si = 0;
    for (let b = 0; b < B; b++) {
      const ph = 2 * Math.PI * f[b] * delay;
      const c = Math.cos(ph);
      const s = Math.sin(ph);
      const mag = Math.hypot(z[2 * b], z[2 * b + 1]) || 1;
      sr += (w[b] * (z[2 * b] * c - z[2 * b + 1] * s)) / mag;
      si += (w[b] * (z[2 * b] * s + z[2 * b + 1] * c)) / mag;
    }
    phase = Math.atan2(si, sr);
    if (pass === 2) break;
    // ψ_b = arg(Z e^{j2πfδ} e^{−jφ}) = a + k·f  →  δ ← δ − k/2π, φ ← φ + a.
    let sw = 0;
    let sf = 0;
    let sp = 0;
    let sff = 0;
    let sfp = 0;
    for (let b = 0; b < B; b++) {
      if (w[b] === 0) continue;
      const ph = 2 * Math.PI * f[b] * delay - phase;
      const c = Math.cos(ph);
      const s = Math.sin(ph);
      const psi = Math.atan2(z[2 * b] * s + z[2 * b + 1] * c, z[2 * b] * c - z[2 * b + 1] * s);
      sw += w[b];
      sf += w[b] * f[b];
      sp += w[b] * psi;
      sff += w[b] * f[b] * f[b];
      sfp += w[b] * f[b] * psi;
    }
    const den = sw * sff - sf * sf;
    if (sw === 0 || den <= 0) break;
    const k = (sw * sfp - sf * sp) / den;
    delay -= k / (2 * Math.PI);
  }
  return { delayS: delay, phaseRad: phase };
}

/** Run the check. Throws RangeError on inconsistent input (sizes, band, too few samples). */
export function checkArray(input: ArrayCheckInput): ArrayCheckResult {
  const { data, channels: M, frames, sampleRateHz: fs, positions, speedOfSoundMps: c } = input;
  const N = input.fftSize ?? DEFAULT_CHECK_FFT_SIZE;
  const bound = input.misplacedBoundUs ?? DEFAULT_MISPLACED_BOUND_US;
  if (!Number.isInteger(M) || M < 2 || positions.length !== M) throw new RangeError(`the check needs at least 2 channels and one position per channel (${M} channels, ${positions.length} positions)`);
  if (!Number.isInteger(frames) || data.length < M * frames) throw new RangeError(`data holds ${data.length} samples, need ${M} × ${frames}`);
  if (frames < 4 * N) throw new RangeError(`${frames} samples per channel is too short for the check: need at least ${4 * N} (4 frames of ${N})`);
  if (!(bound > 0)) throw new RangeError(`misplacedBoundUs must be positive, got ${bound}`);
  const [lo, hi] = input.bandHz;
  if (!(lo >= 0 && hi > lo && hi <= fs / 2)) throw new RangeError(`band ${lo}–${hi} Hz must satisfy 0 ≤ low < high ≤ fs/2 = ${fs / 2}`);

  // ---- time domain: power, digital silence, clipping ----
  const clipped = new Float64Array(M);
  const silent: boolean[] = [];
  const tdPower = new Float64Array(M);
  for (let m = 0; m < M; m++) {
    let p = 0;
    let k = 0;
    let nonZero = false;
    for (let i = m * frames, e = (m + 1) * frames; i < e; i++) {
      const x = data[i];
      p += x * x;
      if (x !== 0) nonZero = true;
      if (x >= CLIP_LEVEL || x <= -CLIP_LEVEL) k++;
    }
    tdPower[m] = p / frames;
    clipped[m] = k / frames;
    silent.push(!nonZero);
  }
  // Reference: the audible channel whose level is nearest the median (a typical, working channel).
  const tdDb = Array.from(tdPower, (p) => (p > 0 ? 10 * Math.log10(p) : -300));
  const tdMed = median(tdDb.filter((_, m) => !silent[m]));
  let ref = -1;
  for (let m = 0; m < M; m++) if (!silent[m] && clipped[m] < CLIP_FRACTION && (ref < 0 || Math.abs(tdDb[m] - tdMed) < Math.abs(tdDb[ref] - tdMed))) ref = m;
  if (ref < 0) ref = tdDb.indexOf(Math.max(...tdDb));

  // ---- STFT: diagonal, reference row, snapshots for the scan ----
  const stft = new MultiChannelStft(M, N);
  const range = stft.bandBins(lo, hi, fs);
  if (range.count < 2) throw new RangeError(`band ${lo}–${hi} Hz holds fewer than 2 FFT bins at N = ${N}`);
  const B = range.count;
  const freqs = new Float64Array(B);
  for (let b = 0; b < B; b++) freqs[b] = ((range.startBin + b) * fs) / N;
  const P = new Float64Array(M * B); // |X_m|², m-major
  const C = new Float64Array(2 * M * B); // X_m X_ref*, m-major interleaved
  const scanWanted = !input.direction;
  const hopsTotal = Math.floor(frames / (N / 2));
  const keep = scanWanted ? Math.max(4, Math.min(SCAN_SNAPSHOTS, Math.floor(SCAN_DOUBLES / (2 * M * B)))) : 0;
  const every = Math.max(1, Math.floor(hopsTotal / Math.max(keep, 1)));
  const kept: Float64Array[] = [];
  let hops = 0;
  const scale = 2 / N;
  const base = 2 * M * range.startBin;
  stft.push(data, frames, 0, (snap, hopStart) => {
    // The first frames reach back before the data (zeros): only whole frames inside the data count.
    if (hopStart < 0) return;
    hops++;
    for (let b = 0; b < B; b++) {
      const o = base + 2 * M * b;
      const rr = snap[o + 2 * ref] * scale;
      const ri = snap[o + 2 * ref + 1] * scale;
      for (let m = 0; m < M; m++) {
        const xr = snap[o + 2 * m] * scale;
        const xi = snap[o + 2 * m + 1] * scale;
        P[m * B + b] += xr * xr + xi * xi;
        C[2 * (m * B + b)] += xr * rr + xi * ri;
        C[2 * (m * B + b) + 1] += xi * rr - xr * ri;
      }
    }
    if (scanWanted && kept.length < keep && hops % every === 0) kept.push(snap.slice(base, base + 2 * M * B).map((v) => v * scale));
  });
  if (hops < 2) throw new RangeError('too few whole STFT frames for the check');

  // ---- levels ----
  const levelDb = new Float64Array(M);
  for (let m = 0; m < M; m++) {
    let s = 0;
    for (let b = 0; b < B; b++) s += P[m * B + b];
    s /= hops;
    levelDb[m] = s > 0 ? 10 * Math.log10(s) : -300;
  }
  const medLevel = median(Array.from(levelDb).filter((_, m) => !silent[m]));
  const dead = Array.from({ length: M }, (_, m) => silent[m] || levelDb[m] < medLevel - DEAD_BELOW_MEDIAN_DB);
  const hotLevel = Array.from({ length: M }, (_, m) => !dead[m] && levelDb[m] > medLevel + HOT_ABOVE_MEDIAN_DB);
  const clipping = Array.from({ length: M }, (_, m) => clipped[m] >= CLIP_FRACTION);
  const medLive = median(Array.from(levelDb).filter((_, m) => !dead[m]));

  // ---- direction ----
  let azimuthDeg: number;
  let elevationDeg: number;
  if (input.direction) {
    azimuthDeg = input.direction.azimuthDeg;
    elevationDeg = input.direction.elevationDeg ?? 0;
  } else {
    azimuthDeg = scanAzimuth(kept, positions, freqs, c, dead, 1, 0, 360);
    elevationDeg = 0;
  }

  // ---- per-channel fit of the residual cross-spectrum ----
  let maxTravelS = 0;
  for (let a = 0; a < M; a++) for (let b = a + 1; b < M; b++) maxTravelS = Math.max(maxTravelS, Math.hypot(positions[a][0] - positions[b][0], positions[a][1] - positions[b][1], positions[a][2] - positions[b][2]) / c);
  const reachS = 2 * maxTravelS + DELAY_SEARCH_MARGIN_US * 1e-6;
  const tau0 = arrivalTimes(positions, azimuthDeg, elevationDeg, c);
  const rawDelay = new Float64Array(M).fill(Number.NaN); // measured delay of m behind ref, s (prediction included)
  const phase = new Float64Array(M).fill(Number.NaN);
  const coh = new Float64Array(M).fill(Number.NaN);
  const z = new Float64Array(2 * B);
  const w = new Float64Array(B);
  for (let m = 0; m < M; m++) {
    if (dead[m]) continue;
    if (m === ref) {
      rawDelay[m] = 0;
      phase[m] = 0;
      coh[m] = 1;
      continue;
    }
    const dt = tau0[m] - tau0[ref];
    let cohSum = 0;
    for (let b = 0; b < B; b++) {
      const cr = C[2 * (m * B + b)];
      const ci = C[2 * (m * B + b) + 1];
      const pp = P[m * B + b] * P[ref * B + b];
      const g2 = pp > 0 ? Math.min((cr * cr + ci * ci) / pp, 1) : 0;
      cohSum += g2;
      w[b] = Math.min(g2 / (1 - g2 + 1e-6), 1e4);
      const ph = 2 * Math.PI * freqs[b] * dt;
      z[2 * b] = cr * Math.cos(ph) - ci * Math.sin(ph);
      z[2 * b + 1] = cr * Math.sin(ph) + ci * Math.cos(ph);
    }
    coh[m] = cohSum / B;
    const fit = fitLinearPhase(z, w, freqs, reachS);
    rawDelay[m] = fit.delayS + dt;
    phase[m] = fit.phaseRad;
  }
  const heard = Array.from({ length: M }, (_, m) => !dead[m] && coh[m] >= MIN_COHERENCE);

  // Residuals against the prediction at a direction, the median of the heard channels taken as zero.
  const residualsAt = (az: number, el: number): { r: Float64Array; offset: number; tau: Float64Array } => {
    const tau = arrivalTimes(positions, az, el, c);
    const r = new Float64Array(M).fill(Number.NaN);
    for (let m = 0; m < M; m++) if (!Number.isNaN(rawDelay[m])) r[m] = rawDelay[m] - (tau[m] - tau[ref]);
    const offset = median(Array.from(r).filter((_, m) => heard[m]));
    for (let m = 0; m < M; m++) r[m] -= offset;
    return { r, offset, tau };
  };
  if (!input.direction) {
    // The conventional peak is pulled by the very faults the check looks for (with a swap, an
    // inversion and a moved microphone on a ring of 8 it came out 60° off). The measured delays do
    // not depend on it (the delay search reaches over every direction), so the direction is the
    // one whose prediction explains the most channels: a cost that saturates at the bound, so
    // swapped and misplaced channels do not pull it; over the whole turn in 0.5° steps, starting at
    // the conventional peak (which wins ties), then ±1° in 0.02° steps.
    const capS = bound * 1e-6;
    const cost = (az: number) => {
      const { r } = residualsAt(az, 0);
      let sum = 0;
      for (let m = 0; m < M; m++) if (heard[m]) sum += Math.min(r[m] * r[m], capS * capS);
      return sum;
    };
    let bestAz = azimuthDeg;
    let bestCost = cost(azimuthDeg);
    for (let k = 1; k < 720; k++) {
      const az = azimuthDeg + k * 0.5;
      const v = cost(az);
      if (v < bestCost * (1 - 1e-9)) {
        bestCost = v;
        bestAz = az;
      }
    }
    const coarse = bestAz;
    for (let k = -50; k <= 50; k++) {
      const az = coarse + k * 0.02;
      const v = cost(az);
      if (v < bestCost * (1 - 1e-9)) {
        bestCost = v;
        bestAz = az;
      }
    }
    azimuthDeg = ((bestAz % 360) + 360) % 360;
  }
  const { r: resid, offset, tau } = residualsAt(azimuthDeg, elevationDeg);
  // Phase intercepts: relative to the majority (a reference that is itself inverted flips everyone).
  const flipped = Array.from({ length: M }, (_, m) => heard[m] && Math.abs(phase[m]) > (INVERTED_PHASE_DEG * Math.PI) / 180).filter(Boolean).length;
  const heardCount = heard.filter(Boolean).length;
  if (flipped * 2 > heardCount) for (let m = 0; m < M; m++) if (!Number.isNaN(phase[m])) phase[m] = wrapPi(phase[m] + Math.PI);
  const inverted = Array.from({ length: M }, (_, m) => heard[m] && Math.abs(phase[m]) > (INVERTED_PHASE_DEG * Math.PI) / 180);

  // ---- swaps: channel i's delay matches position j's prediction and j's matches i's ----
  const boundS = bound * 1e-6;
  const off = Array.from({ length: M }, (_, m) => heard[m] && Math.abs(resid[m]) > boundS);
  /** Residual of channel i if it carried position j's signal. */
  const residAs = (i: number, j: number) => rawDelay[i] - (tau[j] - tau[ref]) - offset;
  const carries = Array.from({ length: M }, (_, m) => m);
  const F = Array.from({ length: M }, (_, m) => m).filter((m) => off[m]);
  const used = new Set<number>();
  const pairs: [number, number, number][] = [];
  for (let a = 0; a < F.length; a++) {
    for (let b = a + 1; b < F.length; b++) {
      const i = F[a];
      const j = F[b];
      const e = Math.max(Math.abs(residAs(i, j)), Math.abs(residAs(j, i)));
      if (e < boundS) pairs.push([i, j, e]);
    }
  }
  pairs.sort((p, q) => p[2] - q[2]);
  const swaps: [number, number][] = [];
  for (const [i, j] of pairs) {
    if (used.has(i) || used.has(j)) continue;
    used.add(i);
    used.add(j);
    carries[i] = j;
    carries[j] = i;
    swaps.push([i, j]);
  }
  // Three channels in a ring (i carries j, j carries k, k carries i), among those left.
  const rest = F.filter((m) => !used.has(m));
  for (const i of rest) {
    for (const j of rest) {
      for (const k of rest) {
        if (i === j || j === k || i === k || used.has(i) || used.has(j) || used.has(k)) continue;
        if (Math.abs(residAs(i, j)) < boundS && Math.abs(residAs(j, k)) < boundS && Math.abs(residAs(k, i)) < boundS) {
          carries[i] = j;
          carries[j] = k;
          carries[k] = i;
          used.add(i).add(j).add(k);
        }
      }
    }
  }
  const misplaced = Array.from({ length: M }, (_, m) => off[m] && !used.has(m));

  // ---- rows and faults ----
  const rows: ChannelCheck[] = [];
  for (let m = 0; m < M; m++) {
    const faults: ChannelFault[] = [];
    if (dead[m]) faults.push('dead');
    if (hotLevel[m]) faults.push('hot');
    if (clipping[m]) faults.push('clipping');
    if (!dead[m] && !heard[m]) faults.push('incoherent');
    if (inverted[m]) faults.push('inverted');
    if (used.has(m)) faults.push('swapped');
    if (misplaced[m]) faults.push('misplaced');
    const measurable = !dead[m] && !Number.isNaN(resid[m]);
    rows.push({
      channel: m,
      levelDb: tidyNum(levelDb[m], 2),
      gainDb: dead[m] ? null : tidyNum(levelDb[m] - medLive, 2),
      delayUs: measurable ? tidyNum(resid[m] * 1e6, 2) : null,
      phaseDeg: measurable ? tidyNum((phase[m] * 180) / Math.PI, 1) : null,
      coherence: Number.isNaN(coh[m]) ? null : tidyNum(coh[m], 3),
      clippedFraction: clipped[m],
      carriesPosition: carries[m],
      offsetMm: misplaced[m] ? tidyNum(-resid[m] * c * 1000, 1) : null,
      faults,
    });
  }
  const faults: ArrayFault[] = [];
  for (const [i, j] of swaps) faults.push({ kind: 'swapped', channels: [i, j], text: `channels ${i} and ${j} look swapped` });
  const ring = F.filter((m) => used.has(m) && !swaps.some((s) => s.includes(m)));
  if (ring.length > 0) faults.push({ kind: 'swapped', channels: ring, text: `channels ${ring.join(', ')} look exchanged in a ring (${ring.map((m) => `${m} carries position ${carries[m]}`).join(', ')})` });
  for (let m = 0; m < M; m++) {
    const row = rows[m];
    if (misplaced[m]) {
      const cm = Math.abs(row.offsetMm!) / 10;
      faults.push({ kind: 'misplaced', channels: [m], text: `channel ${m} is ${cm.toFixed(1)} cm off (${Math.abs(row.delayUs!).toFixed(0)} µs), ${row.offsetMm! > 0 ? 'toward' : 'away from'} the source` });
    }
    if (inverted[m]) faults.push({ kind: 'inverted', channels: [m], text: `channel ${m} inverted` });
    if (dead[m]) faults.push({ kind: 'dead', channels: [m], text: silent[m] ? `channel ${m} dead (digital silence)` : `channel ${m} dead (${(levelDb[m] - medLevel).toFixed(0)} dB below the median)` });
    if (hotLevel[m]) faults.push({ kind: 'hot', channels: [m], text: `channel ${m} hot (${(levelDb[m] - medLevel).toFixed(1)} dB above the median)` });
    if (clipping[m]) faults.push({ kind: 'clipping', channels: [m], text: `channel ${m} clips (${(clipped[m] * 100).toFixed(2)} % of samples at full scale)` });
    if (!dead[m] && !heard[m]) faults.push({ kind: 'incoherent', channels: [m], text: `channel ${m} does not hear the source (coherence ${coh[m].toFixed(2)})` });
  }

  // ---- proposed calibration, indexed by position: position p reads input channel order[p] ----
  const order = Array.from({ length: M }, (_, p) => p);
  for (let m = 0; m < M; m++) order[carries[m]] = m;
  const gainDb: number[] = [];
  const delayUs: number[] = [];
  const polarity: number[] = [];
  for (let p = 0; p < M; p++) {
    const q = order[p];
    const g = dead[q] ? 0 : levelDb[q] - medLive;
    gainDb.push(tidyNum(Math.max(-MAX_CALIBRATION_GAIN_DB, Math.min(MAX_CALIBRATION_GAIN_DB, round(g, 0.01))), 2));
    const d = heard[q] ? residAs(q, p) * 1e6 : 0;
    delayUs.push(tidyNum(Math.max(-MAX_CALIBRATION_DELAY_US, Math.min(MAX_CALIBRATION_DELAY_US, round(d, 0.1))), 1));
    polarity.push(inverted[q] ? -1 : 1);
  }
  const calibration: ChannelCalibration = { gainDb, delayUs };
  if (polarity.some((s) => s < 0)) calibration.polarity = polarity;
  if (order.some((q, p) => q !== p)) calibration.channelOrder = order;

  return {
    direction: { azimuthDeg: tidyNum(azimuthDeg, 2), elevationDeg: tidyNum(elevationDeg, 2), from: input.direction ? 'stated' : 'scan' },
    bandHz: [lo, hi],
    fftSize: N,
    snapshots: hops,
    referenceChannel: ref,
    misplacedBoundUs: bound,
    channels: rows,
    faults,
    calibration,
  };
}

/**
 * Azimuth (degrees, elevation 0) of the strongest conventional (delay-and-sum) response, summed
 * over the band and the kept snapshots; dead channels left out, each channel normalised to unit
 * band power so a hot channel does not steer the scan.
 */
function scanAzimuth(snaps: Float64Array[], positions: ArrayCheckInput['positions'], freqs: Float64Array, c: number, dead: boolean[], stepDeg: number, fromDeg: number, toDeg: number): number {
  const M = positions.length;
  const B = freqs.length;
  const norm = new Float64Array(M);
  for (const s of snaps) for (let b = 0; b < B; b++) for (let m = 0; m < M; m++) norm[m] += s[2 * (b * M + m)] ** 2 + s[2 * (b * M + m) + 1] ** 2;
  for (let m = 0; m < M; m++) norm[m] = dead[m] || norm[m] === 0 ? 0 : 1 / Math.sqrt(norm[m]);
  let best = -1;
  let bestAz = fromDeg;
  const vr = new Float64Array(M * B);
  const vi = new Float64Array(M * B);
  for (let az = fromDeg; az < toDeg; az += stepDeg) {
    const tau = arrivalTimes(positions, az, 0, c);
    for (let b = 0; b < B; b++) {
      for (let m = 0; m < M; m++) {
        // Conjugate steering: e^{+j2πfτ_m} undoes the delay of channel m.
        const ph = 2 * Math.PI * freqs[b] * tau[m];
        vr[b * M + m] = Math.cos(ph) * norm[m];
        vi[b * M + m] = Math.sin(ph) * norm[m];
      }
    }
    let p = 0;
    for (const s of snaps) {
      for (let b = 0; b < B; b++) {
        let yr = 0;
        let yi = 0;
        for (let m = 0; m < M; m++) {
          const xr = s[2 * (b * M + m)];
          const xi = s[2 * (b * M + m) + 1];
          const cr = vr[b * M + m];
          const ci = vi[b * M + m];
          yr += xr * cr - xi * ci;
          yi += xr * ci + xi * cr;
        }
        p += yr * yr + yi * yi;
      }
    }
    if (p > best) {
      best = p;
      bestAz = az;
    }
  }
  return bestAz;
}
