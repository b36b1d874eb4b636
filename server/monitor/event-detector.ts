/**
 * Events from one rule (shared/rules.ts) on one sector's levels, hop by hop, on the stream's sample
 * clock. Indicative levels only.
 *
 * Level. Each hop's mean square (sector-meters.ts) is time-weighted like a sound level meter's F
 * (fast) setting: ms_F ← ms_F + α(ms − ms_F), α = 1 − exp(−H/(fs·τ_F)), τ_F = 0.125 s (IEC 61672-1's
 * F time constant, from memory), and L_F = 10·log10(ms_F) + offset (dB SPL when calibrated). For a
 * step 10 dB over the threshold, L_F crosses it τ_F·ln(1/(1 − 10^−1)) = 0.013 s after the step, so
 * the onset is placed within that and one hop. The F level falls slowly (4.3 dB per τ_F: 0.29 s for
 * 10 dB), which would place every end that much late; the release is therefore judged on a second,
 * faster level (τ_R = 0.01 s, chosen: a couple of hops, enough to pass over one hop's dip), so an
 * end is placed within a few hops of the sound's own end. Peaks are the F level's.
 *
 * Background. For `above-background`, the threshold is the sector's running L90 plus `db`: the level
 * exceeded by 90 % of the last BACKGROUND_SECONDS 1-s values (the (100 − 90)th percentile, linear
 * interpolation), fed by the caller once a second (`second()`); until BACKGROUND_MIN_SECONDS have
 * been seen there is no background and no event.
 *
 * States: idle → pending (L_F above the threshold; its first sample is the candidate start) →
 * active after `minDurationS` above ('started', start = the candidate's first sample; falling below
 * earlier returns to idle) → releasing (L_F below threshold − hysteresis; back to active if it rises
 * over that again) → 'ended' once `releaseS` has passed below (end = the sample where that time is
 * up, i.e. the last sample above + releaseS). While active, 'updated' every UPDATE_EVERY_S with the
 * peak so far. Each event carries its peak L_F, the Leq over the event (energy mean of the hop mean
 * squares from start to end), and the direction at the peak (the sector beam's look direction,
 * followed while it lasts). Nothing is allocated per hop while idle.
 */
import type { Rule } from '../../shared/rules.ts';

export const TAU_F_S = 0.125;
/** Time constant of the level the release is judged on, s (chosen; see the file's comment). */
export const TAU_RELEASE_S = 0.01;
export const BACKGROUND_SECONDS = 600;
export const BACKGROUND_MIN_SECONDS = 30;
export const UPDATE_EVERY_S = 1;

export interface EventChange {
  kind: 'started' | 'updated' | 'ended';
  rule: string;
  sector: string;
  /** Event number of this detector (1, 2, …). */
  seq: number;
  startSample: number;
  /** The end (ended only), else null. */
  endSample: number | null;
  /** The sample this change was decided at. */
  atSample: number;
  peakDb: number;
  leqDb: number;
  /** Direction of the peak, degrees (null when the caller gave none). */
  azimuthDeg: number | null;
  elevationDeg: number | null;
  /** The threshold in force when it started, dB. */
  thresholdDb: number;
}

type State = 'idle' | 'pending' | 'active' | 'releasing';

export class EventDetector {
  readonly rule: Rule;
  readonly #fs: number;
  readonly #offsetDb: number;
  #msF = 0;
  #msR = 0;
  #primed = false;
  #state: State = 'idle';
  #candidate = 0;
  #releaseFrom = 0;
  #seq = 0;
  #start = 0;
  #peakDb = -Infinity;
  #peakAz: number | null = null;
  #peakEl: number | null = null;
  #energy = 0;
  #samples = 0;
  #lastUpdate = 0;
  #threshold = 0;
  #lastEnd = -Infinity;
  /** Times the stream's clock went back (a new stream): the state was dropped. */
  restarts = 0;
  readonly #bg = new Float64Array(BACKGROUND_SECONDS);
  #bgCount = 0;
  #bgNext = 0;
  readonly #sorted = new Float64Array(BACKGROUND_SECONDS);
  #l90: number | null = null;

  /** @param offsetDb added to 10·log10(mean square): 0 for dBFS, the SPL offset when calibrated */
  constructor(rule: Rule, sampleRateHz: number, offsetDb = 0) {
    this.rule = rule;
    this.#fs = sampleRateHz;
    this.#offsetDb = offsetDb;
  }

  get state(): State {
    return this.#state;
  }

  /** The sector's running L90 (null until enough seconds). */
  get backgroundDb(): number | null {
    return this.#l90;
  }

