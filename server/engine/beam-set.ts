/**
 * The steered beams the engine keeps: look direction, method, and the latest band-averaged response
 * and white noise gain that the workers computed. Weights live in the workers (they own the
 * covariance); this module only names the beams, maps them onto the grid, and adds up the workers'
 * shares of each response.
 */
import type { DirectionGrid } from '../dsp/steering.ts';
import { MAX_BEAMS, type BeamSpec } from './protocol.ts';

/** Default `updateEvery`: a beam gets new weights every BEAM_EVERY-th spectrum row (weights change slowly). */
export const BEAM_EVERY = 4;

export interface BeamState {
  id: number;
  azimuthDeg: number;
  elevationDeg: number;
  method: 'mvdr' | 'delay-and-sum';
  /** Output gain of the beam's audio, dB. */
  gainDb: number;
  /** Peak limiter at −1 dBFS on the beam's audio. */
  limiter: boolean;
  /** New weights every this many spectrum rows (the audio glides between updates). */
  updateEvery: number;
  /** Mean WNG over the band's bins, dB (null until first computed). */
  wngDb: number | null;
  /** Response |wᴴv(θ)|² averaged over the band, dB, per grid direction. */
  responseDb: number[] | null;
  updatedAtMs: number | null;
}

/** Index of the grid direction nearest (great-circle) to the given one. */
export function nearestDirection(grid: DirectionGrid, azimuthDeg: number, elevationDeg: number): number {
  const r = Math.PI / 180;
  const ux = Math.cos(elevationDeg * r) * Math.cos(azimuthDeg * r);
  const uy = Math.cos(elevationDeg * r) * Math.sin(azimuthDeg * r);
  const uz = Math.sin(elevationDeg * r);
  let best = 0;
  let bestDot = -2;
  for (let d = 0; d < grid.count; d++) {
    const a = grid.azimuthDeg[d] * r;
    const e = grid.elevationDeg[d] * r;
    const dot = Math.cos(e) * Math.cos(a) * ux + Math.cos(e) * Math.sin(a) * uy + Math.sin(e) * uz;
    if (dot > bestDot) [bestDot, best] = [dot, d];
  }
  return best;
}

export class BeamSet {
  #beams: BeamState[] = [];
  #nextId = 1;

  get list(): readonly BeamState[] {
    return this.#beams;
  }

  /** @throws RangeError when MAX_BEAMS beams exist already */
  add(azimuthDeg: number, elevationDeg: number, method: 'mvdr' | 'delay-and-sum'): BeamState {
    if (this.#beams.length >= MAX_BEAMS) throw new RangeError(`at most ${MAX_BEAMS} beams`);
    const b: BeamState = { id: this.#nextId++, azimuthDeg, elevationDeg, method, gainDb: 0, limiter: true, updateEvery: BEAM_EVERY, wngDb: null, responseDb: null, updatedAtMs: null };
    this.#beams.push(b);
    return b;
  }

  /** Change a beam in place; returns it, or null for an unknown id. */
  update(id: number, patch: Partial<Pick<BeamState, 'azimuthDeg' | 'elevationDeg' | 'method' | 'gainDb' | 'limiter' | 'updateEvery'>>): BeamState | null {
    const b = this.#beams.find((x) => x.id === id);
    if (!b) return null;
    Object.assign(b, patch);
    return b;
  }

  /** Beams whose weights are due on spectrum scan number `scan`. */
  due(scan: number): number[] {
    return this.#beams.filter((b) => scan % b.updateEvery === 0).map((b) => b.id);
  }

  remove(id: number): boolean {
    const n = this.#beams.length;
    this.#beams = this.#beams.filter((b) => b.id !== id);
    return this.#beams.length !== n;
  }

  /** What the workers need: each beam's look direction as an index into `grid`. */
  specs(grid: DirectionGrid): BeamSpec[] {
    return this.#beams.map((b) => ({ id: b.id, lookIndex: nearestDirection(grid, b.azimuthDeg, b.elevationDeg), method: b.method }));
  }

  /**
   * Add the workers' shares for the beams `ids` (in the order the workers computed them): mean
   * over the band's bins of the response (dB) and of the WNG.
   * @param base index in `results` of worker w's first beam share
   */
  combine(ids: number[], results: Float64Array, base: (w: number) => number, workers: number, directions: number, bins: number, due?: readonly number[]): void {
    const D = directions;
    const now = Date.now();
    ids.forEach((id, i) => {
      const beam = this.#beams.find((b) => b.id === id);
      if (!beam || (due && !due.includes(id))) return;
      const resp = new Float64Array(D);
      let wng = 0;
      for (let w = 0; w < workers; w++) {
        const o = base(w) + i * (D + 1);
        for (let d = 0; d < D; d++) resp[d] += results[o + d];
        wng += results[o + D];
      }
      if (!(wng > 0)) return; // a worker had not taken this beam yet
      beam.wngDb = 10 * Math.log10(wng / bins);
      beam.responseDb = Array.from(resp, (x) => (x > 0 ? 10 * Math.log10(x / bins) : -300));
      beam.updatedAtMs = now;
    });
  }
}
