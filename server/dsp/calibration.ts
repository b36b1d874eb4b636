/**
 * Per-channel calibration in the front end: each channel's measured gain and extra delay
 * (ChannelCalibration, from the array file) are undone on its STFT bins.
 *
 * A channel that reads g dB hot and lags by d seconds gives, under this project's STFT sign
 * (dsp/stft.ts: s(t − τ) ↦ S(f)·e^{−j2πfτ}), X_m(f) = 10^{g/20} · e^{−j2πfd} · X⁰_m(f). The
 * correction multiplies bin f of channel m by c_m(f) = 10^{−g/20} · e^{+j2πfd}.
 *
 * The delay part is a phase ramp on each frame, so it is exact for a component at the bin's centre
 * frequency and approximate in between; the error grows with d/(N/fs), which is why array files
 * limit d to 1 ms (common practice: frequency-domain delay compensation is used for small
 * inter-channel delays, long ones belong before the analysis).
 *
 * Two faults no gain or delay can express are undone too (the array check finds them,
 * dsp/array-check.ts): an inverted channel (polarity −1: the factor is negated) and swapped cables
 * (channelOrder: position p takes input channel channelOrder[p], before the factors, which are
 * indexed by position). Channel meters and raw recordings stay in input-channel order.
 */
import { splOffsetDb } from '../../shared/levels.ts';
import type { ChannelCalibration } from '../../shared/types.ts';

/**
 * Correction factors for the given bins, interleaved complex and bin-major like a snapshot band:
 * c_m(f_b) at [(b·M + m)·2]. Null when every channel is nominal (nothing to do).
 * @param cal the array's calibration, or undefined
 * @param channels M
 * @param freqsHz centre frequency of each bin, Hz
 */
export function correctionFactors(cal: ChannelCalibration | undefined, channels: number, freqsHz: ArrayLike<number>): Float64Array | null {
  if (!cal) return null;
  if (cal.gainDb.length !== channels || cal.delayUs.length !== channels) {
    throw new RangeError(`calibration lists ${cal.gainDb.length} gains and ${cal.delayUs.length} delays for ${channels} channels`);
  }
  if (cal.polarity !== undefined && cal.polarity.length !== channels) throw new RangeError(`calibration lists ${cal.polarity.length} polarities for ${channels} channels`);
  const sign = (m: number) => (cal.polarity !== undefined && cal.polarity[m] < 0 ? -1 : 1);
  if (cal.gainDb.every((g) => g === 0) && cal.delayUs.every((d) => d === 0) && (cal.polarity ?? []).every((s) => s > 0)) return null;
  const out = new Float64Array(2 * channels * freqsHz.length);
  for (let b = 0; b < freqsHz.length; b++) {
    for (let m = 0; m < channels; m++) {
      // An inverted channel (polarity −1) is multiplied by −1 as well.
      const a = sign(m) * Math.pow(10, -cal.gainDb[m] / 20);
      const phi = 2 * Math.PI * freqsHz[b] * cal.delayUs[m] * 1e-6;
      out[2 * (b * channels + m)] = a * Math.cos(phi);
      out[2 * (b * channels + m) + 1] = a * Math.sin(phi);
    }
  }
  return out;
}

/**
 * Multiply a band of a snapshot by the factors, in place: x[offset + i] ← x[offset + i]·c[i] for
 * each complex entry of `factors` (factors.length doubles from `offset`).
 */
export function applyCorrection(snapshot: Float64Array, offset: number, factors: Float64Array): void {
  for (let i = 0, o = offset; i < factors.length; i += 2, o += 2) {
    const xr = snapshot[o];
    const xi = snapshot[o + 1];
    const cr = factors[i];
    const ci = factors[i + 1];
    snapshot[o] = xr * cr - xi * ci;
    snapshot[o + 1] = xr * ci + xi * cr;
  }
}

/**
 * The whole front-end correction of a calibration on a band of snapshots: first the channel order
 * (position p takes input channel channelOrder[p]: swapped cables undone), then the per-position
 * factors of {@link correctionFactors} (gain, delay, polarity). Planned once; apply() allocates
 * nothing (one bin's M entries go through a preallocated scratch row).
 */
export class ChannelCorrection {
  readonly channels: number;
  readonly #factors: Float64Array | null;
  readonly #order: Int32Array | null;
  readonly #scratch: Float64Array;
  readonly #bins: number;

  /** Null when the calibration changes nothing (absent, all nominal, identity order). */
  static create(cal: ChannelCalibration | undefined, channels: number, freqsHz: ArrayLike<number>): ChannelCorrection | null {
    const factors = correctionFactors(cal, channels, freqsHz);
    const order = cal?.channelOrder;
    if (order !== undefined && (order.length !== channels || new Set(order).size !== channels || order.some((q) => !Number.isInteger(q) || q < 0 || q >= channels))) {
      throw new RangeError(`calibration channelOrder must be a permutation of 0–${channels - 1}`);
    }
    const reorder = order !== undefined && order.some((q, p) => q !== p);
    if (!factors && !reorder) return null;
    return new ChannelCorrection(channels, freqsHz.length, factors, reorder ? Int32Array.from(order!) : null);
  }

  private constructor(channels: number, bins: number, factors: Float64Array | null, order: Int32Array | null) {
    this.channels = channels;
    this.#bins = bins;
    this.#factors = factors;
    this.#order = order;
    this.#scratch = new Float64Array(2 * channels);
  }

  /** Correct `bins` bins of M entries each from `offset` of a bin-major interleaved snapshot, in place. */
  apply(snapshot: Float64Array, offset: number): void {
    const order = this.#order;
    if (order) {
      const m = this.channels;
      const s = this.#scratch;
      for (let b = 0, o = offset; b < this.#bins; b++, o += 2 * m) {
        for (let i = 0; i < 2 * m; i++) s[i] = snapshot[o + i];
        for (let p = 0; p < m; p++) {
          snapshot[o + 2 * p] = s[2 * order[p]];
          snapshot[o + 2 * p + 1] = s[2 * order[p] + 1];
        }
      }
    }
    if (this.#factors) applyCorrection(snapshot, offset, this.#factors);
  }
}

/**
 * A short description for status and the dashboard: the largest gain and delay corrected, and the dB
 * to add to a level re full scale for dB SPL (null without a sensitivity).
 */
export function describeCalibration(cal: ChannelCalibration | undefined): { gainDbMax: number; delayUsMax: number; splOffsetDb: number | null; inverted?: number[]; reordered?: number[] } | null {
  if (!cal) return null;
  const out: { gainDbMax: number; delayUsMax: number; splOffsetDb: number | null; inverted?: number[]; reordered?: number[] } = {
    gainDbMax: Math.max(0, ...cal.gainDb.map(Math.abs)),
    delayUsMax: Math.max(0, ...cal.delayUs.map(Math.abs)),
    splOffsetDb: cal.sensitivityMvPerPa !== undefined && cal.fullScaleVolts !== undefined ? splOffsetDb(cal.sensitivityMvPerPa, cal.fullScaleVolts) : null,
  };
  // Positions whose polarity is turned and positions that read another input channel (only when there are any).
  const inverted = (cal.polarity ?? []).flatMap((s, p) => (s < 0 ? [p] : []));
  const reordered = (cal.channelOrder ?? []).flatMap((c, p) => (c !== p ? [p] : []));
  if (inverted.length > 0) out.inverted = inverted;
  if (reordered.length > 0) out.reordered = reordered;
  return out;
}
