/**
 * The combiner's sum: the workers' shares of one method in one result slot added into the band's
 * spectrum (only the parts that answered, for a row emitted partial), then dB and peaks.
 */
import type { RowPeak } from '../../shared/messages.ts';
import type { Plan } from './plan-layout.ts';
import { RESULT_SLOTS, resultStride } from './protocol.ts';

export interface CombinedSpectrum {
  power: Float64Array;
  db: Float32Array;
  peaks: RowPeak[];
}

/**
 * @param got per part, 1 when its share is in the slot
 * @param onNonFinite called for each value found not finite (written as no power: a row is always finite)
 */
export function combineSpectrum(p: Plan, r: number, method: 0 | 1, D: number, normalised: boolean, got: Uint8Array, onNonFinite: () => void): CombinedSpectrum {
  const R = p.resultDirections;
  const W = p.ranges.length;
  const power = new Float64Array(D);
  for (let w = 0; w < W; w++) {
    if (!got[w]) continue;
    const base = (w * RESULT_SLOTS + r) * resultStride(R, p.weightDoubles) + method * R;
    for (let d = 0; d < D; d++) power[d] += p.results[base + d];
  }
  // Sum over bins = the band's power (dBFS); normalised: the mean over bins (0 dB at most).
  const scale = normalised ? 1 / p.bins : 1;
  const db = new Float64Array(D);
  for (let d = 0; d < D; d++) {
    power[d] *= scale;
    // The workers leave non-finite bins out; this is the last guard.
    if (!(power[d] - power[d] === 0)) {
      power[d] = 0;
      onNonFinite();
    }
    db[d] = power[d] > 0 ? 10 * Math.log10(power[d]) : -300;
  }
  const peaks = p.finder.find(db).map((q) => ({ azimuthDeg: q.azimuthDeg, elevationDeg: q.elevationDeg, levelDb: q.levelDb }));
  return { power, db: Float32Array.from(db), peaks };
}
