/**
 * `npm run bench:capacity`: the capacity model of README "Large arrays", measured on this machine.
 *
 * One bin of MVDR + conventional processing costs, per second of signal,
 *   H·t_hop(M, D) + R·t_scan(M, D)      (H = hops/s = fs/(N/2), R = rows/s)
 * with t_hop = a·M² + c·M·D (covariance update; the conventional spectrum tracked per snapshot) and
 * t_scan = b·M²·D + e·M³ (loading and factoring R, then the MVDR scan over D directions). The
 * coefficients are fitted (least squares, relative) to single-thread timings of the same
 * BinProcessor the workers run, over M = 16…128 and D = 180…720. Cores for a whole array:
 *   cores = K·(H·t_hop + R·t_scan) / u,   K bins in the band, u the busy fraction allowed (0.7).
 * The model is then checked against the full engine with one bin-worker thread (its busy time per
 * second of signal; wall time in the thread, so run it on an otherwise idle machine) on two
 * configurations: W64 and a 96-microphone ring at W32's other settings.
 */
import { availableParallelism, cpus } from 'node:os';
import { BinProcessor, SCAN_CONVENTIONAL, SCAN_MVDR } from '../server/engine/bin-processor.ts';
import { directionGrid } from '../server/dsp/steering.ts';
import { Engine } from '../server/engine/engine.ts';
import type { ArrayGeometry } from '../shared/types.ts';
import { FFT, FS, geometryOf, paramsFor, ringGeometry, sceneBlocks, WORKLOADS } from './engine.ts';

const H = FS / (FFT / 2);
const BINS = 6;

function ring(m: number): [number, number, number][] {
  return ringGeometry(m).positions as [number, number, number][];
}

/** Single-thread seconds per bin: one hop (update + tracker) and one scan (MVDR + conventional). */
async function perBin(M: number, D: number): Promise<{ hopS: number; scanS: number }> {
  const grid = directionGrid({ azimuthDeg: { startDeg: 0, stopDeg: 360 - 360 / D, stepDeg: 360 / D } });
  const freqs = Float64Array.from({ length: BINS }, (_, k) => 1000 + 150 * k);
  const proc = await BinProcessor.create({ positions: ring(M), freqsHz: freqs, grid, speedOfSoundMps: 343.2, snapshotScale: 2 / FFT, fast: true });
  let seed = 1;
  const rnd = () => ((seed = (seed * 1103515245 + 12345) >>> 0) / 2 ** 32) - 0.5;
  const snaps = Array.from({ length: 8 }, () => Float64Array.from({ length: 2 * M * BINS }, rnd));
  const work = new Float64Array(2 * M * BINS);
  const hop = (i: number) => {
    work.set(snaps[i % 8]);
    proc.hop(work, 0.99);
  };
  for (let i = 0; i < 2 * M; i++) hop(i);
  const conv = new Float64Array(D);
  const mvdr = new Float64Array(D);
  const loading = { mode: 'relative' as const, ratio: 0.01 };
  for (let i = 0; i < 3; i++) proc.scan(SCAN_CONVENTIONAL | SCAN_MVDR, loading, conv, mvdr);
  // The least of repeated runs: the cost without interruptions (the machine is shared).
  const med = (xs: number[]) => Math.min(...xs);
  const hops: number[] = [];
  for (let r = 0; r < 9; r++) {
    const t0 = performance.now();
    for (let i = 0; i < 40; i++) hop(i);
    hops.push((performance.now() - t0) / 1000 / (40 * BINS));
  }
  const scans: number[] = [];
  for (let r = 0; r < 9; r++) {
    const t0 = performance.now();
    proc.scan(SCAN_CONVENTIONAL | SCAN_MVDR, loading, conv, mvdr);
    scans.push((performance.now() - t0) / 1000 / BINS);
  }
  return { hopS: med(hops), scanS: med(scans) };
}

/** Least squares of y ≈ p·x1 + q·x2, each point weighted 1/y (relative error). */
function fit2(rows: { x1: number; x2: number; y: number }[]): [number, number] {
  let a11 = 0, a12 = 0, a22 = 0, b1 = 0, b2 = 0;
  for (const { x1, x2, y } of rows) {
    const w = 1 / (y * y);
    a11 += w * x1 * x1;
    a12 += w * x1 * x2;
    a22 += w * x2 * x2;
    b1 += w * x1 * y;
    b2 += w * x2 * y;
  }
  const det = a11 * a22 - a12 * a12;
  return [(b1 * a22 - b2 * a12) / det, (a11 * b2 - a12 * b1) / det];
}

export interface CapacityModel {
  a: number;
  c: number;
  b: number;
  e: number;
}

