/**
 * Types that cross stage boundaries. Samples inside the server are float32 in full-scale units (±1).
 */

import type { Landmark } from './landmarks.ts';
import type { Pose } from './site.ts';
import type { Sector } from './sectors.ts';

/** Sensor positions of one array, metres, in the array's own x–y–z frame. */
export interface ArrayGeometry {
  name: string;
  description?: string;
  /** positions[m] = [x, y, z] of sensor m, metres. */
  positions: [number, number, number][];
  /** Measured per-channel response, corrected in the front end (absent: all channels nominal). */
  calibration?: ChannelCalibration;
  /**
   * Where each position's samples come from when the array is fed by several inputs (acquisition
   * units, RTP sessions, own-format streams); absent: one input carries every position in order.
   */
  inputs?: InputMapping[];
  /** Named azimuths of the surroundings (shared/landmarks.ts), azimuths in [0, 360). */
  landmarks?: Landmark[];
  /** Where the array stands on a site plan (shared/site.ts); needed to locate sources with other arrays. */
  pose?: Pose;
  /** Named regions of directions whose levels the monitor measures (shared/sectors.ts). */
  sectors?: Sector[];
}

/**
 * One input (a "member") of an array fed by several: channel `channels[i]` of the source's own
 * stream feeds array position `positions[i]`. Every position is fed by exactly one member.
 */
export interface InputMapping {
  /** An RTP session name (ingest.rtp.sessions), `stream:ID` for own-format frames, or `capture`. */
  source: string;
  channels: number[];
  positions: number[];
  /**
   * A channel of the source's stream fed the same signal as the other members' reference channels
   * (it need not feed a position): the offset and drift between members are measured on it.
   */
  referenceChannel?: number;
  /** A measured fixed offset of this member, microseconds, corrected like a calibration delay. */
  offsetUs?: number;
}

/**
 * How each channel departs from nominal, as measured (e.g. against a reference microphone):
 * gainDb[m] its gain relative to nominal (+1 = reads 1 dB hot), delayUs[m] its extra delay in
 * microseconds (cable, converter). The front end divides by the gain and advances by the delay.
 */
export interface ChannelCalibration {
  gainDb: number[];
  delayUs: number[];
  /**
   * Nominal microphone sensitivity (mV/Pa) and the converter's full scale (volts, peak), both or
   * neither: with them, levels are also shown in dB SPL (shared/levels.ts).
   */
  sensitivityMvPerPa?: number;
  fullScaleVolts?: number;
  /** Per position, 1 or −1: −1 undoes an inverted polarity (a π phase no gain or delay can express). */
  polarity?: number[];
  /**
   * Position p reads input channel channelOrder[p] (a permutation; undoes swapped cables). Applied
   * before gainDb, delayUs and polarity, which are indexed by position. Absent: position p reads channel p.
   */
  channelOrder?: number[];
}

/**
 * One contiguous piece of a stream's timeline, M channels × `frames` samples.
 * `data` is planar: channel c, sample i at data[c·frames + i]. A block with `gap: true` is zeros
 * standing in for samples that never arrived, of exactly the missing length.
 */
export interface Block {
  streamId: number;
  /** Sample index of data's first sample on the stream's clock. */
  sampleIndex: number;
  sampleRateHz: number;
  channels: number;
  frames: number;
  data: Float32Array;
  gap: boolean;
  /**
   * True on the first block after the stream's clock jumped (sender restart or a gap too long to
   * fill): sampleIndex does not continue the previous block.
   */
  discontinuity: boolean;
  /**
   * Per channel, 1 where the samples are zeros standing in for a member of a merged array that
   * had not delivered them (late or stopped): the covariance leaves those channels out for the
   * span. Absent or null: every channel is real.
   */
  absent?: Uint8Array | null;
}

/** A stage that produces blocks: live ingest or the simulator. */
export interface BlockSink {
  (block: Block): void;
}
