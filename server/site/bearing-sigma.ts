/**
 * A node's peaks → bearings in the site frame, each with its standard deviation.
 *
 * The spread of a direction estimate (common practice, the radar rule of thumb for angle accuracy,
 * from memory): σ ≈ θ₃ / (k · √(2·SNR)), θ₃ the beam's width at 3 dB below its top, SNR the
 * integrated signal-to-noise ratio as a power ratio and k ≈ 1.6 the slope of the normalised
 * direction response. Here θ₃ is the peak's own −3 dB width (MVDR peaks are narrower than the
 * conventional beam, and narrow further as the SNR grows, so the width already carries part of the
 * SNR: the rule is a scale, not a bound) and the SNR is the peak's level above the spectrum's floor
 * (the median over directions), which already counts the snapshots averaged into the covariance.
 * A floor σ_min is added in quadrature for what the spectrum cannot see: the array's heading on the
 * site plan and its calibration (a heading surveyed to about half a degree is common practice); the
 * result is clamped to [σ_min, σ_max].
 */
import type { PeakMessage, Pose } from '../../shared/site.ts';
import { siteAzimuthDeg, wrap360 } from '../../shared/site.ts';
import type { Bearing } from './types.ts';

/** Slope constant k of σ ≈ θ₃ / (k·√(2·SNR)) (common practice, from memory). */
export const ANGLE_SLOPE_K = 1.6;
/** Smallest σ of a bearing, degrees: heading and calibration of the array on the site. */
export const MIN_SIGMA_DEG = 0.5;
/** Largest σ, degrees: a bearing wider than this says little about a position. */
export const MAX_SIGMA_DEG = 20;
/** Peaks less than this far above the floor are not used as bearings, dB. */
export const MIN_ABOVE_FLOOR_DB = 3;

/**
 * One standard deviation of a peak's azimuth, degrees.
 * @param widthDeg the peak's width at 3 dB below its top, degrees (> 0)
 * @param aboveFloorDb its level above the spectrum's floor, dB
 * @returns √((θ₃ / (k·√(2·10^(L/10))))² + σ_min²) clamped to [MIN_SIGMA_DEG, MAX_SIGMA_DEG]; MAX_SIGMA_DEG for unusable input
 */
export function bearingSigmaDeg(widthDeg: number, aboveFloorDb: number): number {
  if (!Number.isFinite(widthDeg) || !Number.isFinite(aboveFloorDb) || widthDeg <= 0 || aboveFloorDb <= 0) return MAX_SIGMA_DEG;
  const snr = 10 ** (Math.min(aboveFloorDb, 80) / 10);
  const fromSpectrum = widthDeg / (ANGLE_SLOPE_K * Math.sqrt(2 * snr));
  const sigma = Math.sqrt(fromSpectrum * fromSpectrum + MIN_SIGMA_DEG * MIN_SIGMA_DEG);
  return Math.min(MAX_SIGMA_DEG, Math.max(MIN_SIGMA_DEG, sigma));
}

export interface BearingOptions {
  /**
   * The edge's clock minus the site service's clock, ms (measured from its status messages): the
   * bearing's utcMs is the message's utcMs minus this.
   */
  clockOffsetMs: number;
  /** Whether the node's array resolves elevation (a 3-D scan); a planar array's 2-D scan does not. */
  useElevation: boolean;
  /** Peaks less than this far above the floor are left out, dB (default MIN_ABOVE_FLOOR_DB). */
  minAboveFloorDb?: number;
}

/**
 * The bearings of one peak message of a node with a pose. The site azimuth is the message's own
 * `siteAzimuthDeg` when the edge sent one, else the array azimuth turned by the pose's heading
 * (shared/site.ts: arrays are taken as level). Peaks that are too weak, or carry no width, are left out.
 */
export function bearingsFromPeaks(msg: PeakMessage, pose: Pose, opts: BearingOptions): Bearing[] {
  const minAbove = opts.minAboveFloorDb ?? MIN_ABOVE_FLOOR_DB;
  const out: Bearing[] = [];
  const utcMs = msg.utcMs - opts.clockOffsetMs;
  for (const p of msg.peaks) {
    if (p.aboveFloorDb < minAbove || !(p.widthDeg > 0)) continue;
    const az = p.siteAzimuthDeg !== null ? wrap360(p.siteAzimuthDeg) : siteAzimuthDeg(p.azimuthDeg, pose);
    const el = opts.useElevation ? (p.siteElevationDeg ?? p.elevationDeg) : null;
    out.push({
      node: msg.node,
      originM: [pose.positionM[0], pose.positionM[1], pose.positionM[2]],
      azimuthDeg: az,
      elevationDeg: el,
      sigmaDeg: bearingSigmaDeg(p.widthDeg, p.aboveFloorDb),
      levelDb: p.levelDb,
      utcMs,
    });
  }
  return out;
}
