/**
 * Located sources followed over windows, with stable ids.
 *
 * Per track a Kalman filter on the state (x, y, vx, vy), constant velocity with the discrete
 * white-noise acceleration model (Y. Bar-Shalom, X. R. Li, T. Kirubarajan, *Estimation with
 * Applications to Tracking and Navigation*, Wiley 2001, ch. 6, from memory): over a step of dt
 * seconds, per axis, F = [[1, dt], [0, 1]] and Q = σ_a²·[[dt⁴/4, dt³/2], [dt³/2, dt²]], σ_a the
 * manoeuvre's acceleration (ACCEL_SIGMA_MPS2). A fix is a measurement of the position with the
 * covariance locate.ts gives it (plus MEAS_FLOOR_M² per axis); a fix referred to an earlier time
 * (its emission time, `atUtcMs`: the sound took r/c to reach the arrays) measures the position
 * δ earlier, H = [[1, 0, −δ, 0], [0, 1, 0, −δ]], so the track stays on the window's time.
 *
 * Association: gate by the Mahalanobis distance νᵀS⁻¹ν ≤ 9.21 (χ², 2 degrees of freedom, 99 %,
 * common practice), then global nearest neighbour, greedy by that distance (enough at these
 * counts: a few tens of tracks and fixes), confirmed tracks before tentative ones; a second,
 * manoeuvring model widens each track's gate after a turn (MANOEUVRE_SIGMA_MPS2). A fix left over starts a tentative track; a track is
 * confirmed after CONFIRM_HITS hits and deleted after MAX_MISSES windows without one (a tentative
 * track at its first miss). Ids "s1", "s2", … are never reused while the tracker runs.
 * Bounds: MAX_TRACKS tracks (a fix that would start one more is dropped and counted), HISTORY_LENGTH
 * positions per track.
 */
import type { LocatedSource, SourceTracker, TrackedSource, TrackHint } from './types.ts';
import { covarianceEllipse } from './bearing-fix.ts';

export const ACCEL_SIGMA_MPS2 = 0.3;
/**
 * Manoeuvre, m/s² (chosen) and its prior probability per window (chosen). Each window every track
 * also has a second prediction, the same state with the covariance of σ_a = MANOEUVRE_SIGMA_MPS2
 * (only the covariance differs: the mean of a constant-velocity prediction does not depend on σ_a);
 * a fix is gated against either, and the track is corrected with the one of larger posterior
 * likelihood, prior × N(ν; 0, S) (noise-level switching, a memoryless two-model mixture; Bar-Shalom
 * et al. 2001, ch. 11, from memory). A 2 m/s source turning a right angle changes its velocity by
 * 2.8 m/s within one 0.5 s window (≈ 5.7 m/s²): with σ_a = 0.3 alone the prediction ran straight on,
 * missed the fix 1 s after the corner by 2.1 m (d² 9.7 > 9.21), and the track lost the source at
 * every corner (a new id each time). Measured on a 2 m/s loop with right-angle corners, fixes σ 0.5 m,
 * 0.5 s windows, two laps, 8 seeds: ids per seed 8 (no manoeuvre model), 5.75 (σ 3), 2.75 (σ 5),
 * 1 (σ 8). A still source's small innovations keep choosing σ_a = 0.3.
 */
export const MANOEUVRE_SIGMA_MPS2 = 8;
export const MANOEUVRE_PRIOR = 0.05;
export const GATE_CHI2 = 9.21;
export const CONFIRM_HITS = 2;
export const MAX_MISSES = 4;
export const MAX_TRACKS = 64;
export const HISTORY_LENGTH = 120;
/** Added to each axis's measurement σ, metres (a fix's own covariance can be optimistic). */
export const MEAS_FLOOR_M = 0.1;
/** σ of a new track's velocity, m/s. */
export const INITIAL_SPEED_SIGMA_MPS = 5;
/** Longest step the filter predicts over, seconds (a longer pause is taken as this). */
export const MAX_STEP_S = 10;

export interface TrackerOptions {
  accelSigmaMps2?: number;
  /** σ_a of the manoeuvre model; ≤ accelSigmaMps2 turns it off. */
  manoeuvreSigmaMps2?: number;
  confirmHits?: number;
  maxMisses?: number;
  maxTracks?: number;
  historyLength?: number;
}

interface Track {
  id: string;
  /** State (x, y, vx, vy) and its covariance, row-major 4×4. */
  s: Float64Array;
  P: Float64Array;
  ageWindows: number;
  hits: number;
  misses: number;
  /** The most arrays of any fix the track took. */
  maxNodes: number;
  last: LocatedSource | null;
  history: [number, number, number][];
}

