/**
 * The pooled live engine against the single-thread reference (the same BinProcessor over all bins,
 * fed the same snapshots), worker replacement, live parameter changes and load shedding.
 */
import { afterEach, describe, expect, it } from 'vitest';
import { loadGeometry } from '../../server/config/array-file.ts';
import { BinProcessor, SCAN_CONVENTIONAL, SCAN_MVDR } from '../../server/dsp/../engine/bin-processor.ts';
import { trackerF32Bound } from '../../server/dsp/fast/conventional-tracker.ts';
import { conventionalRowBound, float32RelativeBound } from '../../server/dsp/fast/mvdr-scan.ts';
import { hermitianTrace } from '../../server/dsp/hermitian.ts';
import { LoadingSolver } from '../../server/dsp/loading.ts';
import { MultiChannelStft } from '../../server/dsp/stft.ts';
import { directionGrid } from '../../server/dsp/steering.ts';
import { Engine, type EngineRow } from '../../server/engine/engine.ts';
import type { ProcessingParams } from '../../server/engine/params.ts';
import { PlanError } from '../../server/engine/plan-budget.ts';
import { DEFAULT_SHED_POLICY } from '../../server/engine/shedding.ts';
import type { Block } from '../../shared/types.ts';
import { planarBlocks, renderPlaneWaves } from '../helpers/plane-waves.ts';

const ARRAYS = new URL('../../config/arrays/', import.meta.url).pathname;
const FS = 48000;
const N = 512;

let engine: Engine | null = null;
afterEach(async () => {
  await engine?.close();
  engine = null;
});

const params = (over: Partial<ProcessingParams> = {}): ProcessingParams => ({
  lambda: 0.98,
  loading: { mode: 'relative', ratio: 0.01 },
  bandHz: [500, 4000],
  grid: { azimuthDeg: { startDeg: 0, stopDeg: 355, stepDeg: 5 } },
  methods: ['mvdr', 'conventional'],
  spectrumRateHz: 20,
  normalise: false,
  fftSize: N,
  ...over,
});

async function scene(frames = 32768) {
  const g = await loadGeometry(`${ARRAYS}ring-24.json`);
  const x = renderPlaneWaves({
    positions: g.positions,
    sampleRateHz: FS,
    frames,
    speedOfSoundMps: 343.2,
    sources: [
      { azimuthDeg: 40, rms: 0.1, loHz: 300, hiHz: 6000, seed: 1 },
      { azimuthDeg: 200, rms: 0.03, loHz: 300, hiHz: 6000, seed: 2 },
    ],
    noiseRms: 0.002,
    noiseSeed: 3,
  });
  // Blocks of 1000: not a multiple of the hop, on purpose.
  return { g, blocks: planarBlocks(x, g.positions.length, FS, 1000) };
}

/**
 * The single-thread float64 reference: every hop into one BinProcessor; scans at the given hops.
 * Hops whose index is in `skip` are left out, and the next hop kept stands for them: λ^k, k the
 * hops since the last one kept (the exponentially weighted mean keeps its time constant).
 */
function reference(g: Awaited<ReturnType<typeof scene>>['g'], blocks: Block[], p: ProcessingParams, scanAt: Set<number>, active?: boolean[], skip?: { from: number; count: number; compensate: boolean }) {
  const M = g.positions.length;
  const stft = new MultiChannelStft(M, N);
  const band = stft.bandBins(p.bandHz[0], p.bandHz[1], FS);
  const grid = directionGrid(p.grid);
  const freqs = Float64Array.from({ length: band.count }, (_, k) => ((band.startBin + k) * FS) / N);
  const proc = new BinProcessor({ positions: g.positions, freqsHz: freqs, grid, speedOfSoundMps: 343.2, snapshotScale: 2 / N });
  if (active) proc.setMask(active);
  const out = new Map<number, Reference>();
  let hop = 0;
  let k = 1;
  for (const b of blocks) {
    stft.push(b.data, b.frames, b.sampleIndex, (snap, hopStart) => {
      const h = hop++;
      if (skip && h >= skip.from && h < skip.from + skip.count) {
        k++;
        return;
      }
      proc.hop(snap.slice(2 * M * band.startBin, 2 * M * (band.stopBin + 1)), skip?.compensate ? Math.pow(p.lambda, k) : p.lambda);
      k = 1;
      const last = hopStart + N - 1;
      if (scanAt.has(last)) {
        const conv = new Float64Array(grid.count);
        const mvdr = new Float64Array(grid.count);
        proc.scan(SCAN_CONVENTIONAL | SCAN_MVDR, p.loading, conv, mvdr);
        // The engine's fast kernels run in single precision: their derived bounds for this bank.
        const ma = proc.bank.activeChannels.length;
        const sub = new Float64Array(2 * ma * ma);
        const solver = new LoadingSolver(ma);
        let traceSum = 0;
        let mvdrRel = 0;
        for (let b = 0; b < proc.bins; b++) {
          proc.bank.gather(b, sub);
          const tr = hermitianTrace(sub, 0, ma);
          traceSum += tr;
          mvdrRel = Math.max(mvdrRel, float32RelativeBound(ma, tr, solver.level(sub, 0, p.loading)));
        }
        // Conventional: tracked, per row, or tracked from per-row values (BinProcessor 'auto'): at
        // most the sum of the two bounds.
        out.set(last, { conv, mvdr, convAbs: ((trackerF32Bound(ma) + conventionalRowBound(ma)) * traceSum) / ma, mvdrRel });
      }
    });
  }
  return out;
}

