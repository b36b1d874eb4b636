/**
 * A bin worker thread: owns the covariance of its bins (a BinProcessor), follows the shared ring
 * hop by hop, and on scan hops writes its share of the spectra into the shared results. Every
 * failure is caught and reported as a message; a fault it cannot recover from ends the thread
 * after reporting, and the pool replaces it.
 */
import { parentPort } from 'node:worker_threads';
import { BinProcessor } from './bin-processor.ts';
import {
  CTRL_DONE,
  CTRL_WRITE,
  FLAG_BEAMS,
  FLAG_RESET,
  MAX_BEAMS,
  resultStride,
  type BeamSpec,
  gridFromMessage,
  loadingAt,
  META_FLAGS,
  META_LAMBDA,
  META_SCAN_SEQ,
  META_STRIDE,
  RESULT_SLOTS,
  STATS_STRIDE,
  STAT_NON_FINITE,
  STAT_RESTARTS,
  STAT_SINGULAR,
  type FromWorker,
  type PlanMessage,
  type ToWorker,
} from './protocol.ts';

interface State {
  plan: PlanMessage;
  ctrl: Int32Array;
  meta: Float64Array;
  stats: Float64Array;
  views: Float64Array[];
  conv: Float64Array[];
  mvdr: Float64Array[];
  beamOut: Float64Array[];
  weightOut: Float64Array[];
  beams: BeamSpec[];
  proc: BinProcessor;
  processed: number;
  pendingFault: string | null;
}

const port = parentPort!;
let state: State | null = null;
/** A staged plan, built and waiting for its commit (protocol.ts PlanMessage.staged). */
let pending: State | null = null;
/** Test hook: what happens to the next plan message. */
let planFault: { mode: 'refuse' | 'stall'; message: string } | null = null;
let running = true;
let looping = false;

/** First line of an error, for messages that reach status and REST answers (no stack). */
function firstLine(e: unknown): string {
  return String((e as Error)?.message ?? e).split('\n')[0];
}

function post(m: FromWorker): void {
  port.postMessage(m);
}

async function build(plan: PlanMessage): Promise<State> {
  const M = plan.positions.length;
  const B = plan.freqsHz.length;
  const ring = new Float64Array(plan.ring);
  const results = new Float64Array(plan.results);
  const n = 2 * M * B;
  const views: Float64Array[] = [];
  for (let s = 0; s < plan.slots; s++) views.push(ring.subarray(s * plan.slotDoubles + plan.binOffsetDoubles, s * plan.slotDoubles + plan.binOffsetDoubles + n));
  const conv: Float64Array[] = [];
  const mvdr: Float64Array[] = [];
  const beamOut: Float64Array[] = [];
  const weightOut: Float64Array[] = [];
  const R = plan.resultDirections;
  const stride = resultStride(R, plan.weightDoubles);
  const beamShares = MAX_BEAMS * (R + 1);
  for (let r = 0; r < RESULT_SLOTS; r++) {
    const base = (plan.workerIndex * RESULT_SLOTS + r) * stride;
    conv.push(results.subarray(base, base + R));
    mvdr.push(results.subarray(base + R, base + 2 * R));
    beamOut.push(results.subarray(base + 2 * R, base + 2 * R + beamShares));
    weightOut.push(results.subarray(base + 2 * R + beamShares, base + stride));
  }
  const proc = await BinProcessor.create({ positions: plan.positions, freqsHz: Float64Array.from(plan.freqsHz), grid: gridFromMessage(plan.grid), speedOfSoundMps: plan.speedOfSoundMps, snapshotScale: plan.snapshotScale, fast: plan.fast });
  proc.setMask(plan.active);
  const ctrl = new Int32Array(plan.ctrl);
  return { plan, ctrl, meta: new Float64Array(plan.meta), stats: new Float64Array(plan.stats), views, conv, mvdr, beamOut, weightOut, beams: plan.beams, proc, processed: Atomics.load(ctrl, CTRL_DONE + plan.workerIndex), pendingFault: null };
}