export class ConstantVelocityTracker implements SourceTracker {
  readonly #opts: Required<TrackerOptions>;
  #tracks: Track[] = [];
  #nextId = 1;
  #lastUtcMs: number | null = null;
  /** Fixes dropped because MAX_TRACKS were running; windows refused because their UTC went back. */
  droppedStarts = 0;
  staleWindows = 0;
  /** Fixes a track took under the manoeuvre model. */
  manoeuvres = 0;

  constructor(opts: TrackerOptions = {}) {
    this.#opts = {
      accelSigmaMps2: opts.accelSigmaMps2 ?? ACCEL_SIGMA_MPS2,
      manoeuvreSigmaMps2: opts.manoeuvreSigmaMps2 ?? MANOEUVRE_SIGMA_MPS2,
      confirmHits: opts.confirmHits ?? CONFIRM_HITS,
      maxMisses: opts.maxMisses ?? MAX_MISSES,
      maxTracks: opts.maxTracks ?? MAX_TRACKS,
      historyLength: opts.historyLength ?? HISTORY_LENGTH,
    };
  }

  get trackCount(): number {
    return this.#tracks.length;
  }

  /**
   * Every track's position and velocity predicted at windowUtcMs, for locate.ts (travel time and
   * track support). The tracks themselves are not changed.
   */
  predict(windowUtcMs: number): TrackHint[] {
    const dt = this.#step(windowUtcMs);
    return this.#tracks.map((t) => {
      const s = new Float64Array(t.s), P = new Float64Array(t.P);
      predictState(s, P, dt, this.#opts.accelSigmaMps2);
      return { id: t.id, xM: s[0], yM: s[1], vxMps: s[2], vyMps: s[3], covXY: [P[0], P[1], P[5]], speedSigmaMps: Math.sqrt(Math.max(P[10], P[15])), verified: t.maxNodes >= 3 };
    });
  }

  update(windowUtcMs: number, located: LocatedSource[]): TrackedSource[] {
    if (!Number.isFinite(windowUtcMs) || (this.#lastUtcMs !== null && windowUtcMs < this.#lastUtcMs)) {
      this.staleWindows++;
      return [];
    }
    const dt = this.#step(windowUtcMs);
    this.#lastUtcMs = windowUtcMs;
    const q = this.#opts.accelSigmaMps2;
    const m = this.#opts.manoeuvreSigmaMps2;
    const manoeuvreP: (Float64Array | null)[] = [];
    for (const t of this.#tracks) {
      predictState(t.s, t.P, dt, q);
      t.ageWindows++;
      let Pm: Float64Array | null = null;
      if (m > q && dt > 0) {
        // Q is linear in σ_a²: the manoeuvre's covariance is P + Q(√(m² − q²)).
        Pm = new Float64Array(t.P);
        addProcessNoise(Pm, dt, Math.sqrt(m * m - q * q));
      }
      manoeuvreP.push(Pm);
    }
    const fixes = located.filter((l) => Number.isFinite(l.xM) && Number.isFinite(l.yM) && l.covXY.every(Number.isFinite));
    // Gate (either model) and greedy global nearest neighbour on the Mahalanobis distance.
    const pairs: { t: number; f: number; d2: number; manoeuvre: boolean }[] = [];
    for (let ti = 0; ti < this.#tracks.length; ti++) {
      const t = this.#tracks[ti];
      for (let fi = 0; fi < fixes.length; fi++) {
        const low = innovation(t, fixes[fi], windowUtcMs);
        let manoeuvre = false;
        let d2 = low.d2;
        const Pm = manoeuvreP[ti];
        if (Pm) {
          const Pq = t.P;
          t.P = Pm;
          const high = innovation(t, fixes[fi], windowUtcMs);
          t.P = Pq;
          // Posterior ∝ prior · exp(−d²/2) / √det S.
          const lLow = (1 - MANOEUVRE_PRIOR) * Math.exp(-low.d2 / 2) / Math.sqrt(low.S[0] * low.S[2] - low.S[1] * low.S[1]);
          const lHigh = MANOEUVRE_PRIOR * Math.exp(-high.d2 / 2) / Math.sqrt(high.S[0] * high.S[2] - high.S[1] * high.S[1]);
          if (high.d2 <= GATE_CHI2 && (lHigh > lLow || !(low.d2 <= GATE_CHI2))) {
            manoeuvre = true;
            d2 = high.d2;
          }
        }
        if (d2 <= GATE_CHI2) pairs.push({ t: ti, f: fi, d2, manoeuvre });
      }
    }
    // Confirmed tracks choose first: a tentative track's wide covariance would otherwise win fixes
    // from the confirmed track beside it on the normalised distance, and split it.
    const confirmed = (ti: number) => (this.#tracks[ti].hits >= this.#opts.confirmHits ? 0 : 1);
    pairs.sort((a, b) => confirmed(a.t) - confirmed(b.t) || a.d2 - b.d2);
    const trackUsed = new Uint8Array(this.#tracks.length);
    const fixUsed = new Uint8Array(fixes.length);
    for (const p of pairs) {
      if (trackUsed[p.t] || fixUsed[p.f]) continue;
      trackUsed[p.t] = 1;
      fixUsed[p.f] = 1;
      const t = this.#tracks[p.t];
      if (p.manoeuvre) {
        t.P = manoeuvreP[p.t]!;
        this.manoeuvres++;
      }
      correct(t, fixes[p.f], windowUtcMs);
      t.hits++;
      t.maxNodes = Math.max(t.maxNodes, fixes[p.f].nodes.length);
      t.misses = 0;
      t.last = fixes[p.f];
      t.history.push([windowUtcMs, t.s[0], t.s[1]]);
      if (t.history.length > this.#opts.historyLength) t.history.splice(0, t.history.length - this.#opts.historyLength);
    }
    for (let ti = 0; ti < this.#tracks.length; ti++) {
      if (!trackUsed[ti]) {
        this.#tracks[ti].misses++;
        this.#tracks[ti].last = null;
      }
    }
    this.#tracks = this.#tracks.filter((t) => (t.hits >= this.#opts.confirmHits ? t.misses <= this.#opts.maxMisses : t.misses === 0));
    for (let fi = 0; fi < fixes.length; fi++) {
      if (fixUsed[fi]) continue;
      if (this.#tracks.length >= this.#opts.maxTracks) {
        this.droppedStarts++;
        continue;
      }
      this.#tracks.push(startTrack(`s${this.#nextId++}`, fixes[fi], windowUtcMs));
    }
    const out: TrackedSource[] = [];
    for (const t of this.#tracks) {
      if (t.hits < this.#opts.confirmHits || t.last === null) continue;
      const covXY: [number, number, number] = [t.P[0], t.P[1], t.P[5]];
      const ellipse = covarianceEllipse(covXY);
      out.push({
        ...t.last,
        id: t.id,
        xM: t.s[0],
        yM: t.s[1],
        covXY,
        ellipse,
        uncertaintyM: Math.sqrt(ellipse.majorM * ellipse.minorM),
        atUtcMs: windowUtcMs,
        track: { vxMps: t.s[2], vyMps: t.s[3], ageWindows: t.ageWindows, hits: t.hits, history: t.history.map((h) => [h[0], h[1], h[2]]) },
      });
    }
    return out;
  }

  #step(windowUtcMs: number): number {
    if (this.#lastUtcMs === null || !Number.isFinite(windowUtcMs)) return 0;
    return Math.min(Math.max((windowUtcMs - this.#lastUtcMs) / 1000, 0), MAX_STEP_S);
  }
}

/** s ← F s, P ← F P Fᵀ + Q (constant velocity, discrete white-noise acceleration). */
function predictState(s: Float64Array, P: Float64Array, dt: number, accelSigma: number): void {
  if (dt <= 0) return;
  s[0] += dt * s[2];
  s[1] += dt * s[3];
  // F = I + dt·E, E moves velocity into position: P ← P + dt(EP + PEᵀ) + dt² E P Eᵀ.
  const Q = new Float64Array(16);
  const q = accelSigma * accelSigma;
  const q11 = (q * dt ** 4) / 4, q12 = (q * dt ** 3) / 2, q22 = q * dt * dt;
  Q[0] = q11; Q[2] = q12; Q[8] = q12; Q[10] = q22;
  Q[5] = q11; Q[7] = q12; Q[13] = q12; Q[15] = q22;
  const F = new Float64Array([1, 0, dt, 0, 0, 1, 0, dt, 0, 0, 1, 0, 0, 0, 0, 1]);
  const FP = mul(F, P);
  const next = mulT(FP, F);
  for (let i = 0; i < 16; i++) P[i] = next[i] + Q[i];
}

/** P ← P + Q(σ_a, dt), the white-noise acceleration's process noise per axis. */
function addProcessNoise(P: Float64Array, dt: number, accelSigma: number): void {
  const q = accelSigma * accelSigma;
  const q11 = (q * dt ** 4) / 4, q12 = (q * dt ** 3) / 2, q22 = q * dt * dt;
  P[0] += q11; P[2] += q12; P[8] += q12; P[10] += q22;
  P[5] += q11; P[7] += q12; P[13] += q12; P[15] += q22;
}

function mul(A: Float64Array, B: Float64Array): Float64Array {
  const C = new Float64Array(16);
  for (let i = 0; i < 4; i++) for (let j = 0; j < 4; j++) {
    let s = 0;
    for (let k = 0; k < 4; k++) s += A[i * 4 + k] * B[k * 4 + j];
    C[i * 4 + j] = s;
  }
  return C;
}

/** A·Bᵀ */
function mulT(A: Float64Array, B: Float64Array): Float64Array {
  const C = new Float64Array(16);
  for (let i = 0; i < 4; i++) for (let j = 0; j < 4; j++) {
    let s = 0;
    for (let k = 0; k < 4; k++) s += A[i * 4 + k] * B[j * 4 + k];
    C[i * 4 + j] = s;
  }
  return C;
}

/** δ, seconds: how long before the window the fix's position was (clamped to [0, 2] s). */
function lagS(fix: LocatedSource, windowUtcMs: number): number {
  if (fix.atUtcMs === undefined || !Number.isFinite(fix.atUtcMs)) return 0;
  return Math.min(Math.max((windowUtcMs - fix.atUtcMs) / 1000, 0), 2);
}

/**
 * Innovation ν = z − H s, its covariance S = H P Hᵀ + R and PHᵀ (4×2), H = [[1,0,−δ,0],[0,1,0,−δ]].
 */
function innovation(t: Track, fix: LocatedSource, windowUtcMs: number): { nu: [number, number]; S: [number, number, number]; PHt: Float64Array; d2: number } {
  const d = lagS(fix, windowUtcMs);
  const P = t.P;
  // PHᵀ columns: P·h1, P·h2 with h1 = (1, 0, −δ, 0), h2 = (0, 1, 0, −δ).
  const PHt = new Float64Array(8);
  for (let i = 0; i < 4; i++) {
    PHt[i * 2] = P[i * 4] - d * P[i * 4 + 2];
    PHt[i * 2 + 1] = P[i * 4 + 1] - d * P[i * 4 + 3];
  }
  const f2 = MEAS_FLOOR_M * MEAS_FLOOR_M;
  const s11 = PHt[0] - d * PHt[4] + fix.covXY[0] + f2;
  const s12 = PHt[1] - d * PHt[5] + fix.covXY[1];
  const s22 = PHt[3] - d * PHt[7] + fix.covXY[2] + f2;
  const nu: [number, number] = [fix.xM - (t.s[0] - d * t.s[2]), fix.yM - (t.s[1] - d * t.s[3])];
  const det = s11 * s22 - s12 * s12;
  const d2 = det > 0 ? (s22 * nu[0] * nu[0] - 2 * s12 * nu[0] * nu[1] + s11 * nu[1] * nu[1]) / det : Infinity;
  return { nu, S: [s11, s12, s22], PHt, d2 };
}

/** Kalman update: K = PHᵀS⁻¹, s ← s + Kν, P ← P − K S Kᵀ (symmetrised). */
function correct(t: Track, fix: LocatedSource, windowUtcMs: number): void {
  const { nu, S, PHt } = innovation(t, fix, windowUtcMs);
  const det = S[0] * S[2] - S[1] * S[1];
  const i11 = S[2] / det, i12 = -S[1] / det, i22 = S[0] / det;
  const K = new Float64Array(8);
  for (let i = 0; i < 4; i++) {
    K[i * 2] = PHt[i * 2] * i11 + PHt[i * 2 + 1] * i12;
    K[i * 2 + 1] = PHt[i * 2] * i12 + PHt[i * 2 + 1] * i22;
  }
  for (let i = 0; i < 4; i++) t.s[i] += K[i * 2] * nu[0] + K[i * 2 + 1] * nu[1];
  // P ← P − K (PHᵀ)ᵀ
  for (let i = 0; i < 4; i++) for (let j = 0; j < 4; j++) t.P[i * 4 + j] -= K[i * 2] * PHt[j * 2] + K[i * 2 + 1] * PHt[j * 2 + 1];
  for (let i = 0; i < 4; i++) for (let j = i + 1; j < 4; j++) {
    const m = (t.P[i * 4 + j] + t.P[j * 4 + i]) / 2;
    t.P[i * 4 + j] = m;
    t.P[j * 4 + i] = m;
  }
}

function startTrack(id: string, fix: LocatedSource, windowUtcMs: number): Track {
  const f2 = MEAS_FLOOR_M * MEAS_FLOOR_M;
  const v2 = INITIAL_SPEED_SIGMA_MPS * INITIAL_SPEED_SIGMA_MPS;
  const P = new Float64Array(16);
  P[0] = fix.covXY[0] + f2; P[1] = fix.covXY[1]; P[4] = fix.covXY[1]; P[5] = fix.covXY[2] + f2;
  P[10] = v2; P[15] = v2;
  return { id, s: new Float64Array([fix.xM, fix.yM, 0, 0]), P, ageWindows: 1, hits: 1, misses: 0, maxNodes: fix.nodes.length, last: fix, history: [[windowUtcMs, fix.xM, fix.yM]] };
}
