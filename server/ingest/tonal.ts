/**
 * A stationary tonal plane-wave source rendered analytically: sensor m hears
 * Σ_h A_h sin(2π f_h (t − τ_m) + φ_h). Using sin(a − b) = sin a cos b − cos a sin b, the per-sensor
 * part cos/sin(2π f_h τ_m) is a constant weight, and sin/cos(2π f_h t + φ_h) are shared by all
 * sensors. Those come from a rotation recurrence that the caller re-anchors to the exact phase at
 * fixed sample indices, so rounding never accumulates beyond one anchor period.
 */

import type { TonalSpec } from './scenario.ts';

export class TonalSource {
  readonly spec: TonalSpec;
  readonly channels: number;
  /** Per harmonic: cycles per sample, start phase, one-sample rotation, recurrence state. */
  readonly #cyclesPerSample: Float64Array;
  readonly #phaseRad: Float64Array;
  readonly #stepCos: Float64Array;
  readonly #stepSin: Float64Array;
  readonly #sinState: Float64Array;
  readonly #cosState: Float64Array;
  /** Per harmonic h and channel m at [h·M + m]: A_h·cos(2π f_h τ_m) and −A_h·sin(2π f_h τ_m). */
  readonly #sinWeight: Float64Array;
  readonly #cosWeight: Float64Array;
  readonly #sinScratch: Float64Array;
  readonly #cosScratch: Float64Array;

  /**
   * @param tauSamples per-channel arrival time relative to the origin, τ_m·fs (samples)
   * @param maxFrames longest run passed to render()
   */
  constructor(spec: TonalSpec, sampleRateHz: number, tauSamples: Float64Array, maxFrames: number) {
    const h = spec.harmonics.length;
    const m = tauSamples.length;
    this.spec = spec;
    this.channels = m;
    // Amplitudes from the relative levels so that the total rms, sqrt(Σ A²/2), equals levelDb.
    const rel = spec.harmonics.map((x) => 10 ** (x.relativeDb / 20));
    const scale = 10 ** (spec.levelDb / 20) / Math.sqrt(rel.reduce((s, a) => s + (a * a) / 2, 0));
    this.#cyclesPerSample = new Float64Array(h);
    this.#phaseRad = new Float64Array(h);
    this.#stepCos = new Float64Array(h);
    this.#stepSin = new Float64Array(h);
    this.#sinState = new Float64Array(h);
    this.#cosState = new Float64Array(h);
    this.#sinWeight = new Float64Array(h * m);
    this.#cosWeight = new Float64Array(h * m);
    this.#sinScratch = new Float64Array(maxFrames);
    this.#cosScratch = new Float64Array(maxFrames);
    spec.harmonics.forEach((x, k) => {
      const f = (x.number * spec.fundamentalHz) / sampleRateHz;
      if (!(f > 0 && f < 0.5)) {
        throw new RangeError(`TonalSource: ${spec.name} harmonic ${x.number} (${x.number * spec.fundamentalHz} Hz) is not below Nyquist at ${sampleRateHz} Hz`);
      }
      this.#cyclesPerSample[k] = f;
      this.#phaseRad[k] = x.phaseRad;
      this.#stepCos[k] = Math.cos(2 * Math.PI * f);
      this.#stepSin[k] = Math.sin(2 * Math.PI * f);
      const amp = scale * rel[k];
      for (let ch = 0; ch < m; ch++) {
        const wTau = 2 * Math.PI * f * tauSamples[ch];
        this.#sinWeight[k * m + ch] = amp * Math.cos(wTau);
        this.#cosWeight[k * m + ch] = -amp * Math.sin(wTau);
      }
    });
  }

  /**
   * Adds samples n0 … n0+n−1 of every channel into planar `data` (channel ch at ch·frames + i0).
   * @param anchor recompute the phase exactly at n0 instead of continuing the recurrence; must be
   *   true on the first call and after any jump of the sample index
   */
  render(data: Float64Array, frames: number, i0: number, n: number, n0: number, anchor: boolean): void {
    if (n > this.#sinScratch.length) throw new RangeError(`TonalSource.render: n = ${n} exceeds maxFrames ${this.#sinScratch.length}`);
    const m = this.channels;
    const sinS = this.#sinScratch;
    const cosS = this.#cosScratch;
    for (let k = 0; k < this.#cyclesPerSample.length; k++) {
      let s: number;
      let c: number;
      if (anchor) {
        // 2π·frac(f·n0) + φ keeps the argument small, so sin/cos stay exact at large sample indices.
        const cycles = this.#cyclesPerSample[k] * n0;
        const ph = 2 * Math.PI * (cycles - Math.floor(cycles)) + this.#phaseRad[k];
        s = Math.sin(ph);
        c = Math.cos(ph);
      } else {
        s = this.#sinState[k];
        c = this.#cosState[k];
      }
      const cw = this.#stepCos[k];
      const sw = this.#stepSin[k];
      for (let i = 0; i < n; i++) {
        sinS[i] = s;
        cosS[i] = c;
        const s1 = s * cw + c * sw;
        c = c * cw - s * sw;
        s = s1;
      }
      this.#sinState[k] = s;
      this.#cosState[k] = c;
      for (let ch = 0; ch < m; ch++) {
        const a = this.#sinWeight[k * m + ch];
        const b = this.#cosWeight[k * m + ch];
        const base = ch * frames + i0;
        for (let i = 0; i < n; i++) data[base + i] += a * sinS[i] + b * cosS[i];
      }
    }
  }
}