/** Process one published hop. */
function handle(st: State, hop: number): void {
  const slot = hop % st.plan.slots;
  const o = slot * META_STRIDE;
  const flags = st.meta[o + META_FLAGS];
  const t0 = performance.now();
  if (st.pendingFault !== null) {
    const m = st.pendingFault;
    st.pendingFault = null;
    throw new Error(m);
  }
  if ((flags & FLAG_RESET) !== 0) st.proc.reset();
  st.proc.hop(st.views[slot], st.meta[o + META_LAMBDA]);
  const scanBits = flags & 7;
  const w = st.plan.workerIndex;
  if ((scanBits & 3) !== 0) {
    const seq = st.meta[o + META_SCAN_SEQ];
    const r = seq % RESULT_SLOTS;
    const loading = loadingAt(st.meta, o);
    st.proc.scan(scanBits, loading, st.conv[r], st.mvdr[r]);
    if ((flags & FLAG_BEAMS) !== 0 && st.beams.length > 0) st.proc.scanBeams(st.beams, loading, st.beamOut[r], st.weightOut[r], st.plan.weightDoubles);
    st.stats[w * STATS_STRIDE + 2]++;
    st.stats[w * STATS_STRIDE + STAT_SINGULAR] = st.proc.singularBins;
    st.stats[w * STATS_STRIDE + STAT_NON_FINITE] = st.proc.nonFiniteBins;
    st.stats[w * STATS_STRIDE + STAT_RESTARTS] = st.proc.covarianceResets;
    const scanMs = performance.now() - t0;
    st.stats[w * STATS_STRIDE + 3] = scanMs;
    post({ type: 'scanned', epoch: st.plan.epoch, workerIndex: w, scanSeq: seq, resultSlot: r, directions: st.proc.directions, scanMs, beams: (flags & FLAG_BEAMS) !== 0 ? st.beams.map((b) => b.id) : [] });
  }
  st.stats[w * STATS_STRIDE] += performance.now() - t0;
  st.stats[w * STATS_STRIDE + 1]++;
}

async function loop(): Promise<void> {
  if (looping) return;
  looping = true;
  while (running && state !== null) {
    const st = state;
    const published = Atomics.load(st.ctrl, CTRL_WRITE);
    while (st.processed < published && state === st) {
      try {
        handle(st, st.processed);
      } catch (e) {
        // Report once, then end the thread: its covariance may be half-updated. The pool replaces it.
        post({ type: 'error', workerIndex: st.plan.workerIndex, message: (e as Error)?.stack ?? String(e), fatal: true });
        running = false;
        port.close();
        return;
      }
      st.processed++;
      Atomics.store(st.ctrl, CTRL_DONE + st.plan.workerIndex, st.processed);
      Atomics.notify(st.ctrl, CTRL_DONE + st.plan.workerIndex);
    }
    if (state !== st) continue;
    const r = Atomics.waitAsync(st.ctrl, CTRL_WRITE, published, 1000);
    if (r.async) await r.value;
    // Let queued messages (mask, grid, plan) run between batches.
    await new Promise<void>((res) => setImmediate(res));
  }
  looping = false;
}

port.on('message', async (m: ToWorker) => {
  try {
    switch (m.type) {
      case 'plan': {
        const fault = planFault;
        planFault = null;
        if (fault?.mode === 'stall') return;
        let built: State;
        try {
          if (fault) throw new Error(fault.message);
          built = await build(m);
        } catch (e) {
          // A plan it cannot build (a table over its cap, memory): said as data, the thread lives on.
          post({ type: 'refused', epoch: m.epoch, workerIndex: m.workerIndex, message: firstLine(e) });
          return;
        }
        if (m.staged) pending = built;
        else {
          state = built;
          void loop();
        }
        post({ type: 'ready', epoch: m.epoch, workerIndex: m.workerIndex });
        return;
      }
      case 'commit':
        if (pending && pending.plan.epoch === m.epoch) {
          const old = state;
          state = pending;
          pending = null;
          // The loop may be waiting on the old ring's counter: wake it so it moves to the new one.
          if (old) Atomics.notify(old.ctrl, CTRL_WRITE);
          void loop();
        }
        return;
      case 'abort':
        if (pending && pending.plan.epoch === m.epoch) pending = null;
        return;
      case 'plan-fault':
        planFault = { mode: m.mode, message: m.message };
        return;
      case 'mask':
        if (state && state.plan.epoch === m.epoch) state.proc.setMask(m.active);
        return;
      case 'grid':
        if (state && state.plan.epoch === m.epoch) await state.proc.setGrid(gridFromMessage(m.grid));
        return;
      case 'beams':
        if (state && state.plan.epoch === m.epoch) state.beams = m.beams;
        return;
      case 'fault':
        if (state) state.pendingFault = m.message;
        return;
      case 'poison':
        state?.proc.poison();
        return;
      case 'stop':
        running = false;
        port.close();
        return;
    }
  } catch (e) {
    post({ type: 'error', workerIndex: state?.plan.workerIndex ?? -1, message: (e as Error)?.stack ?? String(e), fatal: false });
  }
});