export function workerCoreSeconds(m: CapacityModel, M: number, D: number, K: number, rowsPerS: number): number {
  return K * (H * (m.a * M * M + m.c * M * D) + rowsPerS * (m.b * M * M * D + m.e * M * M * M));
}

async function engineBusy(g: ArrayGeometry, w: (typeof WORKLOADS)[number], seconds: number): Promise<{ busyS: number; bins: number; D: number }> {
  const p = paramsFor(w);
  const blocks = sceneBlocks(g, seconds);
  const e = await Engine.create({ geometry: g, sampleRateHz: FS, params: p, workers: 1, speedOfSoundMps: 343.2, shedding: false, onRow: () => {} });
  try {
    for (const b of blocks) await e.pushAsync(b);
    await e.drain(120_000);
    const st = e.status() as { perWorker: { busyMs: number }[]; bins: number; directions: number };
    return { busyS: st.perWorker.reduce((s, x) => s + x.busyMs, 0) / 1000 / seconds, bins: st.bins, D: st.directions };
  } finally {
    await e.close();
  }
}

const json = process.argv.includes('--json');
const say = (s: string) => !json && console.log(s);
say(`capacity model on this machine: ${availableParallelism()} cores, ${cpus()[0]?.model ?? 'unknown CPU'}`);
const points: { M: number; D: number; hopS: number; scanS: number }[] = [];
for (const M of [16, 32, 64, 128]) {
  for (const D of [180, 360, 720]) {
    const t = await perBin(M, D);
    points.push({ M, D, ...t });
    say(`  M ${String(M).padStart(3)}, D ${String(D).padStart(3)}: hop ${(t.hopS * 1e6).toFixed(2)} µs/bin, scan ${(t.scanS * 1e6).toFixed(1)} µs/bin`);
  }
}
const [a, c] = fit2(points.map((p) => ({ x1: p.M * p.M, x2: p.M * p.D, y: p.hopS })));
const [b, e] = fit2(points.map((p) => ({ x1: p.M * p.M * p.D, x2: p.M ** 3, y: p.scanS })));
const model: CapacityModel = { a, c, b, e };
let worst = 0;
for (const p of points) {
  worst = Math.max(worst, Math.abs(H * (a * p.M ** 2 + c * p.M * p.D) + 10 * (b * p.M ** 2 * p.D + e * p.M ** 3) - (H * p.hopS + 10 * p.scanS)) / (H * p.hopS + 10 * p.scanS));
}
say(`  fit: t_hop = ${(a * 1e9).toFixed(3)} ns·M² + ${(c * 1e9).toFixed(4)} ns·M·D;  t_scan = ${(b * 1e9).toFixed(4)} ns·M²·D + ${(e * 1e9).toFixed(3)} ns·M³  (worst point off by ${(100 * worst).toFixed(0)} % at 10 rows/s)`);

const checks: { name: string; M: number; predicted: number; measured: number }[] = [];
const w64 = WORKLOADS.find((w) => w.name === 'W64')!;
const w32 = WORKLOADS.find((w) => w.name === 'W32')!;
for (const [name, g, w] of [
  ['W64 (8×8 grid, 360 directions, 10 rows/s)', await geometryOf(w64), w64],
  ['ring of 96 at W32 settings (360 directions, 20 rows/s)', ringGeometry(96), w32],
] as const) {
  const m = await engineBusy(g, w, 4);
  const predicted = workerCoreSeconds(model, g.positions.length, m.D, m.bins, w.spectrumRateHz);
  checks.push({ name, M: g.positions.length, predicted, measured: m.busyS });
  say(`  check, ${name}: model ${predicted.toFixed(2)} core-s/s, engine's workers busy ${m.busyS.toFixed(2)} core-s/s (${((100 * (predicted - m.busyS)) / m.busyS).toFixed(0)} %)`);
}

say('\n  cores needed (workers busy ≤ 70 %), 61 bins (300–6000 Hz at N = 512):');
const table: { M: number; D: number; rows: number; cores: number }[] = [];
for (const [D, rows] of [[360, 20], [360, 10], [1368, 10]] as const) {
  const line = [64, 128, 256, 512, 1024].map((M) => {
    const cores = workerCoreSeconds(model, M, D, 61, rows) / 0.7;
    table.push({ M, D, rows, cores });
    return `M ${M}: ${cores < 10 ? cores.toFixed(1) : cores.toFixed(0)}`;
  });
  say(`  D ${D}, ${rows} rows/s → ${line.join(', ')}`);
}
if (json) console.log(JSON.stringify({ cpu: cpus()[0]?.model, model, points, checks, table }, null, 1));
