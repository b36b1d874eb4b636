/**
 * The engine's glue to remote bin workers (server/cluster/remote-bins.ts carries the messages):
 * how the band is weighted over local threads and remote workers, the remote parts of a plan as
 * the workers get them, and a remote part's answer written into the plan's results and figures
 * exactly where a local worker would have written it, so the combiner treats both alike.
 */
import type { Part, RemotePlan } from '../cluster/remote-wire.ts';
import type { RemoteBins, RemoteMember } from '../cluster/remote-bins.ts';
import { layoutPlan, type Plan, type PlanLayoutInput } from './plan-layout.ts';
import type { BinPool } from './pool.ts';
import { MAX_BEAMS, RESULT_SLOTS, resultStride, STATS_STRIDE, STAT_NON_FINITE, STAT_RESTARTS, STAT_SINGULAR, type PlanMessage } from './protocol.ts';

/**
 * Relative speed of each part: the local threads' measured bin-hops per busy second in the plan in
 * force, the remote workers' own measure from their heartbeats; a part not measured yet counts as
 * the mean of the measured local threads (1 when none is).
 */
export function partWeights(plan: Plan | undefined, localThreads: number, members: readonly RemoteMember[]): number[] {
  const local: number[] = [];
  if (plan) {
    for (let w = 0; w < Math.min(localThreads, plan.ranges.length); w++) {
      const busyMs = plan.stats[w * STATS_STRIDE];
      const hops = plan.stats[w * STATS_STRIDE + 1];
      if (busyMs > 50 && hops > 0) local.push((plan.ranges[w].count * hops) / (busyMs / 1000));
    }
  }
  const mean = local.length ? local.reduce((a, b) => a + b, 0) / local.length : 1;
  const out: number[] = [];
  for (let w = 0; w < localThreads; w++) out.push(local.length ? mean : 1);
  for (const m of members) out.push(m.throughputBinsPerS !== null && local.length ? m.throughputBinsPerS : mean);
  return out;
}

/** The JSON plan a remote worker builds its part from (the same content as a local PlanMessage). */
export function remotePlan(engineId: string, m: PlanMessage): RemotePlan {
  return {
    v: 1,
    type: 'plan',
    engine: engineId,
    epoch: m.epoch,
    part: m.workerIndex,
    positions: m.positions,
    freqsHz: m.freqsHz,
    grid: m.grid,
    speedOfSoundMps: m.speedOfSoundMps,
    snapshotScale: m.snapshotScale,
    active: m.active,
    fast: m.fast,
    beams: m.beams,
    firstSeq: 0,
  };
}

/**
 * Write a remote part's answer into the plan's result slot of its scan and its figures into the
 * stats. Returns false (nothing written) when it does not fit the plan in force.
 */
export function writeRemotePart(plan: Plan, part: Part, channels: number): boolean {
  const R = plan.resultDirections;
  const range = plan.ranges[part.part];
  if (!range) return false;
  const D = part.directions;
  const nb = part.beamIds.length;
  if (D > R || nb > MAX_BEAMS) return false;
  if (nb > 0 && part.weightsPerBeam !== 2 * channels * range.count) return false;
  const r = part.scanSeq % RESULT_SLOTS;
  const res = plan.results;
  const base = (part.part * RESULT_SLOTS + r) * resultStride(R, plan.weightDoubles);
  res.set(part.conv, base);
  res.set(part.mvdr, base + R);
  res.set(part.beams.subarray(0, nb * (D + 1)), base + 2 * R);
  const wBase = base + 2 * R + MAX_BEAMS * (R + 1);
  const W = part.weightsPerBeam;
  for (let i = 0; i < nb; i++) {
    const o = wBase + i * plan.weightDoubles;
    for (let k = 0; k < W; k++) res[o + k] = part.weights[i * W + k];
  }
  const s = part.part * STATS_STRIDE;
  plan.stats[s] = part.busyMs;
  plan.stats[s + 1] = part.hops;
  plan.stats[s + 2] = part.scans;
  plan.stats[s + 3] = part.scanMs;
  plan.stats[s + STAT_SINGULAR] = part.singular;
  plan.stats[s + STAT_NON_FINITE] = part.nonFinite;
  plan.stats[s + STAT_RESTARTS] = part.restarts;
  return true;
}

