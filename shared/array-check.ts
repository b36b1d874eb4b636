/**
 * What the array check answers (server/dsp/array-check.ts computes it, engine/array-check-runner.ts
 * adds the capture's facts, the dashboard's Array check panel shows it): one definition for both sides.
 */
import type { ChannelCalibration } from './types.ts';

export type ChannelFault = 'dead' | 'hot' | 'clipping' | 'inverted' | 'swapped' | 'misplaced' | 'incoherent';

export interface ChannelCheck {
  channel: number;
  /** Band power, dB re full scale. */
  levelDb: number;
  /** Band power against the median channel, dB (null for a dead channel). */
  gainDb: number | null;
  /** Delay residual against the prediction at this channel's own position, µs (null: not measurable). */
  delayUs: number | null;
  /** Phase intercept of the residual cross-spectrum, degrees in (−180, 180] (≈ ±180: inverted). */
  phaseDeg: number | null;
  /** Band-mean magnitude-squared coherence with the reference channel. */
  coherence: number | null;
  /** Fraction of samples at or beyond CLIP_LEVEL. */
  clippedFraction: number;
  /** The array position whose signal this channel carries (its own unless swapped). */
  carriesPosition: number;
  /** For a misplaced microphone: how far it sits from its position along the source direction, mm (+: toward the source). */
  offsetMm: number | null;
  faults: ChannelFault[];
}

export interface ArrayFault {
  kind: 'swapped' | 'misplaced' | 'inverted' | 'dead' | 'hot' | 'clipping' | 'incoherent';
  channels: number[];
  /** In plain words, e.g. "channels 3 and 5 look swapped". */
  text: string;
}

export interface ArrayCheckResult {
  direction: { azimuthDeg: number; elevationDeg: number; from: 'stated' | 'scan' };
  bandHz: [number, number];
  fftSize: number;
  snapshots: number;
  referenceChannel: number;
  misplacedBoundUs: number;
  channels: ChannelCheck[];
  faults: ArrayFault[];
  /** Undoes the measured faults (position-indexed; see ChannelCalibration). */
  calibration: ChannelCalibration;
}

export interface ArrayCheckAnswer extends ArrayCheckResult {
  startedAt: string;
  finishedAt: string;
  /** Seconds of input analysed (the request's, or fewer when MAX_CHECK_BYTES shortened it). */
  seconds: number;
  secondsRequested: number;
  /** First sample index of the analysed span on the stream's clock. */
  sampleIndex: number;
  /** Captures restarted because of a gap or a clock jump. */
  restarts: number;
}