/**
 * A reference row and the single-precision bounds of the fast path for it: the row is a sum over
 * bins, so MVDR is within the largest per-bin relative bound (mvdr-scan.ts float32RelativeBound)
 * and the conventional spectrum within the sum of the per-bin absolute bounds ((trackerF32Bound +
 * conventionalRowBound) · tr R_b / M', conventional-tracker.ts and mvdr-scan.ts).
 */
interface Reference {
  conv: Float64Array;
  mvdr: Float64Array;
  convAbs: number;
  mvdrRel: number;
}

/** The largest error of a row against the reference in units of its bound (≤ 1: within; float64 rounding 1e-9 added). */
function boundExcess(r: EngineRow, e: Reference): number {
  let m = 0;
  for (let d = 0; d < e.mvdr.length; d++) {
    m = Math.max(m, Math.abs(r.mvdrPower![d] - e.mvdr[d]) / ((e.mvdrRel + 1e-9) * e.mvdr[d]));
    m = Math.max(m, Math.abs(r.conventionalPower![d] - e.conv[d]) / (e.convAbs + 1e-9 * e.conv[d]));
  }
  return m;
}

function maxRel(a: Float64Array, b: Float64Array): number {
  let m = 0;
  for (let i = 0; i < a.length; i++) m = Math.max(m, Math.abs(a[i] - b[i]) / Math.abs(b[i]));
  return m;
}

