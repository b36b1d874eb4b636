/**
 * Independent plane-wave synthesis for tests: each source is seeded Gaussian noise, band-limited and
 * delayed to every sensor in the frequency domain over the whole (power-of-two) signal, so every
 * delay is exact (a circular delay of a periodic signal). Written from the convention in
 * ../shared/DESIGN.md §3, not with the project's steering code: τ_m = −(p_m·u)/c, sensor m hears
 * s(t − τ_m), u = (cos el cos az, cos el sin az, sin el) toward the source. Optional per-channel
 * gain and delay errors stand for an uncalibrated array.
 */
import FFT from 'fft.js';
import type { Block } from '../../shared/types.ts';
import { mulberry32 } from './random.ts';

export interface PlaneWaveSource {
  azimuthDeg: number;
  elevationDeg?: number;
  /** rms at the array origin, full-scale units. */
  rms: number;
  loHz: number;
  hiHz: number;
  seed: number;
}

export interface PlaneWaveScene {
  positions: [number, number, number][];
  sampleRateHz: number;
  /** Power of two. */
  frames: number;
  speedOfSoundMps: number;
  sources: PlaneWaveSource[];
  /** Uncorrelated white noise per sensor, rms. */
  noiseRms: number;
  noiseSeed: number;
  /** Channel m's gain error in dB, applied to all it hears (sources and noise); default 0. */
  channelGainDb?: number[];
  /** Channel m's extra delay in seconds, applied to the sources (exact, circular); default 0. */
  channelDelayS?: number[];
}

function gaussian(rand: () => number): number {
  const u = Math.max(rand(), 1e-300);
  return Math.sqrt(-2 * Math.log(u)) * Math.cos(2 * Math.PI * rand());
}

/** Interleaved float32 samples, frames × M. */
export function renderPlaneWaves(scene: PlaneWaveScene): Float32Array {
  const { positions, sampleRateHz: fs, frames: L, speedOfSoundMps: c } = scene;
  const M = positions.length;
  const fft = new FFT(L);
  const out = new Float64Array(L * M);
  const spec = fft.createComplexArray() as number[];
  const shifted = fft.createComplexArray() as number[];
  const time = fft.createComplexArray() as number[];
  for (const src of scene.sources) {
    const rand = mulberry32(src.seed);
    const s = new Array<number>(L);
    for (let n = 0; n < L; n++) s[n] = gaussian(rand);
    fft.realTransform(spec, s);
    fft.completeSpectrum(spec);
    // Band-limit, then scale so the band-limited signal has the requested rms.
    let energy = 0;
    for (let k = 0; k < L; k++) {
      const f = (Math.min(k, L - k) * fs) / L;
      if (f < src.loHz || f > src.hiHz) spec[2 * k] = spec[2 * k + 1] = 0;
      energy += spec[2 * k] ** 2 + spec[2 * k + 1] ** 2;
    }
    const gain = src.rms / Math.sqrt(energy / (L * L));
    const az = (src.azimuthDeg * Math.PI) / 180;
    const el = ((src.elevationDeg ?? 0) * Math.PI) / 180;
    const u = [Math.cos(el) * Math.cos(az), Math.cos(el) * Math.sin(az), Math.sin(el)];
    for (let m = 0; m < M; m++) {
      const p = positions[m];
      const tau = -(p[0] * u[0] + p[1] * u[1] + p[2] * u[2]) / c + (scene.channelDelayS?.[m] ?? 0);
      for (let k = 0; k < L; k++) {
        // Signed frequency of bin k; the delay multiplies by exp(−j2πfτ).
        const f = ((k <= L / 2 ? k : k - L) * fs) / L;
        const ph = -2 * Math.PI * f * tau;
        const cr = Math.cos(ph);
        const ci = Math.sin(ph);
        const a = spec[2 * k];
        const b = spec[2 * k + 1];
        shifted[2 * k] = a * cr - b * ci;
        shifted[2 * k + 1] = a * ci + b * cr;
      }
      fft.inverseTransform(time, shifted);
      for (let n = 0; n < L; n++) out[n * M + m] += gain * time[2 * n];
    }
  }
  const rand = mulberry32(scene.noiseSeed);
  const x = new Float32Array(L * M);
  for (let i = 0; i < x.length; i++) x[i] = out[i] + scene.noiseRms * gaussian(rand);
  if (scene.channelGainDb) {
    for (let m = 0; m < M; m++) {
      const g = Math.pow(10, scene.channelGainDb[m] / 20);
      for (let n = 0; n < L; n++) x[n * M + m] *= g;
    }
  }
  return x;
}

/** Cut interleaved samples (frames × M) into planar blocks of `blockFrames`, as ingest delivers. */
export function planarBlocks(x: Float32Array, M: number, sampleRateHz: number, blockFrames: number): Block[] {
  const frames = x.length / M;
  const blocks: Block[] = [];
  for (let s = 0; s < frames; s += blockFrames) {
    const n = Math.min(blockFrames, frames - s);
    const data = new Float32Array(M * n);
    for (let i = 0; i < n; i++) for (let c = 0; c < M; c++) data[c * n + i] = x[(s + i) * M + c];
    blocks.push({ streamId: 0, sampleIndex: s, sampleRateHz, channels: M, frames: n, data, gap: false, discontinuity: false });
  }
  return blocks;
}