/**
 * Lay out and build a plan over the local threads and the usable remote workers: local threads get
 * their PlanMessages through the pool, remote workers their RemotePlans through the broker, all
 * at once. A remote worker that refuses or does not answer is left out and the plan laid out again
 * without it (a new epoch); a local failure rejects as before (PlanError).
 */
export async function preparePlan(a: {
  input: Omit<PlanLayoutInput, 'epoch' | 'weights' | 'caps' | 'workers'>;
  nextEpoch: () => number;
  pool: BinPool;
  remote: RemoteBins | null;
  previous: Plan | undefined;
  timeoutMs: number;
}): Promise<{ plan: Plan; members: RemoteMember[]; considered: string[] }> {
  const L = a.pool.size;
  const M = a.input.positions.length;
  const remote = a.remote;
  const all = remote ? remote.candidates() : [];
  const considered = all.map((m) => m.id);
  let members = all.slice(0, Math.max(0, a.input.band.count - L));
  for (;;) {
    const cap = remote && members.length ? remote.maxBinsPerPart(M, a.input.baseGrid.count) : 0;
    const weighted = members.length ? { weights: partWeights(a.previous, L, members), caps: [...new Array<number>(L).fill(Infinity), ...members.map(() => cap)] } : {};
    const { plan, messages } = layoutPlan({ ...a.input, epoch: a.nextEpoch(), workers: L, ...weighted });
    const idle = members.filter((_, i) => plan.ranges[L + i].count === 0);
    if (idle.length > 0) {
      members = members.filter((m) => !idle.includes(m));
      continue;
    }
    const asks = members.map((m, i) => ({ memberId: m.id, plan: remotePlan(remote!.engineId, messages[L + i]) }));
    const [, r] = await Promise.all([a.pool.prepare(messages.slice(0, L), a.timeoutMs), remote && asks.length ? remote.prepare(asks) : { failed: [] as string[] }]);
    if (r.failed.length === 0) return { plan, members, considered };
    members = members.filter((m) => !r.failed.includes(m.id));
  }
}

/** After the pool committed `plan`: its remote parts become the ones in force. */
export function commitRemote(remote: RemoteBins, plan: Plan, members: readonly RemoteMember[], considered: readonly string[], localThreads: number, channels: number): void {
  const parts = members.map((m, i) => {
    const r = plan.ranges[localThreads + i];
    const firstBin = plan.startBin + r.start;
    return { part: localThreads + i, memberId: m.id, firstBin, bins: r.count, offsetDoubles: 2 * channels * firstBin };
  });
  remote.commit(plan.epoch, parts, channels, { maxDirections: plan.resultDirections, maxWeightsPerBeam: plan.weightDoubles }, considered);
}

/**
 * Whether a remote part's answer belongs to the scan it names in the plan in force; if so it is
 * written into the results (writeRemotePart). Old epochs, late answers and misfits are counted.
 */
export function acceptRemotePart(plan: Plan, part: Part, localThreads: number, pending: boolean, remote: RemoteBins, channels: number): boolean {
  if (part.epoch !== plan.epoch || part.part < localThreads || part.part >= plan.ranges.length) {
    remote.oldEpochMessages++;
    return false;
  }
  if (!pending) {
    remote.lateParts++;
    return false;
  }
  if (!writeRemotePart(plan, part, channels)) {
    remote.dropped['part-shape'] = (remote.dropped['part-shape'] ?? 0) + 1;
    return false;
  }
  return true;
}
