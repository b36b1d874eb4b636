/**
 * Sources of one window from the bearings of the site's arrays (docs in README "A site of arrays →
 * How sources are located").
 *
 * Fix. Bearings-only least squares, the maximum-likelihood fix for Gaussian bearing errors: minimise
 * Σ (e_i/σ_i)², e_i the miss of bearing i at the position (site azimuth from the array to the
 * position minus the measured azimuth), which for small misses is Σ (d_i/(r_i·σ_i))², d_i the
 * perpendicular distance from the position to bearing line i and r_i its range. Started from the
 * pseudo-linear estimate (the lines' normal equations weighted by 1/(r_i·σ_i)², Stansfield's
 * estimator, R. G. Stansfield, J. IEE 94, 1947, from memory) and refined by Gauss–Newton on the
 * angles. Its covariance is the inverse Fisher information J⁻¹, J = Σ g_i g_iᵀ/σ_i², g_i = ∂e_i/∂(x, y)
 * = (−Δy, Δx)/r_i² (the Cramér–Rao bound of the fix, common practice), which gives the 1-σ ellipse and
 * the radius of the circle of equal area √(a·b). Height, where bearings carry elevation, is the
 * weighted mean of each array's z_i = z_array + ρ_i·tan(elevation_i) at the plan fix (weights
 * 1/σ_z², σ_z = ρ_i·σ_i/cos²(elevation_i), the elevation's σ taken as the azimuth's).
 *
 * Association. Every pair of bearings of two different arrays whose rays cross in front of both
 * arrays, at a crossing angle of at least MIN_CROSSING_DEG and within MAX_RANGE_M, is a candidate;
 * each other array lends it its bearing of smallest normalised miss |e|/σ within GATE_SIGMA; the
 * candidate is refitted on its supporters, each array's bearing chosen again at the fit (a
 * supporter beyond the gate there leaves; at most three passes; the pair itself must stay). A pair
 * whose two bearings already support a candidate of three or more arrays is not built (it would
 * give the same candidate) but kept as that candidate's alternate seed. Candidates are taken best
 * first (most arrays, then the smallest χ² of misses plus the spread of the levels at 1 m,
 * σ = LEVEL_SIGMA_DB, plus, when tracks are given, the normalised distance² to the nearest track's
 * prediction capped at HINT_SCORE_CAP), each bearing at most once; one within the 99 % gate of a
 * source already taken of at least as many arrays is that source's leftover bearings and is not
 * reported. A candidate of two arrays is refused as a ghost when another array that heard
 * something this window has the position within range, would have heard a source there at least
 * as loud as the weakest direction it reported (the louder of the pair's levels at 1 m less
 * 20·log10 of its range), and lends no bearing, unless a track once fixed by three or more arrays
 * predicts a source there (χ² 2-dof gate, 99 %; a track born of a ghost while an array was still
 * silent would otherwise keep itself alive on ghost crossings); a candidate of three or more when more such silent arrays contradict it than
 * support it. With two arrays only a crossing is kept and flagged `ambiguous` when either array
 * heard more than one source.
 *
 * Travel time. Sound heard at array i at UTC t_i left the source at t_i − r_i/c. A candidate near a
 * track's prediction whose velocity is known to MAX_HINT_SPEED_SIGMA_MPS (a young track's, from two
 * noisy fixes, is not, and would pull the fix) takes the track's velocity v and is located at the
 * window's UTC: bearing i is
 * taken to point at x + v·δ_i, δ_i = t_i − r_i/c − t_window, r_i the range at emission (a fixed
 * point), i.e. from the array moved by −v·δ_i; the fix is repeated with the δ_i of the new position
 * until it moves less than a nanometre (at most eight passes). Elsewhere the velocity is unknown and
 * taken as zero, and the fix is reported at the mean emission time of its bearings (`atUtcMs`) for
 * the tracker to place.
 */
import { MAX_SITE_PEAKS } from '../../shared/site.ts';
import { type PlanFix, bearingsFix, covarianceEllipse, fisherCovariance, wrapPi } from './bearing-fix.ts';
import { condenseRows } from './condense-rows.ts';
import type { Bearing, LocatedSource, LocateWindow, TrackHint } from './types.ts';

