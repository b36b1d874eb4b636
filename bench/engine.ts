/**
 * The full live engine on the standard workloads of ../shared/DESIGN.md §4, offline and as fast as
 * it goes (rtf, cpu_rtf, pooled spectrum-update time), then paced in real time (row latency), plus
 * the largest ring array that still runs in real time at W32's other settings.
 */
import { loadGeometry } from '../server/config/array-file.ts';
import { PROJECT_CONFIG_DIR } from '../server/config/load.ts';
import { Engine, type EngineRow } from '../server/engine/engine.ts';
import type { ProcessingParams } from '../server/engine/params.ts';
import { SceneSimulator } from '../server/ingest/simulator.ts';
import type { ArrayGeometry, Block } from '../shared/types.ts';

export const FS = 48000;
export const FFT = 512;

export interface Workload {
  name: string;
  array: string;
  grid: ProcessingParams['grid'];
  spectrumRateHz: number;
  /** Steered beams of DESIGN.md §4 (beams arrive with the recording work; not run here yet). */
  beams: number;
}

export const WORKLOADS: Workload[] = [
  { name: 'W8', array: 'line-8.json', grid: { azimuthDeg: { startDeg: 0, stopDeg: 180, stepDeg: 1 } }, spectrumRateHz: 20, beams: 1 },
  { name: 'W32', array: 'ring-32.json', grid: { azimuthDeg: { startDeg: 0, stopDeg: 359, stepDeg: 1 } }, spectrumRateHz: 20, beams: 2 },
  { name: 'W64', array: 'grid-8x8.json', grid: { azimuthDeg: { startDeg: 0, stopDeg: 359, stepDeg: 1 } }, spectrumRateHz: 10, beams: 4 },
  {
    name: 'W32-2D',
    array: 'rings-32.json',
    grid: { azimuthDeg: { startDeg: 0, stopDeg: 355, stepDeg: 5 }, elevationDeg: { startDeg: 0, stopDeg: 90, stepDeg: 5 } },
    spectrumRateHz: 10,
    beams: 2,
  },
];

export function paramsFor(w: Workload): ProcessingParams {
  return { lambda: 0.99, loading: { mode: 'relative', ratio: 0.01 }, bandHz: [300, 6000], grid: w.grid, methods: ['mvdr', 'conventional'], spectrumRateHz: w.spectrumRateHz, normalise: false, fftSize: FFT };
}

/** A ring of M sensors, radius 0.2 m (W32's geometry with another count). */
export function ringGeometry(m: number): ArrayGeometry {
  return { name: `ring-${m}`, positions: Array.from({ length: m }, (_, i) => [0.2 * Math.cos((2 * Math.PI * i) / m), 0.2 * Math.sin((2 * Math.PI * i) / m), 0] as [number, number, number]) };
}

/**
 * The built-in scene heard by `geometry`: blocks of 480 samples (10 ms), as live ingest delivers.
 * At most `uniqueS` seconds are generated and then repeated on a continuing clock, so the signal
 * held by the benchmark does not dominate the process's memory (peak RSS is the engine's).
 */
export function sceneBlocks(geometry: ArrayGeometry, seconds: number, uniqueS = 2): Block[] {
  const sim = new SceneSimulator({ geometry, sampleRateHz: FS, blockFrames: 480, seed: 7 });
  const n = Math.round((seconds * FS) / 480);
  const u = Math.min(n, Math.round((uniqueS * FS) / 480));
  const unique = Array.from({ length: u }, () => sim.next());
  return Array.from({ length: n }, (_, k) => ({ ...unique[k % u], sampleIndex: k * 480 }));
}

export interface EngineRun {
  seconds: number;
  wallS: number;
  cpuS: number;
  rows: number;
  scanMsP50: number;
  shedStep: number;
  hopsSkipped: number;
  status: Record<string, unknown>;
}

