/**
 * The site service's data between its stages (server/site/): bearings from the nodes' peak
 * messages → located sources per window (locate.ts) → tracks with stable ids (tracker.ts) → REST,
 * the live socket and the site page. Site frame: x east, y north, z up, metres (shared/site.ts).
 */

/** One peak of one node in one window, turned into a bearing line in the site frame. */
export interface Bearing {
  node: string;
  /** The array's origin in the site frame, metres. */
  originM: [number, number, number];
  /** Site azimuth, degrees counter-clockwise from site +x. */
  azimuthDeg: number;
  /** Elevation, degrees (null when the array gives none: a planar array's 2-D scan). */
  elevationDeg: number | null;
  /** One standard deviation of the azimuth, degrees (from the peak's width and its level above the floor). */
  sigmaDeg: number;
  /** Broadband level at the array, dBFS. */
  levelDb: number;
  /** UTC of the row the peak came from, ms (the edge's clock corrected by its measured offset). */
  utcMs: number;
}

/** A source located in one window. */
export interface LocatedSource {
  xM: number;
  yM: number;
  /** Height, metres (null: located on the plan only). */
  zM: number | null;
  /** Covariance of (x, y), m² ([sxx, sxy, syy]). */
  covXY: [number, number, number];
  /** Semi-axes (m) and orientation (degrees from site +x) of the 1-σ uncertainty ellipse. */
  ellipse: { majorM: number; minorM: number; angleDeg: number };
  /** Radius of a circle of the same area as the ellipse, metres. */
  uncertaintyM: number;
  /** Level at 1 m estimated from the arrays' levels and ranges (spherical spreading), dB. */
  levelDb: number;
  /** Nodes whose bearings support it. */
  nodes: string[];
  /** Supported by only two arrays among several sources: may be a ghost intersection. */
  ambiguous: boolean;
  /** RMS of the bearings' misses at the position, degrees. */
  residualDeg: number;
  /**
   * UTC the position refers to, ms: sound heard at an array left the source r/c earlier, so a fix
   * is where the source was at emission time (locate.ts). Absent: the window's UTC.
   */
  atUtcMs?: number;
}

/** A located source followed over windows. */
export interface TrackedSource extends LocatedSource {
  /** Stable over time, e.g. "s7". */
  id: string;
  track: {
    /** Velocity from the constant-velocity filter, m/s. */
    vxMps: number;
    vyMps: number;
    /** Windows since the track began and windows it was seen in. */
    ageWindows: number;
    hits: number;
    /** Recent positions, oldest first: [utcMs, xM, yM] (bounded). */
    history: [number, number, number][];
  };
}

/**
 * A track's position and velocity predicted for a window (tracker.ts `predict`), given to locate:
 * its velocity moves a candidate to each bearing's emission time, and a two-array intersection near
 * it counts as supported by a consistent track.
 */
export interface TrackHint {
  id: string;
  xM: number;
  yM: number;
  vxMps: number;
  vyMps: number;
  /** Covariance of the predicted (x, y), m² ([sxx, sxy, syy]). */
  covXY: [number, number, number];
  /** Standard deviation of the velocity (the larger axis), m/s: a young track's is too loose to place bearings with. */
  speedSigmaMps: number;
  /**
   * The track has taken a fix of three or more arrays (absent: taken as true). Only such a track
   * vouches for a two-array crossing near it against the ghost rule (locate.ts): a track born of a
   * ghost while an array was still silent would otherwise keep itself alive on ghost crossings.
   */
  verified?: boolean;
}

/** Locate the sources of one window from the bearings of every node that has a pose. */
export type LocateWindow = (bearings: Bearing[], opts: { speedOfSoundMps: number; windowUtcMs: number; hints?: TrackHint[] }) => LocatedSource[];

/** Follow located sources over windows (one instance per site service). */
export interface SourceTracker {
  /** Every track predicted at windowUtcMs, handed to the locator before the window is located (travel time, support). */
  predict?(windowUtcMs: number): TrackHint[];
  update(windowUtcMs: number, located: LocatedSource[]): TrackedSource[];
}