/** Gate on a bearing's miss at a candidate, in its σ. */
export const GATE_SIGMA = 3;
/** Farther than this from an array a crossing is refused, metres. */
export const MAX_RANGE_M = 2000;
/** Nearer than this to an array a crossing is refused (inside the array), metres. */
export const MIN_RANGE_M = 0.5;
/** Rays crossing at less than this angle are nearly parallel: refused, degrees. */
export const MIN_CROSSING_DEG = 3;
/** Spread of one array's level at 1 m about the source's, for scoring only, dB (chosen: directivity, ground, MVDR bias). */
export const LEVEL_SIGMA_DB = 6;
/** A track's velocity places bearings at their emission times only when known to this σ, m/s. */
export const MAX_HINT_SPEED_SIGMA_MPS = 0.5;
/** χ², 2 degrees of freedom, 99 % (common practice): a two-array crossing near a track's prediction. */
export const TRACK_GATE_CHI2 = 9.21;
/**
 * The nearest track's normalised distance² counts in a candidate's score up to this (chosen; it was
 * the gate, 9.21). A candidate far from every track, a new or lost source, paid the whole gate and
 * lost to a ghost near a track that had gone astray: in the first Eastgate yard scene east's and
 * north's bearings of the fan were nearly opposite (123.1°, 306.9°), any west bearing crossing that
 * line made a three-array ghost, and a track on it took west's cart bearing window after window
 * (cart located within 3 m in 9 of 40 windows, pump 10 of 40; with 4: 28 and 32 of 40, the site
 * acceptance test). Below 4 the unit scene of test/unit/site-tracker.test.ts splits the moving
 * source's track (2 at 2, 1 m past the limit at 1).
 */
export const HINT_SCORE_CAP = 4;
/**
 * Directions located per window, after each node's rows are condensed and cut to its MAX_SITE_PEAKS
 * strongest (64 nodes × 16; beyond, the weakest are left out); sources per window. The window itself
 * bounds what comes in (site-windows.ts, 16384 bearings).
 */
export const MAX_BEARINGS = 1024;
export const MAX_SOURCES = 64;

const RAD = Math.PI / 180;

interface Work {
  b: Bearing;
  node: number;
  ox: number;
  oy: number;
  th: number;
  sg: number;
  used: boolean;
}

interface Candidate {
  seed: [number, number];
  members: number[];
  fix: PlanFix;
  /** Position's reference time and the velocity used (zero without a track). */
  atUtcMs: number;
  nodes: number;
  score: number;
  hinted: boolean;
  ranges: number[];
  /** The velocity the bearings were placed with (a track's; zero without). */
  vx: number;
  vy: number;
  moving: boolean;
  /** Seed pairs not built because this candidate already had both bearings (see the seeds' comment). */
  alternates: [number, number][];
}

