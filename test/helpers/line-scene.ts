/**
 * The exact two-source scene of the monitoring tests (sector-meters, monitor-events): an 8-microphone
 * line along x with a spacing of 3 samples at 48 kHz and 343.2 m/s, so a plane wave from endfire (0°)
 * reaches microphone m exactly 3·m samples early and one from broadside (90°) reaches all at once:
 * no fractional delay, no rendering error. Blocks are planar (channel m at m·frames).
 */
import type { ProcessingParams } from '../../server/engine/params.ts';
import type { ArrayGeometry, Block } from '../../shared/types.ts';

export const LINE_FS = 48_000;
export const LINE_C = 343.2;
export const LINE_M = 8;
export const LINE_N = 512;
export const LINE_SPACING_M = (3 * LINE_C) / LINE_FS;

export const lineGeometry = (): ArrayGeometry => ({ name: 'line-8-test', positions: Array.from({ length: LINE_M }, (_, m) => [m * LINE_SPACING_M, 0, 0] as [number, number, number]) });

/** τ 0.5 s, loading 1 %, 300–4000 Hz, azimuth 0–180° by 2°, MVDR and conventional at 10 rows/s, N 512. */
export const lineParams = (): ProcessingParams => ({ lambda: 1 - LINE_N / 2 / (LINE_FS * 0.5), loading: { mode: 'relative', ratio: 0.01 }, bandHz: [300, 4000], grid: { azimuthDeg: { startDeg: 0, stopDeg: 180, stepDeg: 2 } }, methods: ['mvdr', 'conventional'], spectrumRateHz: 10, normalise: false, fftSize: LINE_N });

/**
 * Block k of `frames` samples: the broadside signal `s` on every microphone plus the endfire signal
 * `i` (length ≥ s.length + 3·M) 3·m samples ahead on microphone m, plus `noise()` per sample.
 */
export function lineBlock(k: number, frames: number, s: Float32Array, i: Float32Array, noise: () => number = () => 0): Block {
  const data = new Float32Array(LINE_M * frames);
  for (let m = 0; m < LINE_M; m++) for (let n = 0; n < frames; n++) data[m * frames + n] = s[k * frames + n] + i[k * frames + n + 3 * m] + noise();
  return { streamId: 1, sampleIndex: k * frames, sampleRateHz: LINE_FS, channels: LINE_M, frames, data, gap: false, discontinuity: false };
}
