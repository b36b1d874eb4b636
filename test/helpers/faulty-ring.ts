/**
 * The faulty 8-microphone ring of the array-check tests (radius 0.1 m, one broadband source at 30°):
 * cables 2 and 5 exchanged, channel 6 inverted, microphone 1 sitting 2 cm radially out of its hole,
 * gains ±2 dB. Rendered with test/helpers/plane-waves.ts (DESIGN.md §3, not the code under test).
 */
import { encodeFrame } from '../../shared/frame.ts';
import { renderPlaneWaves } from './plane-waves.ts';

export const RING_M = 8;
export const RING_FS = 48000;
export const RING = Array.from({ length: RING_M }, (_, m) => [0.1 * Math.cos((2 * Math.PI * m) / RING_M), 0.1 * Math.sin((2 * Math.PI * m) / RING_M), 0] as [number, number, number]);

/** Interleaved frames × 8 of the faulty ring. */
export function faultyRing(frames: number): Float32Array {
  const M = RING_M;
  const moved: [number, number, number] = [0.12 * Math.cos(Math.PI / 4), 0.12 * Math.sin(Math.PI / 4), 0];
  const x = renderPlaneWaves({ positions: RING.map((p, m) => (m === 1 ? moved : p)), sampleRateHz: RING_FS, frames, speedOfSoundMps: 343.2, sources: [{ azimuthDeg: 30, rms: 0.1, loHz: 200, hiHz: 8000, seed: 21 }], noiseRms: 0.001, noiseSeed: 22 });
  const gains = [2, 0, -2, 0, 2, 0, 0, -2];
  const src = [0, 1, 5, 3, 4, 2, 6, 7]; // cables 2 and 5 exchanged
  const out = new Float32Array(x.length);
  for (let i = 0; i < frames; i++) for (let c = 0; c < M; c++) out[i * M + c] = x[i * M + src[c]] * Math.pow(10, gains[c] / 20) * (c === 6 ? -1 : 1);
  return out;
}

/** The first `count` 480-sample float32 frames of interleaved ring samples, as the ingest wire format carries them. */
export function ringFrames(x: Float32Array, count: number, n = 480): Uint8Array[] {
  return Array.from({ length: count }, (_, k) => encodeFrame({ streamId: 1, sequence: k, firstSample: k * n, sampleRateHz: RING_FS, channels: RING_M, samplesPerChannel: n, encoding: 'float32' }, x.subarray(k * n * RING_M, (k + 1) * n * RING_M)));
}