/** Locate the sources of one window (see the file's comment). */
export const locateWindow: LocateWindow = (bearingsIn, opts) => {
  const c = opts.speedOfSoundMps;
  const tWin = opts.windowUtcMs;
  const hints = (opts.hints ?? []).filter((h) => [h.xM, h.yM, h.vxMps, h.vyMps, h.speedSigmaMps, ...h.covXY].every(Number.isFinite));
  // Tracks that vouch for a crossing against the ghost rules: those once fixed by three or more arrays.
  const vouching = hints.filter((h) => h.verified !== false);
  const good = bearingsIn.filter((b) => b && Number.isFinite(b.azimuthDeg) && Number.isFinite(b.sigmaDeg) && b.sigmaDeg > 0 && Number.isFinite(b.utcMs) && Number.isFinite(b.levelDb) && (b.elevationDeg === null || Number.isFinite(b.elevationDeg)) && Array.isArray(b.originM) && b.originM.length === 3 && b.originM.every(Number.isFinite));
  // At most MAX_SITE_PEAKS directions per node, the strongest (the pairs grow with their square).
  const kept = new Map<string, number>();
  const merged = condenseRows(good).sort((a, b) => b.levelDb - a.levelDb).filter((b) => {
    const n = (kept.get(b.node) ?? 0) + 1;
    kept.set(b.node, n);
    return n <= MAX_SITE_PEAKS;
  });
  if (merged.length > MAX_BEARINGS) merged.length = MAX_BEARINGS; // sorted by level: the weakest go
  const nodeNames = [...new Set(merged.map((b) => b.node))];
  const work: Work[] = merged.map((b) => ({ b, node: nodeNames.indexOf(b.node), ox: b.originM[0], oy: b.originM[1], th: b.azimuthDeg * RAD, sg: Math.max(b.sigmaDeg, 1e-3) * RAD, used: false }));
  const byNode = nodeNames.map((_, k) => work.flatMap((w, m) => (w.node === k ? [m] : [])));
  const perNode = byNode.map((list) => list.length);
  const multi = perNode.some((n) => n > 1);

  // Per node, the weakest level it reported this window: it demonstrably hears sources that weak.
  const weakestDb = byNode.map((list) => list.reduce((p, m) => Math.min(p, work[m].b.levelDb), Infinity));
  /**
   * Ghost: another array heard something this window, has the position in range, would have heard
   * a source there (level at 1 m `level1mDb`, the louder of the pair's two estimates: a ghost pairs
   * bearings of different sources, whose levels disagree; spherical spreading) at least as loud as
   * the weakest direction it reported, and lends nothing. A source too weak there for that array (far from it,
   * or under a louder neighbour's peak) is not refuted by its silence.
   */
  const refusedByOthers = (na: number, nb: number, x: number, y: number, level1mDb: number): boolean => {
    for (let k = 0; k < nodeNames.length; k++) {
      if (k === na || k === nb || perNode[k] === 0) continue;
      const o = work[byNode[k][0]];
      const r = Math.hypot(x - o.ox, y - o.oy);
      if (r > MAX_RANGE_M) continue;
      if (!(level1mDb - 20 * Math.log10(Math.max(r, MIN_RANGE_M)) < weakestDb[k])) return true;
    }
    return false;
  };

  /**
   * Many arrays: the arrays that would have heard a source at (x, y) of level `level1mDb` at 1 m (as
   * in refusedByOthers) yet lend it nothing, counted. A crossing of three or more arrays that more
   * such silent arrays contradict than support it is a ghost of leftover bearings (with 32 arrays
   * round 8 sources, four bearings the condensing had split off crossed 3.7 m from a source).
   */
  const silentWitnesses = (memberNodes: Set<number>, x: number, y: number, level1mDb: number): number => {
    let n = 0;
    for (let k = 0; k < nodeNames.length; k++) {
      if (memberNodes.has(k) || perNode[k] === 0) continue;
      const o = work[byNode[k][0]];
      const r = Math.hypot(x - o.ox, y - o.oy);
      if (r <= MAX_RANGE_M && !(level1mDb - 20 * Math.log10(Math.max(r, MIN_RANGE_M)) < weakestDb[k])) n++;
    }
    return n;
  };

  const build = (i: number, j: number): Candidate | null => {
    const A = work[i], B = work[j];
    // Ray crossing: A.o + t·uA = B.o + s·uB.
    const ua = [Math.cos(A.th), Math.sin(A.th)], ub = [Math.cos(B.th), Math.sin(B.th)];
    const cross = ua[0] * ub[1] - ua[1] * ub[0];
    if (Math.abs(cross) < Math.sin(MIN_CROSSING_DEG * RAD)) return null;
    const dx = B.ox - A.ox, dy = B.oy - A.oy;
    const t = (dx * ub[1] - dy * ub[0]) / cross;
    const s = (dx * ua[1] - dy * ua[0]) / cross;
    if (t < MIN_RANGE_M || s < MIN_RANGE_M || t > MAX_RANGE_M || s > MAX_RANGE_M) return null;
    let x = A.ox + t * ua[0], y = A.oy + t * ua[1];
    const near = nearestHint(hints, x, y, [0, 0, 0]);
    const hint = near && near.speedSigmaMps <= MAX_HINT_SPEED_SIGMA_MPS ? near : null;
    const vx = hint ? hint.vxMps : 0, vy = hint ? hint.vyMps : 0;
    // Members: the seed pair and each other array's bearing of smallest normalised miss. At the
    // crossing the miss spreads by the crossing's own uncertainty too: σ² + gᵀ C g, C the pair's J⁻¹.
    const members = [i, j];
    const pairCov = fisherCovariance([A.ox, B.ox], [A.oy, B.oy], [A.sg, B.sg], x, y);
    if (!pairCov) return null;
    for (let k = 0; k < nodeNames.length; k++) {
      if (k === A.node || k === B.node || byNode[k].length === 0) continue;
      // A node's bearings share its origin: the direction to the crossing and the crossing's own
      // spread seen from there are computed once per node (per bearing only with a track's velocity,
      // which moves each bearing's emission time).
      const O = work[byNode[k][0]];
      const dx = x - O.ox, dy = y - O.oy;
      const r2 = Math.max(dx * dx + dy * dy, 1e-12);
      const gx = -dy / r2, gy = dx / r2;
      const geo = gx * gx * pairCov[0] + 2 * gx * gy * pairCov[1] + gy * gy * pairCov[2];
      const az = Math.atan2(dy, dx);
      let best = -1, bestMiss = GATE_SIGMA;
      for (const m of byNode[k]) {
        const W = work[m];
        if (W.used) continue;
        const e = hint !== null ? missAt(W, x, y, vx, vy, tWin, c, true) : wrapPi(az - W.th);
        const miss = Math.abs(e) / Math.sqrt(W.sg * W.sg + geo);
        if (miss <= bestMiss) { bestMiss = miss; best = m; }
      }
      if (best >= 0) members.push(best);
    }
    // A lone pair that another array would refuse (below) is dropped before its fit: most pairs of
    // a busy window are such ghosts, and the fits are the cost.
    const pairLevel1mDb = Math.max(A.b.levelDb + 20 * Math.log10(Math.max(t, MIN_RANGE_M)), B.b.levelDb + 20 * Math.log10(Math.max(s, MIN_RANGE_M)));
    if (members.length === 2 && hintDistance2(vouching, x, y, pairCov) > TRACK_GATE_CHI2 && refusedByOthers(A.node, B.node, x, y, pairLevel1mDb)) return null;
    if (members.length >= 3 && members.length < nodeNames.length - members.length && hintDistance2(vouching, x, y, pairCov) > TRACK_GATE_CHI2 && silentWitnesses(new Set(members.map((m) => work[m].node)), x, y, (A.b.levelDb + 20 * Math.log10(Math.max(t, MIN_RANGE_M)) + B.b.levelDb + 20 * Math.log10(Math.max(s, MIN_RANGE_M))) / 2) > members.length) return null;
    let fitted = fitMembers(work, members, x, y, vx, vy, tWin, c, hint !== null, false);
    if (!fitted) return null;
    // The supporters were lent at the pair's crossing; at the fit of all of them each node's
    // bearing is chosen again (another of its bearings may now miss by less: two sources in nearly
    // the same direction from it), one that misses by more than the gate leaves, and the rest are
    // refitted (at most three times). The pair itself must stay.
    for (let pass = 0; pass < 3; pass++) {
      const f: { fix: PlanFix } = fitted;
      const norm = (m: number) => Math.abs(missAt(work[m], f.fix.xM, f.fix.yM, vx, vy, tWin, c, hint !== null)) / work[m].sg;
      let changed = false;
      const keep: number[] = [];
      for (const m of members) {
        let best = m, bestMiss = norm(m);
        if (m !== i && m !== j) {
          for (const o of byNode[work[m].node]) {
            if (o === m || work[o].used) continue;
            const e = norm(o);
            if (e < bestMiss) { bestMiss = e; best = o; }
          }
        }
        if (bestMiss > GATE_SIGMA) {
          if (m === i || m === j) return null;
          changed = true;
          continue;
        }
        if (best !== m) changed = true;
        keep.push(best);
      }
      if (!changed) break;
      members.length = 0;
      members.push(...keep);
      fitted = fitMembers(work, members, f.fix.xM, f.fix.yM, vx, vy, tWin, c, hint !== null, false);
      if (!fitted) return null;
    }
    x = fitted.fix.xM;
    y = fitted.fix.yM;
    // Every member within the gate at the fit, in front of its array and within range.
    for (let q = 0; q < members.length; q++) {
      const W = work[members[q]];
      if (Math.abs(missAt(W, x, y, vx, vy, tWin, c, hint !== null)) / W.sg > GATE_SIGMA) return null;
      const r = fitted.ranges[q];
      if (r < MIN_RANGE_M || r > MAX_RANGE_M) return null;
    }
    const nodes = members.length;
    const hintD2 = hintDistance2(hints, x, y, fitted.fix.covXY);
    const hinted = hintD2 <= TRACK_GATE_CHI2;
    // Score: χ² of the misses plus the spread of the levels at 1 m.
    const levels = members.map((m, q) => work[m].b.levelDb + 20 * Math.log10(Math.max(fitted.ranges[q], MIN_RANGE_M)));
    const meanL = levels.reduce((p, v) => p + v, 0) / nodes;
    const vouched = hintDistance2(vouching, x, y, fitted.fix.covXY) <= TRACK_GATE_CHI2;
    if (nodes === 2 && !vouched && refusedByOthers(A.node, B.node, x, y, Math.max(...levels))) return null;
    if (nodes >= 3 && !vouched && nodes < nodeNames.length - nodes && silentWitnesses(new Set(members.map((m) => work[m].node)), x, y, meanL) > nodes) return null;
    const spread = levels.reduce((p, v) => p + ((v - meanL) / LEVEL_SIGMA_DB) ** 2, 0);
    return { seed: [i, j], members, fix: fitted.fix, atUtcMs: fitted.atUtcMs, nodes, score: fitted.fix.chi2 + spread + (hints.length > 0 ? Math.min(hintD2, HINT_SCORE_CAP) : 0), hinted, ranges: fitted.ranges, vx, vy, moving: hint !== null, alternates: [] };
  };

  // Seeds. A pair whose two bearings both already support a candidate of three or more arrays
  // crosses where that candidate is and gathers the same supporters: it is not built but kept as
  // that candidate's alternate (with N arrays hearing a source, C(N, 2) pairs give one candidate). A
  // candidate that loses one of its own pair's bearings is rebuilt from its first alternate that
  // still builds, as the pair would have been had it been built.
  let cands: Candidate[] = [];
  const supports: Candidate[][] = work.map(() => []);
  for (let i = 0; i < work.length; i++) {
    for (let j = i + 1; j < work.length; j++) {
      if (work[i].node === work[j].node) continue;
      const covering = supports[i].length > 0 && supports[j].length > 0 ? supports[i].find((k) => supports[j].includes(k)) : undefined;
      if (covering) {
        covering.alternates.push([i, j]);
        continue;
      }
      const cand = build(i, j);
      if (!cand) continue;
      if (cand.members.length >= 3) for (const m of cand.members) supports[m].push(cand);
      cands.push(cand);
    }
  }
  const out: LocatedSource[] = [];
  while (cands.length > 0 && out.length < MAX_SOURCES) {
    let bi = 0;
    for (let q = 1; q < cands.length; q++) if (better(cands[q], cands[bi])) bi = q;
    const cand = cands[bi];
    for (const m of cand.members) work[m].used = true;
    // The leftover bearings of a source already taken (those its fit refused at the gate) cross near
    // it again: such a candidate, within the 99 % gate of a source of at least as many arrays, is
    // that source, not another. Its bearings are spent, nothing is reported.
    const duplicate = out.some((o) => o.nodes.length >= cand.nodes && hintDistance2([{ id: '', xM: o.xM, yM: o.yM, vxMps: 0, vyMps: 0, covXY: o.covXY, speedSigmaMps: 0 }], cand.fix.xM, cand.fix.yM, cand.fix.covXY) <= TRACK_GATE_CHI2);
    if (!duplicate) {
      // Candidates are screened on the pseudo-linear fix; the one taken is refined (Gauss–Newton on the angles).
      const exact = fitMembers(work, cand.members, cand.fix.xM, cand.fix.yM, cand.vx, cand.vy, tWin, c, cand.moving, true);
      if (exact) Object.assign(cand, { fix: exact.fix, ranges: exact.ranges, atUtcMs: exact.atUtcMs });
      out.push(toLocated(work, cand, nodeNames, multi, tWin, c));
    }
    // Candidates that lost a bearing to it: dropped when it was one of their pair, else rebuilt from what is left.
    const next: Candidate[] = [];
    for (let q = 0; q < cands.length; q++) {
      const k = cands[q];
      if (q === bi) continue;
      if (work[k.seed[0]].used || work[k.seed[1]].used) {
        for (let a = 0; a < k.alternates.length; a++) {
          const [i, j] = k.alternates[a];
          if (work[i].used || work[j].used) continue;
          const rebuilt = build(i, j);
          if (rebuilt) {
            rebuilt.alternates = k.alternates.slice(a + 1);
            next.push(rebuilt);
            break;
          }
        }
        continue;
      }
      if (!k.members.some((m) => work[m].used)) next.push(k);
      else {
        const rebuilt = build(k.seed[0], k.seed[1]);
        if (rebuilt) {
          rebuilt.alternates = k.alternates;
          next.push(rebuilt);
        }
      }
    }
    cands = next;
  }
  return out;
};

