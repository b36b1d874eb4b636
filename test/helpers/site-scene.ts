/**
 * Bearings of a site scene for the location and tracking tests: arrays on the plan, sources still or
 * moving, each array's bearing toward where the source was when the sound it hears at the row's UTC
 * left it (emission time t_e = t_row − |x(t_e) − p|/c, solved by fixed-point iteration, which
 * contracts when the source is slower than sound), plus Gaussian noise of a stated σ.
 */
import type { Bearing } from '../../server/site/types.ts';
import type { TestRandom } from './random.ts';

export interface SceneArray {
  node: string;
  xM: number;
  yM: number;
  zM?: number;
}

export interface SceneSource {
  name: string;
  /** Position at t seconds after the scene's start. */
  at(tS: number): [number, number];
  /** Level at 1 m, dB. */
  levelDb: number;
}

export const SCENE_START_UTC_MS = 1_800_000_000_000;

export function still(name: string, xM: number, yM: number, levelDb = 0): SceneSource {
  return { name, at: () => [xM, yM], levelDb };
}

export function moving(name: string, x0: number, y0: number, vx: number, vy: number, levelDb = 0): SceneSource {
  return { name, at: (t) => [x0 + vx * t, y0 + vy * t], levelDb };
}

/** Where the source was when the sound heard at rowS left it, and the range then. */
export function emitted(src: SceneSource, a: SceneArray, rowS: number, c: number): { tS: number; xy: [number, number]; rangeM: number } {
  let t = rowS;
  for (let k = 0; k < 20; k++) {
    const [x, y] = src.at(t);
    t = rowS - Math.hypot(x - a.xM, y - a.yM) / c;
  }
  const xy = src.at(t);
  return { tS: t, xy, rangeM: Math.hypot(xy[0] - a.xM, xy[1] - a.yM) };
}

/**
 * One row per array at rowS (+ the array's own offset, seconds): a bearing per source with noise σ.
 * @param rowOffsetS per array, the row's time relative to rowS (rows of different edges are not aligned)
 */
export function sceneBearings(rng: TestRandom | null, arrays: SceneArray[], sources: SceneSource[], rowS: number, sigmaDeg: number, c: number, rowOffsetS: number[] = []): Bearing[] {
  const out: Bearing[] = [];
  arrays.forEach((a, i) => {
    const t = rowS + (rowOffsetS[i] ?? 0);
    for (const s of sources) {
      const e = emitted(s, a, t, c);
      const az = (Math.atan2(e.xy[1] - a.yM, e.xy[0] - a.xM) * 180) / Math.PI + (rng ? rng.gaussian() * sigmaDeg : 0);
      out.push({
        node: a.node,
        originM: [a.xM, a.yM, a.zM ?? 0],
        azimuthDeg: ((az % 360) + 360) % 360,
        elevationDeg: null,
        sigmaDeg,
        levelDb: s.levelDb - 20 * Math.log10(e.rangeM),
        utcMs: SCENE_START_UTC_MS + t * 1000,
      });
    }
  });
  return out;
}
