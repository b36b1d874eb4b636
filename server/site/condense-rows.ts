/**
 * Several rows of one node in a window → one bearing per direction (locate.ts reads them).
 */
import type { Bearing } from './types.ts';
import { wrapPi } from './bearing-fix.ts';

const RAD = Math.PI / 180;
/** A row's peak joins a direction when it misses it by at most this many σ (as locate.ts's gate). */
const GATE_SIGMA = 3;

/**
 * One bearing per node and direction: when a window holds several rows of a node, each row's peaks
 * join the nearest direction already seen (within the gate, one peak per direction per row) or start
 * a new one. A direction's azimuth is the circular mean of its bearings, its σ the median of theirs
 * (rows a few tens of ms apart share most of the covariance's memory, so they are not independent
 * draws), its level the power mean, its UTC the mean. One row per node passes through unchanged.
 */
export function condenseRows(bearings: Bearing[]): Bearing[] {
  const byNode = new Map<string, Bearing[]>();
  for (const b of bearings) {
    const list = byNode.get(b.node);
    if (list) list.push(b);
    else byNode.set(b.node, [b]);
  }
  const out: Bearing[] = [];
  for (const list of byNode.values()) {
    const rows = new Set(list.map((b) => b.utcMs));
    if (rows.size <= 1) {
      out.push(...list);
      continue;
    }
    const groups: Bearing[][] = [];
    const sorted = [...list].sort((a, b) => a.utcMs - b.utcMs || b.levelDb - a.levelDb);
    let rowUtc = NaN;
    let taken = new Set<number>();
    for (const b of sorted) {
      if (b.utcMs !== rowUtc) { rowUtc = b.utcMs; taken = new Set(); }
      let best = -1, bestMiss = GATE_SIGMA;
      for (let g = 0; g < groups.length; g++) {
        if (taken.has(g)) continue;
        const last = groups[g][groups[g].length - 1];
        const miss = Math.abs(wrapPi((b.azimuthDeg - last.azimuthDeg) * RAD)) / (Math.max(b.sigmaDeg, last.sigmaDeg) * RAD);
        if (miss <= bestMiss) { bestMiss = miss; best = g; }
      }
      if (best < 0) { groups.push([b]); best = groups.length - 1; }
      else groups[best].push(b);
      taken.add(best);
    }
    for (const g of groups) {
      if (g.length === 1) { out.push(g[0]); continue; }
      let sx = 0, sy = 0, p = 0, t = 0, el = 0;
      const elevations = g.every((b) => b.elevationDeg !== null);
      for (const b of g) {
        sx += Math.cos(b.azimuthDeg * RAD); sy += Math.sin(b.azimuthDeg * RAD);
        p += 10 ** (b.levelDb / 10); t += b.utcMs; el += b.elevationDeg ?? 0;
      }
      const sigmas = g.map((b) => b.sigmaDeg).sort((a, b) => a - b);
      const az = Math.atan2(sy, sx) / RAD;
      out.push({
        node: g[0].node,
        originM: g[0].originM,
        azimuthDeg: az < 0 ? az + 360 : az,
        elevationDeg: elevations ? el / g.length : null,
        sigmaDeg: sigmas[Math.floor(sigmas.length / 2)],
        levelDb: 10 * Math.log10(p / g.length),
        utcMs: t / g.length,
      });
    }
  }
  return out;
}