export async function runOffline(geometry: ArrayGeometry, params: ProcessingParams, blocks: Block[], workers: number): Promise<EngineRun> {
  const rows: EngineRow[] = [];
  const engine = await Engine.create({ geometry, sampleRateHz: FS, params, workers, speedOfSoundMps: 343.2, onRow: (r) => rows.push(r), shedding: false });
  try {
    // Warm-up second (JIT, worker start) not counted.
    const warm = Math.min(100, Math.floor(blocks.length / 4));
    for (const b of blocks.slice(0, warm)) await engine.pushAsync(b);
    await engine.drain();
    engine.clearTimings();
    const timed = blocks.slice(warm);
    const c0 = process.cpuUsage();
    const t0 = performance.now();
    for (const b of timed) await engine.pushAsync(b);
    await engine.drain();
    const wallS = (performance.now() - t0) / 1000;
    const c = process.cpuUsage(c0);
    const seconds = timed.reduce((n, b) => n + b.frames, 0) / FS;
    return { seconds, wallS, cpuS: (c.user + c.system) / 1e6, rows: rows.length, scanMsP50: engine.scanPercentiles().p50, shedStep: engine.shedStep, hopsSkipped: engine.hopsSkipped, status: engine.status() };
  } finally {
    await engine.close();
  }
}

/** Real-time paced run: blocks handed over on the wall clock, as from a live source. */
export async function runPaced(geometry: ArrayGeometry, params: ProcessingParams, blocks: Block[], workers: number): Promise<{ p50: number; p99: number; rows: number; shedStep: number; hopsSkipped: number }> {
  const engine = await Engine.create({ geometry, sampleRateHz: FS, params, workers, speedOfSoundMps: 343.2, onRow: () => {} });
  try {
    const warm = Math.min(100, Math.floor(blocks.length / 4));
    for (const b of blocks.slice(0, warm)) await engine.pushAsync(b);
    await engine.drain();
    engine.clearTimings();
    const t0 = performance.now();
    const s0 = blocks[warm].sampleIndex;
    for (const b of blocks.slice(warm)) {
      const due = t0 + ((b.sampleIndex - s0) / FS) * 1000;
      let wait = due - performance.now();
      while (wait > 0) {
        await new Promise((r) => setTimeout(r, Math.min(wait, 5)));
        wait = due - performance.now();
      }
      engine.push(b);
    }
    await engine.drain();
    const l = engine.latencyPercentiles();
    return { p50: l.p50, p99: l.p99, rows: l.count, shedStep: engine.shedStep, hopsSkipped: engine.hopsSkipped };
  } finally {
    await engine.close();
  }
}

export async function geometryOf(w: Workload): Promise<ArrayGeometry> {
  return loadGeometry(`${PROJECT_CONFIG_DIR}/arrays/${w.array}`);
}

/** Largest M (ring, W32's other settings) with rtf < 1 offline, by doubling then bisection to `stepM`. */
export async function maxRealtimeMics(workers: number, seconds = 2, stepM = 8): Promise<{ mics: number; trials: { m: number; rtf: number }[] }> {
  const w = WORKLOADS[1];
  const trials: { m: number; rtf: number }[] = [];
  const ok = async (m: number) => {
    const g = ringGeometry(m);
    const r = await runOffline(g, paramsFor(w), sceneBlocks(g, seconds + 0.5), workers);
    const rtf = r.wallS / r.seconds;
    trials.push({ m, rtf });
    return rtf < 1;
  };
  let lo = 32;
  if (!(await ok(lo))) return { mics: 0, trials };
  let hi = 64;
  while (await ok(hi)) {
    lo = hi;
    hi *= 2;
    if (hi > 1024) return { mics: lo, trials };
  }
  while (hi - lo > stepM) {
    const mid = Math.round((lo + hi) / 2 / stepM) * stepM;
    if (mid <= lo || mid >= hi) break;
    if (await ok(mid)) lo = mid;
    else hi = mid;
  }
  return { mics: lo, trials };
}