function better(a: Candidate, b: Candidate): boolean {
  if (a.nodes !== b.nodes) return a.nodes > b.nodes;
  return a.score < b.score;
}

/** Miss (radians) of bearing W at a position located at t_window moving at v (zero: stationary). */
function missAt(W: Work, x: number, y: number, vx: number, vy: number, tWin: number, c: number, moving: boolean): number {
  let px = x, py = y;
  if (moving) {
    const dtS = emissionLagS(W, x, y, vx, vy, tWin, c);
    px += vx * dtS;
    py += vy * dtS;
  }
  return wrapPi(Math.atan2(py - W.oy, px - W.ox) - W.th);
}

/**
 * δ = t_e − t_window, s: the emission time of bearing W's sound for a source at (x, y) at t_window
 * moving at v, t_e = t_i − |x + v·δ − p_i|/c (fixed point; it contracts by |v|/c per step).
 */
function emissionLagS(W: Work, x: number, y: number, vx: number, vy: number, tWin: number, c: number): number {
  const rowS = (W.b.utcMs - tWin) / 1000;
  let d = rowS - Math.hypot(x - W.ox, y - W.oy) / c;
  for (let k = 0; k < 3; k++) d = rowS - Math.hypot(x + vx * d - W.ox, y + vy * d - W.oy) / c;
  return d;
}

