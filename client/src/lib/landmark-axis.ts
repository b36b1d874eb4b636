/**
 * Landmark names on an azimuth axis: where each name goes so that no two overlap. Pure (widths are
 * measured by the caller), so the rule is unit-tested. Names go left to right; each takes the first
 * line (of `lines`) where it clears the name before it by `gapPx`; a name with no room on any line
 * is hidden (its tick stays, with the name as a tooltip).
 */
import type { Landmark } from '../../../shared/landmarks.ts';

export interface AxisName {
  /** Centre of the tick, px from the axis's left end. */
  xPx: number;
  /** Width of the name as drawn, px. */
  widthPx: number;
}

export interface PlacedName {
  /** Left edge of the name, px (kept within the axis). */
  leftPx: number;
  /** Line 0, 1, …; −1 when hidden. */
  line: number;
}

/**
 * Place names centred on their ticks (moved in from the axis's ends to stay within `axisWidthPx`).
 * @returns one entry per input, in input order
 */
export function placeAxisNames(items: readonly AxisName[], axisWidthPx: number, gapPx: number, lines: number): PlacedName[] {
  const out: PlacedName[] = items.map(() => ({ leftPx: 0, line: -1 }));
  const order = items.map((_, i) => i).sort((a, b) => items[a].xPx - items[b].xPx || a - b);
  const lineEnd = new Array<number>(Math.max(0, lines)).fill(-Infinity);
  for (const i of order) {
    const it = items[i];
    if (!(it.widthPx > 0) || it.widthPx > axisWidthPx) continue;
    const left = Math.max(0, Math.min(axisWidthPx - it.widthPx, it.xPx - it.widthPx / 2));
    out[i].leftPx = left;
    for (let l = 0; l < lineEnd.length; l++) {
      if (left >= lineEnd[l] + gapPx) {
        out[i].line = l;
        lineEnd[l] = left + it.widthPx;
        break;
      }
    }
  }
  return out;
}

/**
 * Where azimuth `azDeg` falls on an axis of grid columns `azimuthDeg` (column centres, evenly
 * spaced), as a fraction 0–1 of the axis width; null when it is off the axis. On a full circle the
 * angle is brought into the grid's turn first. (The direction history's and the spectrum's rule.)
 */
export function azimuthFraction(azDeg: number, azimuthDeg: ArrayLike<number>): number | null {
  const n = azimuthDeg.length;
  if (n < 1) return null;
  const a0 = azimuthDeg[0];
  const step = n > 1 ? (azimuthDeg[n - 1] - a0) / (n - 1) : 1;
  const span = step * n;
  let rel = azDeg - a0;
  if (span >= 359.999) rel = ((rel % 360) + 360) % 360;
  const f = (rel + step / 2) / span;
  return f < 0 || f > 1 ? null : f;
}

/** Landmarks on the axis, with their fraction, in list order. */
export function landmarksOnAxis(landmarks: readonly Landmark[], azimuthDeg: ArrayLike<number>): { landmark: Landmark; fraction: number }[] {
  const out: { landmark: Landmark; fraction: number }[] = [];
  for (const l of landmarks) {
    const f = azimuthFraction(l.azimuthDeg, azimuthDeg);
    if (f !== null) out.push({ landmark: l, fraction: f });
  }
  return out;
}
