/**
 * Sectors on an azimuth axis (the direction history's and the spectrum's): the runs of grid columns
 * inside each sector, as fractions of the axis width, and where its name goes. Columns are taken
 * by the same membership rule the level measurement uses (shared/sectors.ts azimuthInSector on
 * each column's azimuth), so the band shows exactly the directions measured; a sector that wraps
 * through 0 on a full-circle axis gives two runs, one at each end. Pure, so it is unit-tested.
 */
import { azimuthInSector, type Sector } from '../../../shared/sectors.ts';

export interface SectorRun {
  /** Left edge of the run's first column, fraction 0–1 of the axis width. */
  from: number;
  /** Right edge of the run's last column, fraction 0–1. */
  to: number;
}

export interface SectorOnAxis {
  sector: Sector;
  /** Index in the sector list (its colour). */
  index: number;
  runs: SectorRun[];
  /** Where the name is centred, fraction 0–1: the middle of the widest run. */
  labelAt: number;
}

/**
 * The sectors that have at least one column on the axis, in list order.
 * @param azimuthDeg column centres of the axis (the live grid's azimuths, evenly spaced)
 */
export function sectorsOnAxis(sectors: readonly Sector[], azimuthDeg: ArrayLike<number>): SectorOnAxis[] {
  const n = azimuthDeg.length;
  const out: SectorOnAxis[] = [];
  if (n < 1) return out;
  sectors.forEach((sector, index) => {
    const runs: SectorRun[] = [];
    let start = -1;
    for (let i = 0; i <= n; i++) {
      const inside = i < n && azimuthInSector(azimuthDeg[i], sector);
      if (inside && start < 0) start = i;
      else if (!inside && start >= 0) {
        runs.push({ from: start / n, to: i / n });
        start = -1;
      }
    }
    if (runs.length === 0) return;
    const widest = runs.reduce((a, b) => (b.to - b.from > a.to - a.from ? b : a));
    out.push({ sector, index, runs, labelAt: (widest.from + widest.to) / 2 });
  });
  return out;
}

/** Fill colours of the sectors, by list index (at most 8 sectors): distinct from the plots' own colours. */
export const SECTOR_COLOURS = ['#9ad0f5', '#f5c59a', '#b9f59a', '#f59ad8', '#d3c2ff', '#fff19a', '#9af5e6', '#ffb0b0'] as const;