/**
 * The fix of a set of bearings. Moving (a track's velocity): each array is moved by −v·δ_i,
 * δ_i = t_i − r_i/c − t_window, so that its line points at the position at t_window; r_i updated from
 * the fix, until it settles (at most eight passes). Stationary: one fix, referred to the mean emission time.
 */
function fitMembers(work: Work[], members: number[], x0: number, y0: number, vx: number, vy: number, tWin: number, c: number, moving: boolean, refine: boolean): { fix: PlanFix; ranges: number[]; atUtcMs: number } | null {
  const n = members.length;
  const ox = new Float64Array(n), oy = new Float64Array(n), th = new Float64Array(n), sg = new Float64Array(n);
  for (let q = 0; q < n; q++) {
    const W = work[members[q]];
    ox[q] = W.ox; oy[q] = W.oy; th[q] = W.th; sg[q] = W.sg;
  }
  let fix: PlanFix | null = null;
  let x = x0, y = y0;
  const passes = moving ? 8 : 1;
  for (let pass = 0; pass < passes; pass++) {
    const px = x, py = y;
    if (moving) {
      for (let q = 0; q < n; q++) {
        const W = work[members[q]];
        const dtS = emissionLagS(W, x, y, vx, vy, tWin, c);
        ox[q] = W.ox - vx * dtS;
        oy[q] = W.oy - vy * dtS;
      }
    }
    fix = bearingsFix(ox, oy, th, sg, [x, y], refine);
    if (!fix) return null;
    x = fix.xM;
    y = fix.yM;
    // Each pass changes the ranges by the last shift, the delays by that over c: a few passes.
    if (pass > 0 && Math.hypot(x - px, y - py) < 1e-9) break;
  }
  if (!fix) return null;
  const ranges = members.map((m) => Math.hypot(x - work[m].ox, y - work[m].oy));
  let atUtcMs = tWin;
  if (!moving) atUtcMs = members.reduce((p, m, q) => p + work[m].b.utcMs - (ranges[q] / c) * 1000, 0) / n;
  return { fix, ranges, atUtcMs };
}