  /** One 1-s Leq of the sector (dB, with the offset): the background's input. */
  second(leqDb: number): void {
    if (!Number.isFinite(leqDb)) return;
    this.#bg[this.#bgNext] = leqDb;
    this.#bgNext = (this.#bgNext + 1) % BACKGROUND_SECONDS;
    if (this.#bgCount < BACKGROUND_SECONDS) this.#bgCount++;
    if (this.#bgCount < BACKGROUND_MIN_SECONDS) return;
    const n = this.#bgCount;
    const s = this.#sorted.subarray(0, n);
    s.set(this.#bg.subarray(0, n));
    s.sort();
    // L90: exceeded 90 % of the time = the 10th percentile (linear interpolation between order statistics).
    const pos = 0.1 * (n - 1), i = Math.floor(pos), f = pos - i;
    this.#l90 = i + 1 < n ? s[i] * (1 - f) + s[i + 1] * f : s[i];
  }

  #thresholdNow(): number | null {
    const t = this.rule.threshold;
    if (t.mode === 'absolute') return t.db;
    return this.#l90 === null ? null : this.#l90 + t.db;
  }

  /**
   * One hop: `frames` samples from `sampleIndex` with mean square `ms`; the sector beam's look
   * direction (or null). Returns a change, or null.
   */
  hop(sampleIndex: number, frames: number, ms: number, azimuthDeg: number | null = null, elevationDeg: number | null = null): EventChange | null {
    if (!(ms >= 0) || !Number.isFinite(ms)) return null;
    // The stream started again (its clock went back): what was pending or active cannot go on.
    if (sampleIndex < this.#lastEnd) {
      this.restarts++;
      this.#state = 'idle';
      this.#primed = false;
    }
    this.#lastEnd = sampleIndex + frames;
    const alpha = 1 - Math.exp(-frames / (this.#fs * TAU_F_S));
    const alphaR = 1 - Math.exp(-frames / (this.#fs * TAU_RELEASE_S));
    if (!this.#primed) {
      this.#msF = ms;
      this.#msR = ms;
      this.#primed = true;
    } else {
      this.#msF += alpha * (ms - this.#msF);
      this.#msR += alphaR * (ms - this.#msR);
    }
    const level = 10 * Math.log10(Math.max(this.#msF, 1e-30)) + this.#offsetDb;
    const fast = 10 * Math.log10(Math.max(this.#msR, 1e-30)) + this.#offsetDb;
    const end = sampleIndex + frames;
    const r = this.rule;
    switch (this.#state) {
      case 'idle': {
        const thr = this.#thresholdNow();
        if (thr === null || !(level > thr)) return null;
        this.#state = 'pending';
        this.#candidate = sampleIndex;
        this.#threshold = thr;
        this.#energy = 0;
        this.#samples = 0;
        this.#peakDb = -Infinity;
        this.#accumulate(ms, frames, level, azimuthDeg, elevationDeg);
        return this.#pendingCheck(end);
      }
      case 'pending': {
        if (!(level > this.#threshold)) {
          this.#state = 'idle';
          return null;
        }
        this.#accumulate(ms, frames, level, azimuthDeg, elevationDeg);
        return this.#pendingCheck(end);
      }
      case 'active':
      case 'releasing': {
        this.#accumulate(ms, frames, level, azimuthDeg, elevationDeg);
        if (fast > this.#releaseLevel()) {
          this.#state = 'active';
        } else if (this.#state === 'active') {
          this.#state = 'releasing';
          this.#releaseFrom = sampleIndex;
        }
        if (this.#state === 'releasing' && end - this.#releaseFrom >= r.releaseS * this.#fs) {
          this.#state = 'idle';
          const endSample = this.#releaseFrom + Math.round(r.releaseS * this.#fs);
          return this.#change('ended', end, endSample);
        }
        if (end - this.#lastUpdate >= UPDATE_EVERY_S * this.#fs) {
          this.#lastUpdate = end;
          return this.#change('updated', end, null);
        }
        return null;
      }
    }
  }

  /**
   * Below this the event is releasing: threshold − hysteresis, and in above-background mode never
   * lower than half-way from the background to the threshold (a hysteresis as large as the
   * threshold's height would put the release level at the background itself, and the event would
   * never end).
   */
  #releaseLevel(): number {
    const level = this.#threshold - this.rule.hysteresisDb;
    if (this.rule.threshold.mode !== 'above-background' || this.#l90 === null) return level;
    return Math.max(level, this.#l90 + this.rule.threshold.db / 2);
  }

  #pendingCheck(end: number): EventChange | null {
    if (end - this.#candidate < this.rule.minDurationS * this.#fs) return null;
    this.#state = 'active';
    this.#seq++;
    this.#start = this.#candidate;
    this.#lastUpdate = end;
    return this.#change('started', end, null);
  }

  #accumulate(ms: number, frames: number, level: number, az: number | null, el: number | null): void {
    this.#energy += ms * frames;
    this.#samples += frames;
    if (level > this.#peakDb) {
      this.#peakDb = level;
      this.#peakAz = az;
      this.#peakEl = el;
    }
  }

  #change(kind: EventChange['kind'], at: number, endSample: number | null): EventChange {
    return {
      kind,
      rule: this.rule.name,
      sector: this.rule.sector,
      seq: this.#seq,
      startSample: this.#start,
      endSample,
      atSample: at,
      peakDb: this.#peakDb,
      leqDb: 10 * Math.log10(Math.max(this.#energy / Math.max(this.#samples, 1), 1e-30)) + this.#offsetDb,
      azimuthDeg: this.#peakAz,
      elevationDeg: this.#peakEl,
      thresholdDb: this.#threshold,
    };
  }
}