describe('live engine', () => {
  it('pooled fast-path spectra equal the single-thread plain float64 reference within the single-precision bounds (2 and 3 workers, masked channels)', async () => {
    const { g, blocks } = await scene();
    const masked = Array.from({ length: 24 }, (_, c) => c !== 3 && c !== 17);
    for (const [workers, active] of [[2, undefined], [3, undefined], [2, masked]] as const) {
      const rows: EngineRow[] = [];
      const p = params();
      engine = await Engine.create({ geometry: g, sampleRateHz: FS, params: p, workers, speedOfSoundMps: 343.2, onRow: (r) => rows.push(r), shedding: false });
      if (active) {
        engine.setMask([...active]);
        await new Promise((r) => setTimeout(r, 200)); // idle workers take the mask before any hop
      }
      for (const b of blocks) await engine.pushAsync(b);
      await engine.drain();
      expect(engine.status()).toMatchObject({ workers, hopsSkipped: 0, scansDropped: 0 });
      await engine.close();
      engine = null;
      // 32768 samples → 128 hops of 256; rows at 20 Hz → one per 2400 samples.
      expect(rows.length).toBeGreaterThanOrEqual(12);
      const ref = reference(g, blocks, p, new Set(rows.map((r) => r.sampleIndex)), active ? [...active] : undefined);
      let worst = 0;
      for (const r of rows) {
        const e = ref.get(r.sampleIndex)!;
        expect(e, `reference scan at ${r.sampleIndex}`).toBeDefined();
        worst = Math.max(worst, boundExcess(r, e));
      }
      expect(worst).toBeLessThanOrEqual(1);
      // And the rows make sense: the louder source's direction carries the MVDR maximum.
      const last = rows[rows.length - 1];
      expect(last.peaks.mvdr[0].azimuthDeg).toBeCloseTo(40, 0);
      expect(Math.abs(last.peaks.mvdr[1].azimuthDeg - 200)).toBeLessThan(2.5);
    }
  });

  it('a worker that throws reports an error and is replaced; rows keep coming', async () => {
    const { g, blocks } = await scene();
    const rows: EngineRow[] = [];
    const errors: string[] = [];
    engine = await Engine.create({ geometry: g, sampleRateHz: FS, params: params(), workers: 2, speedOfSoundMps: 343.2, onRow: (r) => rows.push(r), onError: (m) => errors.push(m), shedding: false });
    for (const b of blocks.slice(0, 10)) await engine.pushAsync(b);
    await engine.drain();
    engine.injectWorkerFault(1);
    for (const b of blocks.slice(10, 14)) engine.push(b);
    const until = Date.now() + 10_000;
    while (errors.length === 0 && Date.now() < until) await new Promise((r) => setTimeout(r, 20));
    expect(errors[0]).toMatch(/bin worker 1 failed and was replaced: Error: injected fault in worker 1/);
    const before = rows.length;
    // Give the replacement time to start, then feed the rest.
    await new Promise((r) => setTimeout(r, 1500));
    for (const b of blocks.slice(14)) await engine.pushAsync(b);
    await engine.drain();
    expect(rows.length).toBeGreaterThan(before + 3);
    const st = engine.status() as any;
    expect(st.workerRestarts).toBe(1);
    expect(st.lastWorkerError).toMatch(/injected fault/);
  });

  it('hops skipped with the ring full keep the time constant: the next hop kept is weighted λ^k', async () => {
    const { g, blocks } = await scene();
    const rows: EngineRow[] = [];
    const p = params();
    engine = await Engine.create({ geometry: g, sampleRateHz: FS, params: p, workers: 2, speedOfSoundMps: 343.2, onRow: (r) => rows.push(r), shedding: false });
    for (const b of blocks.slice(0, 10)) await engine.pushAsync(b);
    await engine.drain();
    // 10 000 samples complete the hops whose frames end by then: starts −256, 0, …, 9472 (39).
    expect(engine.hops).toBe(39);
    engine.skipHopsAsIfFull(20);
    for (const b of blocks.slice(10)) await engine.pushAsync(b);
    await engine.drain();
    expect(engine.status()).toMatchObject({ hopsSkipped: 20 });
    const at = new Set(rows.map((r) => r.sampleIndex));
    const kept = reference(g, blocks, p, at, undefined, { from: 39, count: 20, compensate: true });
    const plain = reference(g, blocks, p, at, undefined, { from: 39, count: 20, compensate: false });
    let worst = 0;
    let apart = 0;
    for (const r of rows) {
      const e = kept.get(r.sampleIndex)!;
      expect(e, `reference scan at ${r.sampleIndex}`).toBeDefined();
      worst = Math.max(worst, boundExcess(r, e));
      apart = Math.max(apart, maxRel(r.conventionalPower!, plain.get(r.sampleIndex)!.conv));
    }
    expect(worst).toBeLessThanOrEqual(1);
    // Without the compensation the rows after the gap would differ (λ instead of λ^21 = 0.654).
    expect(apart).toBeGreaterThan(1e-3);
  });

  it('a re-plan a worker does not build in time, or refuses, changes nothing: the plan in force runs on with its covariance', async () => {
    const { g, blocks } = await scene();
    const rows: EngineRow[] = [];
    const p = params();
    engine = await Engine.create({ geometry: g, sampleRateHz: FS, params: p, workers: 2, speedOfSoundMps: 343.2, onRow: (r) => rows.push(r), shedding: false, planTimeoutMs: 4000 });
    for (const b of blocks.slice(0, 10)) await engine.pushAsync(b);
    await engine.drain();
    const wider = params({ grid: { azimuthDeg: { startDeg: 0, stopDeg: 359, stepDeg: 1 } } });
    engine.faultNextPlan(1, 'stall');
    const late = await engine.setParams(wider).catch((e: unknown) => e);
    expect(late).toBeInstanceOf(PlanError);
    expect(late).toMatchObject({ kind: 'timeout', message: 'grid: the bin workers did not build the plan within 4.0 s' });
    engine.faultNextPlan(0, 'refuse', 'no memory for the table');
    const refused = await engine.setParams(params({ bandHz: [400, 4000] })).catch((e: unknown) => e);
    expect(refused).toMatchObject({ kind: 'refused', message: 'bandHz: the bin workers could not build the plan: no memory for the table' });
    expect(engine.params).toEqual(p);
    for (const b of blocks.slice(10, 24)) await engine.pushAsync(b);
    await engine.drain();
    // Every row, before and after the failed re-plans, equals the single-thread reference over the
    // whole stream: the workers kept the plan in force and its covariance throughout.
    const ref = reference(g, blocks.slice(0, 24), p, new Set(rows.map((r) => r.sampleIndex)));
    // 24 000 samples at a row per 2 400: 10 rows.
    expect(rows.length).toBe(10);
    let worst = 0;
    for (const r of rows) {
      const e = ref.get(r.sampleIndex)!;
      expect(r.mvdrDb!.length).toBe(72);
      worst = Math.max(worst, boundExcess(r, e));
    }
    expect(worst).toBeLessThanOrEqual(1);
    // The next re-plan is built by both workers and taken.
    await engine.setParams(wider);
    const n = rows.length;
    for (const b of blocks.slice(24)) await engine.pushAsync(b);
    await engine.drain();
    expect(rows.length).toBeGreaterThan(n);
    expect(rows[rows.length - 1].mvdrDb!.length).toBe(360);
    expect((engine.status() as { workerRestarts: number }).workerRestarts).toBe(0);
  });

  it('a λ change applies from the next hop; band and grid changes re-plan', async () => {
    const { g, blocks } = await scene();
    const rows: EngineRow[] = [];
    engine = await Engine.create({ geometry: g, sampleRateHz: FS, params: params(), workers: 2, speedOfSoundMps: 343.2, onRow: (r) => rows.push(r), shedding: false });
    for (const b of blocks.slice(0, 16)) await engine.pushAsync(b);
    await engine.drain();
    await engine.setParams(params({ lambda: 0.5 }));
    expect(engine.params.lambda).toBe(0.5);
    await engine.setParams(params({ lambda: 0.5, grid: { azimuthDeg: { startDeg: 0, stopDeg: 359, stepDeg: 1 } } }));
    for (const b of blocks.slice(16)) await engine.pushAsync(b);
    await engine.drain();
    const lastRow = rows[rows.length - 1];
    expect(lastRow.mvdrDb!.length).toBe(360);
    expect(engine.grid.count).toBe(360);
    // A new FFT size re-plans the front end too; the stream keeps its clock and rows keep coming.
    const n = rows.length;
    await engine.setParams(params({ lambda: 0.5, fftSize: 1024, grid: { azimuthDeg: { startDeg: 0, stopDeg: 359, stepDeg: 1 } } }));
    expect(engine.hop).toBe(512);
    for (const b of blocks) await engine.pushAsync({ ...b, sampleIndex: b.sampleIndex + 40_000 });
    await engine.drain();
    expect(rows.length).toBeGreaterThan(n + 5);
    expect(rows[rows.length - 1].peaks.mvdr[0].azimuthDeg).toBeCloseTo(40, 0);
  });

  it('sheds load when the workers are over the threshold and recovers when the load goes', async () => {
    const { g, blocks } = await scene(16384); // 17 blocks (the last shorter), repeated
    const rows: EngineRow[] = [];
    // A real overload: one worker on the plain float64 kernels, 0.25° steps (1440 directions × 61
    // bins) at 50 rows/s is several times what one core can do (the fast kernels, single precision,
    // came close to keeping up on a quiet machine). The default thresholds; shorter windows to keep
    // the test short.
    const policy = { ...DEFAULT_SHED_POLICY, windowMs: 200, recoverWindows: 3 };
    const heavy = params({ spectrumRateHz: 50, bandHz: [300, 6000], grid: { azimuthDeg: { startDeg: 0, stopDeg: 359.75, stepDeg: 0.25 } } });
    engine = await Engine.create({ geometry: g, sampleRateHz: FS, params: heavy, workers: 1, speedOfSoundMps: 343.2, onRow: (r) => rows.push(r), shedPolicy: policy, fastKernels: false });
    // Real-time pace: 1000 samples every ~20.8 ms.
    const t0 = performance.now();
    let maxLoad = 0;
    const coarse = () => rows.some((r) => r.shedStep >= 3 && r.mvdrDb!.length === 720);
    // The scene repeats on a continuing clock, until a row on the coarser grid (step 3) has come
    // out, for at most 10 s of real time (a loaded machine takes longer to get there).
    for (let k = 0; !coarse() && performance.now() - t0 < 10_000; k++) {
      const due = t0 + ((k * 1000) / FS) * 1000;
      while (performance.now() < due) await new Promise((r) => setTimeout(r, 2));
      engine.push({ ...blocks[k % 16], sampleIndex: k * 1000 });
      maxLoad = Math.max(maxLoad, (engine.status() as any).load);
    }
    const peak = engine.shedStep;
    expect(peak).toBeGreaterThanOrEqual(1);
    const shedRows = rows.filter((r) => r.shedStep > 0);
    expect(shedRows.length).toBeGreaterThan(0);
    if (peak >= 3) expect(shedRows.some((r) => r.mvdrDb!.length === 720)).toBe(true); // grid twice as coarse
    expect(maxLoad).toBeGreaterThan(0.85); // it really was overloaded
    // No input: load falls to zero, the shedder steps back down to 0.
    const until = Date.now() + 10_000;
    while (engine.shedStep > 0 && Date.now() < until) await new Promise((r) => setTimeout(r, 50));
    expect(engine.shedStep).toBe(0);
    expect((engine.status() as any).shed.changes).toBeGreaterThanOrEqual(2 * peak);
  });

  it('streams beam audio on the input clock: the MVDR beam recovers the target under a 20 dB louder interferer', async () => {
    const g = await loadGeometry(`${ARRAYS}ring-24.json`);
    const frames = 131072;
    const target = { azimuthDeg: 60, rms: 0.05, loHz: 500, hiHz: 4000, seed: 21 };
    const scene = { sampleRateHz: FS, frames, speedOfSoundMps: 343.2, noiseSeed: 23 };
    const x = renderPlaneWaves({ ...scene, positions: g.positions, sources: [target, { azimuthDeg: 90, rms: 0.5, loHz: 500, hiHz: 4000, seed: 22 }], noiseRms: 0.0005 });
    // The clean target as it arrives at the array origin (same seed, one sensor at the origin).
    const s = renderPlaneWaves({ ...scene, positions: [[0, 0, 0]], sources: [target], noiseRms: 0 });
    const M = g.positions.length;
    const hops: { sampleIndex: number; data: Float32Array; frames: number }[] = [];
    engine = await Engine.create({ geometry: g, sampleRateHz: FS, params: params({ bandHz: [500, 4000], lambda: 0.99, loading: { mode: 'relative', ratio: 1e-4 } }), workers: 2, speedOfSoundMps: 343.2, onRow: () => {}, onBeamAudio: (h) => hops.push(h), shedding: false });
    engine.addBeam(60, 0, 'mvdr');
    const B = 960;
    for (let s0 = 0; s0 < frames; s0 += B) {
      const n = Math.min(B, frames - s0);
      const data = new Float32Array(M * n);
      for (let i = 0; i < n; i++) for (let c = 0; c < M; c++) data[c * n + i] = x[(s0 + i) * M + c];
      await engine.pushAsync({ streamId: 0, sampleIndex: s0, sampleRateHz: FS, channels: M, frames: n, data, gap: false, discontinuity: false });
    }
    await engine.drain();
    // Sample-exact and contiguous: one hop of audio per STFT hop, starting N − hop before the input.
    expect(hops[0].sampleIndex).toBe(-256);
    for (let k = 1; k < hops.length; k++) expect(hops[k].sampleIndex).toBe(hops[k - 1].sampleIndex + 256);
    expect(hops.length * 256).toBe(frames);
    // After convergence (from 1 s on, τ ≈ 0.53 s) the beam is the target: error well below the interferer (+20 dB).
    let e = 0;
    let p0 = 0;
    for (const h of hops) {
      for (let i = 0; i < h.frames; i++) {
        const t = h.sampleIndex + i;
        if (t < 48000 || t >= frames - 512) continue;
        e += (h.data[i] - s[t]) ** 2;
        p0 += s[t] ** 2;
      }
    }
    const errDb = 10 * Math.log10(e / p0);
    expect(errDb).toBeLessThan(-15);
    expect(engine.beams[0].wngDb).not.toBeNull();
  });
});