/** The smallest normalised distance² from (x, y) to a track's prediction (Infinity without one). */
function hintDistance2(hints: TrackHint[], x: number, y: number, cov: [number, number, number]): number {
  let best = Infinity;
  for (const h of hints) {
    const a = h.covXY[0] + cov[0], b = h.covXY[1] + cov[1], cc = h.covXY[2] + cov[2];
    const det = a * cc - b * b;
    if (!(det > 0)) continue;
    const dx = x - h.xM, dy = y - h.yM;
    best = Math.min(best, (cc * dx * dx - 2 * b * dx * dy + a * dy * dy) / det);
  }
  return best;
}

/** The nearest track prediction within the χ² gate of (x, y) with the candidate's covariance, or null. */
function nearestHint(hints: TrackHint[], x: number, y: number, cov: [number, number, number]): TrackHint | null {
  let best: TrackHint | null = null, bestD = TRACK_GATE_CHI2;
  for (const h of hints) {
    const a = h.covXY[0] + cov[0], b = h.covXY[1] + cov[1], cc = h.covXY[2] + cov[2];
    const det = a * cc - b * b;
    if (!(det > 0)) continue;
    const dx = x - h.xM, dy = y - h.yM;
    const d2 = (cc * dx * dx - 2 * b * dx * dy + a * dy * dy) / det;
    if (d2 <= bestD) { bestD = d2; best = h; }
  }
  return best;
}

