/**
 * The direction history's time axis: where its labels go. Pure (no DOM), so the spacing rule is
 * unit-tested: a label is placed only where it keeps `minGapPx` from the one before, so labels never
 * overlap however short the history is drawn (two histories share the height when the comparison
 * chain runs).
 */

/** Label steps, seconds: "nice" values a reader counts in (1, 2, 5, 10 s … 1 h). */
export const TIME_STEPS_S = [1, 2, 5, 10, 15, 30, 60, 120, 300, 600, 900, 1800, 3600] as const;

export interface TimeLabel {
  /** Distance from the top of the view, CSS pixels. */
  yPx: number;
  /** Seconds before the newest row. */
  ageS: number;
  text: string;
}

/** The smallest step of {@link TIME_STEPS_S} whose labels lie at least `minGapPx` apart. */
export function timeLabelStepS(spanS: number, heightPx: number, minGapPx: number): number {
  const pxPerS = heightPx / spanS;
  for (const s of TIME_STEPS_S) if (s * pxPerS >= minGapPx) return s;
  return TIME_STEPS_S[TIME_STEPS_S.length - 1];
}

/** "0 s" for the newest row, "−30", "−1:30" (minutes from 60 s on) for older ones. */
export function timeLabelText(ageS: number): string {
  if (ageS === 0) return '0 s';
  if (ageS < 60) return `−${ageS}`;
  const m = Math.floor(ageS / 60);
  const s = ageS - 60 * m;
  return `−${m}:${String(s).padStart(2, '0')}`;
}

/**
 * Labels for a view `heightPx` tall showing `spanS` seconds whose top row is `offsetS` seconds
 * before the newest row: one at every multiple of the step ({@link timeLabelStepS} for
 * `minGapPx + labelHeightPx / 2`) within the view,
 * each kept `labelHeightPx / 2` inside the view's ends, and dropped when it would come nearer
 * than `minGapPx` to the label above it (only possible at the clamped ends).
 * @param minGapPx smallest distance between two labels' centres; at least labelHeightPx
 */
export function placeTimeLabels(spanS: number, offsetS: number, heightPx: number, minGapPx: number, labelHeightPx: number): TimeLabel[] {
  const out: TimeLabel[] = [];
  if (!(spanS > 0) || !(heightPx > labelHeightPx) || !(minGapPx >= labelHeightPx)) return out;
  // The newest label is clamped half a label in from the top: the step leaves room for that too,
  // so no label in between is dropped and the labels stay evenly spaced.
  const step = timeLabelStepS(spanS, heightPx, minGapPx + labelHeightPx / 2);
  const half = labelHeightPx / 2;
  const first = Math.ceil(offsetS / step - 1e-9) * step;
  for (let age = first; age <= offsetS + spanS + 1e-9; age += step) {
    const exact = ((age - offsetS) / spanS) * heightPx;
    const yPx = Math.max(half, Math.min(heightPx - half, exact));
    const prev = out[out.length - 1];
    if (prev && yPx - prev.yPx < minGapPx) continue;
    const a = Number(age.toPrecision(12));
    out.push({ yPx, ageS: a, text: timeLabelText(a) });
  }
  return out;
}
