/**
 * Where a site scene's source is at any time (site-scene-file.ts ScenePath): fixed, or along a
 * polyline at constant speed, the time origin at UTC 0 (the site's common clock; site-scene.ts).
 * Positions are pure functions of the sample time, so every array renders the same motion.
 */
import type { SceneSource } from './site-scene-file.ts';

/**
 * A source's position over time: fixed, or along a polyline at constant speed, round the closed
 * polygon (loop) or there and back, starting at the first point at UTC 0.
 */
export class Trajectory {
  readonly fixed: boolean;
  readonly #x: Float64Array;
  readonly #y: Float64Array;
  readonly #z: Float64Array;
  /** Per segment: unit direction and length; cumulative start. */
  readonly #ux: Float64Array;
  readonly #uy: Float64Array;
  readonly #uz: Float64Array;
  readonly #len: Float64Array;
  readonly #start: Float64Array;
  readonly #lengthM: number;
  readonly #periodM: number;
  readonly #metresPerSample: number;
  readonly #loop: boolean;
  readonly speedMps: number;

  constructor(src: SceneSource, sampleRateHz: number) {
    const pts = src.path ? src.path.pointsM : [src.positionM!];
    const loop = src.path?.loop ?? false;
    this.fixed = src.path === null;
    this.#loop = loop;
    this.speedMps = src.path?.speedMps ?? 0;
    const corners = loop ? [...pts, pts[0]] : pts;
    const segs = Math.max(1, corners.length - 1);
    this.#x = new Float64Array(corners.map((p) => p[0]));
    this.#y = new Float64Array(corners.map((p) => p[1]));
    this.#z = new Float64Array(corners.map((p) => p[2]));
    this.#ux = new Float64Array(segs);
    this.#uy = new Float64Array(segs);
    this.#uz = new Float64Array(segs);
    this.#len = new Float64Array(segs);
    this.#start = new Float64Array(segs);
    let total = 0;
    for (let s = 0; s + 1 < corners.length; s++) {
      const dx = corners[s + 1][0] - corners[s][0];
      const dy = corners[s + 1][1] - corners[s][1];
      const dz = corners[s + 1][2] - corners[s][2];
      const l = Math.hypot(dx, dy, dz);
      this.#ux[s] = dx / l;
      this.#uy[s] = dy / l;
      this.#uz[s] = dz / l;
      this.#len[s] = l;
      this.#start[s] = total;
      total += l;
    }
    this.#lengthM = total;
    this.#periodM = loop ? total : 2 * total;
    this.#metresPerSample = this.speedMps / sampleRateHz;
  }

  /** Writes the position at sample time t (samples on the UTC clock, fractional) into out[0..3). */
  at(tSamples: number, out: Float64Array): void {
    if (this.fixed) {
      out[0] = this.#x[0];
      out[1] = this.#y[0];
      out[2] = this.#z[0];
      return;
    }
    const s = tSamples * this.#metresPerSample;
    const period = this.#periodM;
    let u = s - period * Math.floor(s / period);
    if (!this.#loop && u > this.#lengthM) u = period - u;
    const len = this.#len;
    const n = len.length;
    let k = 0;
    while (k < n - 1 && u > this.#start[k] + len[k]) k++;
    const d = Math.min(Math.max(u - this.#start[k], 0), len[k]);
    out[0] = this.#x[k] + d * this.#ux[k];
    out[1] = this.#y[k] + d * this.#uy[k];
    out[2] = this.#z[k] + d * this.#uz[k];
  }
}