function toLocated(work: Work[], cand: Candidate, nodeNames: string[], multi: boolean, tWin: number, c: number): LocatedSource {
  const { fix, members, ranges } = cand;
  // Height from the members with elevation.
  let zw = 0, zs = 0;
  for (let q = 0; q < members.length; q++) {
    const b = work[members[q]].b;
    if (b.elevationDeg === null || Math.abs(b.elevationDeg) > 85) continue;
    const el = b.elevationDeg * RAD;
    const sz = Math.max((ranges[q] * work[members[q]].sg) / Math.cos(el) ** 2, 1e-6);
    zw += 1 / (sz * sz);
    zs += (b.originM[2] + ranges[q] * Math.tan(el)) / (sz * sz);
  }
  const zM = zw > 0 ? zs / zw : null;
  const levels = members.map((m, q) => {
    const b = work[m].b;
    const r = zM === null ? ranges[q] : Math.hypot(ranges[q], zM - b.originM[2]);
    return b.levelDb + 20 * Math.log10(Math.max(r, MIN_RANGE_M));
  });
  const ellipse = covarianceEllipse(fix.covXY);
  return {
    xM: fix.xM,
    yM: fix.yM,
    zM,
    covXY: fix.covXY,
    ellipse,
    uncertaintyM: Math.sqrt(ellipse.majorM * ellipse.minorM),
    levelDb: levels.reduce((p, v) => p + v, 0) / levels.length,
    nodes: [...new Set(members.map((m) => nodeNames[work[m].node]))].sort(),
    ambiguous: cand.nodes === 2 && !cand.hinted && multi,
    residualDeg: Math.sqrt(fix.chi2 === 0 ? 0 : members.reduce((p, m) => p + missAt(work[m], fix.xM, fix.yM, cand.vx, cand.vy, tWin, c, cand.moving) ** 2, 0) / members.length) / RAD,
    atUtcMs: cand.atUtcMs,
  };
}
