/** Figures of an array's geometry for the layout view. */

/** Speed of sound used for the client-side aliasing estimate, m/s (dry air at about 20 °C). */
export const SPEED_OF_SOUND_MPS = 343.2;

export type Position = readonly [number, number, number];

/** Distance from each sensor to its nearest neighbour, m (3-D). Empty for fewer than two sensors. */
export function nearestNeighbourM(positions: readonly Position[]): number[] {
  const n = positions.length;
  if (n < 2) return [];
  const out = new Array<number>(n).fill(Infinity);
  for (let i = 0; i < n; i++) {
    const [xi, yi, zi] = positions[i];
    for (let j = i + 1; j < n; j++) {
      const [xj, yj, zj] = positions[j];
      const d = Math.hypot(xi - xj, yi - yj, zi - zj);
      if (d < out[i]) out[i] = d;
      if (d < out[j]) out[j] = d;
    }
  }
  return out;
}

export interface ArrayFigures {
  channels: number;
  /** Largest distance between two sensors, m. */
  apertureM: number;
  /** Largest nearest-neighbour spacing d, m (null for one sensor). */
  largestSpacingM: number | null;
  smallestSpacingM: number | null;
  /**
   * c / (2d): above it a uniform array with spacing d has grating lobes for some look
   * directions. For non-uniform arrays only an approximation.
   */
  aliasingLimitHz: number | null;
  /** Extent in x, y, z, m. */
  extentM: [number, number, number];
}

export function arrayFigures(positions: readonly Position[], c = SPEED_OF_SOUND_MPS): ArrayFigures {
  const nn = nearestNeighbourM(positions).filter((d) => d > 0 && Number.isFinite(d));
  const largest = nn.length ? Math.max(...nn) : null;
  const smallest = nn.length ? Math.min(...nn) : null;
  let aperture = 0;
  for (let i = 0; i < positions.length; i++)
    for (let j = i + 1; j < positions.length; j++) {
      const a = positions[i];
      const b = positions[j];
      aperture = Math.max(aperture, Math.hypot(a[0] - b[0], a[1] - b[1], a[2] - b[2]));
    }
  const ext: [number, number, number] = [0, 0, 0];
  for (let k = 0; k < 3; k++) {
    let lo = Infinity;
    let hi = -Infinity;
    for (const p of positions) {
      lo = Math.min(lo, p[k]);
      hi = Math.max(hi, p[k]);
    }
    ext[k] = positions.length ? hi - lo : 0;
  }
  return {
    channels: positions.length,
    apertureM: aperture,
    largestSpacingM: largest,
    smallestSpacingM: smallest,
    aliasingLimitHz: largest ? c / (2 * largest) : null,
    extentM: ext,
  };
}
