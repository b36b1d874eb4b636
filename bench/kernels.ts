/**
 * Per-bin spectrum kernels on the W32 workload of ../shared/DESIGN.md §4 (32-mic ring, radius
 * 0.2 m, config/arrays/ring-32.json; fs 48 kHz, N = 512, hop 256 → 187.5 snapshots/s; band
 * 300–6000 Hz = 61 bins; azimuth 0–359° in 1° steps = 360 directions; MVDR spectrum at 20 Hz):
 *  1. the MVDR inner loop per bin: plain HermitianSolver.invQuadForms vs the batched kernels of
 *     server/dsp/fast (JavaScript and WebAssembly SIMD, block sizes K), in µs per bin and GFLOP/s
 *     counting 4M² flops per direction (M(M+1)/2 complex multiply–adds ≈ 4M² real flops);
 *  2. one full MVDR spectrum update (61 bins: gather, loading, factor, scan): SpectrumScanner vs
 *     FastMvdrScanner, and the per-second cost at 20 Hz;
 *  3. the conventional spectrum: plain scan per update (×20/s), per row from the covariance in
 *     single precision, vs ConventionalTracker per snapshot (×187.5/s), so the engine can pick the
 *     cheaper per second of signal.
 * The single-precision paths (f32x4: forward substitution blocked over 8 directions for MVDR, the
 * tracker's inner products) are timed beside the float64 ones, with their largest relative error
 * against float64 on this covariance.
 * Run: `npx tsx bench/kernels.ts` (add `--numpy` for a numpy reference of the same per-bin form;
 * needs python3 with numpy; `--workload W64` or `W32-2D` for that workload's array and grid).
 * Prints medians (min in parentheses) of repeated runs.
 */
import { spawnSync } from 'node:child_process';
import { loadGeometry } from '../server/config/array-file.ts';
import { PROJECT_CONFIG_DIR } from '../server/config/load.ts';
import { CovarianceBank } from '../server/dsp/covariance.ts';
import { ConventionalTracker, trackerF32Bound } from '../server/dsp/fast/conventional-tracker.ts';
import { InverseCholesky } from '../server/dsp/fast/inverse-factor.ts';
import { mvdrBlocksK2, mvdrBlocksK4 } from '../server/dsp/fast/mvdr-kernels-js.ts';
import { FastMvdrScanner } from '../server/dsp/fast/mvdr-scan.ts';
import { PairedCholesky } from '../server/dsp/fast/wasm-cholesky.ts';
import { fillPlanar, planarLayout } from '../server/dsp/fast/planar-steering.ts';
import { instantiateKernels, WASM_BLOCK_SIZES } from '../server/dsp/fast/wasm-kernels.ts';
import { HermitianSolver } from '../server/dsp/hermitian.ts';
import { SpectrumScanner } from '../server/dsp/spectrum.ts';
import { directionGrid, SteeringTable } from '../server/dsp/steering.ts';
import { WORKLOADS } from './engine.ts';
import { time, type Timing } from './util.ts';

const FS_HZ = 48000;
const N = 512;
const HOP = N / 2;
const SNAPSHOTS_PER_S = FS_HZ / HOP;
const RUNS = 15;

const wIdx = process.argv.indexOf('--workload');
const workload = WORKLOADS.find((w) => w.name === (wIdx > 0 ? process.argv[wIdx + 1] : 'W32'));
if (!workload) throw new Error(`unknown workload; known: ${WORKLOADS.map((w) => w.name).join(', ')}`);
const SPECTRUM_HZ = workload.spectrumRateHz;
const geometry = await loadGeometry(`${PROJECT_CONFIG_DIR}/arrays/${workload.array}`);
const M = geometry.positions.length;
const startBin = Math.ceil((300 * N) / FS_HZ);
const stopBin = Math.floor((6000 * N) / FS_HZ);
const B = stopBin - startBin + 1;
const freqs = Float64Array.from({ length: B }, (_, i) => ((startBin + i) * FS_HZ) / N);
const grid = directionGrid(workload.grid);
const D = grid.count;
const table = new SteeringTable({ positions: geometry.positions, grid, freqsHz: freqs, speedOfSoundMps: 343.2 });

// Covariance from 4M hops of white noise: well conditioned, like the bench of bench/dsp.ts.
let seed = 1;
const rnd = () => ((seed = (seed * 1103515245 + 12345) >>> 0) / 2 ** 32) - 0.5;
const bank = new CovarianceBank(M, B);
const snap = new Float64Array(2 * M * B);
for (let k = 0; k < 4 * M; k++) {
  for (let i = 0; i < snap.length; i++) snap[i] = rnd();
  bank.update(snap, 0.99);
}
const loadingRatio = 0.01;

const fmt = (t: Timing, scale: number, digits = 1) => `${(t.medianS * scale).toFixed(digits)} (${(t.minS * scale).toFixed(digits)})`;
const flopsPerBin = 4 * M * M * D;
const gflops = (perBinS: number) => (flopsPerBin / perBinS / 1e9).toFixed(2);

console.log(`${workload.name}: M = ${M}, ${B} bins, D = ${D}, ${SNAPSHOTS_PER_S} snapshots/s, MVDR spectrum at ${SPECTRUM_HZ} Hz`);
console.log(`medians of ${RUNS} runs (min in parentheses)\n`);

// ---- 1. per-bin inner loop --------------------------------------------------------------------
// Every variant sweeps all 61 bins (factors prepared outside the timed loop), so each sees the
// real steering table working set (11 MB), not one cache-resident bin.
const sub = new Float64Array(2 * M * M);
const solvers: HermitianSolver[] = [];
const inverses: Float64Array[] = [];
for (let b = 0; b < B; b++) {
  bank.gather(b, sub);
  let trace = 0;
  for (let i = 0; i < M; i++) trace += sub[(i * M + i) * 2];
  const delta = (loadingRatio * trace) / M;
  const s = new HermitianSolver(M);
  s.factor(sub, 0, delta);
  solvers.push(s);
  const inv = new InverseCholesky(M);
  inv.factor(sub, 0, delta);
  inverses.push(Float64Array.from(inv.inverse));
}
const q = new Float64Array(D + 8);
const rows = new Int32Array(M);
console.log(`1. MVDR inner loop, per bin (${D} directions, M = ${M})      µs/bin          GFLOP/s  vs plain`);
const perBin: [string, number][] = [];
const report = (name: string, t: Timing) => {
  const us = (t.medianS / B) * 1e6;
  perBin.push([name, us]);
  const ratio = perBin[0][1] / us;
  console.log(`   ${name.padEnd(52)} ${fmt(t, 1e6 / B).padEnd(16)} ${gflops(t.medianS / B).padStart(7)}  ${ratio.toFixed(2)}×`);
};
report('plain HermitianSolver.invQuadForms (interleaved)', time(() => {
  for (let b = 0; b < B; b++) solvers[b].invQuadForms(q, table.data, table.offset(b, 0), D);
}, RUNS));
for (const k of [2, 4] as const) {
  const layout = planarLayout(table, 0, B, k);
  const planar = new Float64Array(B * layout.binStride);
  fillPlanar(planar, 0, table, layout);
  for (let j = 0; j < M; j++) rows[j] = j * 2 * k;
  const fn = k === 2 ? mvdrBlocksK2 : mvdrBlocksK4;
  report(`JS W = L⁻¹, block-planar, K = ${k}`, time(() => {
    for (let b = 0; b < B; b++) fn(q, inverses[b], rows, M, planar, b * layout.binStride, layout.blocks, layout.blockStride);
  }, RUNS));
}
for (const k of WASM_BLOCK_SIZES) {
  const layout = planarLayout(table, 0, B, k);
  const wBytes = 8 * M * (M + 1);
  const rowsPtr = wBytes;
  const qPtr = rowsPtr + 16 * Math.ceil((4 * M) / 16);
  const wAll = qPtr + 8 * layout.blocks * k; // all 61 factors resident, so no copy is timed here
  const vPtr = wAll + B * wBytes;
  const exp = await instantiateKernels(k, vPtr + 8 * B * layout.binStride);
  const f64 = new Float64Array(exp.memory.buffer);
  const i32 = new Int32Array(exp.memory.buffer);
  fillPlanar(f64, vPtr / 8, table, layout);
  for (let j = 0; j < M; j++) i32[rowsPtr / 4 + j] = j * 16 * k;
  for (let b = 0; b < B; b++) f64.set(inverses[b], (wAll + b * wBytes) / 8);
  report(`WASM SIMD f64x2 (2 directions/lane pair), K = ${k}`, time(() => {
    for (let b = 0; b < B; b++) exp.mvdr(wAll + b * wBytes, rowsPtr, M, vPtr + 8 * b * layout.binStride, layout.blocks, 8 * layout.blockStride, qPtr);
  }, RUNS));
}
const tInv = time(() => {
  const inv = new InverseCholesky(M);
  for (let b = 0; b < B; b++) inv.factor(bank.data, bank.matrixOffset(b), 1);
}, RUNS);
const tFactor = time(() => {
  for (let b = 0; b < B; b++) solvers[0].factor(bank.data, bank.matrixOffset(b), 1);
}, RUNS);
console.log(`   (per bin, not included above: HermitianSolver.factor ${fmt(tFactor, 1e6 / B)} µs; ` +
  `InverseCholesky.factor (factor + L⁻¹) ${fmt(tInv, 1e6 / B)} µs)`);

if (process.argv.includes('--numpy')) {
  // The same per-bin form in numpy (einsum over an explicit inverse), OpenBLAS with its own defaults.
  const env = { ...process.env };
  delete env.OPENBLAS_CORETYPE;
  delete env.OPENBLAS_L2_SIZE;
  const py = `
import numpy as np, timeit
rng = np.random.default_rng(1)
M, D = ${M}, ${D}
X = rng.standard_normal((M, 4*M)) + 1j*rng.standard_normal((M, 4*M))
R = X @ X.conj().T / (4*M) + 0.01*np.eye(M)
V = np.exp(1j*rng.uniform(0, 2*np.pi, (D, M)))
f1 = lambda: np.einsum('dm,mn,dn->d', V.conj(), np.linalg.inv(R), V).real
f2 = lambda: np.einsum('dm,dm->d', V.conj(), V @ np.linalg.inv(R).T).real
for name, f in (('einsum dm,mn,dn->d with inv(R)', f1), ('inv + matmul + row dot', f2)):
    t = timeit.repeat(f, number=200, repeat=7)
    print(f'   numpy {name:45s} {min(t)/200*1e6:8.1f} µs/bin (min of 7×200)')
`;
  const r = spawnSync('python3', ['-c', py], { env, encoding: 'utf8' });
  console.log(r.status === 0 ? r.stdout.trimEnd() : `   numpy reference failed: ${r.stderr.trim().split('\n').pop()}`);
}

// ---- 2. full MVDR update ----------------------------------------------------------------------
console.log(`\n2. full ${workload.name} MVDR update (${B} bins: gather, loading, factor, scan)   ms/update     ms per s at ${SPECTRUM_HZ} Hz`);
const loading = { mode: 'relative', ratio: loadingRatio } as const;
const plainScanner = new SpectrumScanner(table);
const out = new Float64Array(B * D);
const tPlain = time(() => plainScanner.scan(bank, { loading }, { conventional: null, mvdr: out }), RUNS);
const perS = (t: Timing, rate: number) => (t.medianS * rate * 1e3).toFixed(0);
console.log(`   ${'plain SpectrumScanner'.padEnd(58)} ${fmt(tPlain, 1e3, 2).padEnd(14)} ${perS(tPlain, SPECTRUM_HZ)}`);
const fastVariants: [string, FastMvdrScanner][] = [
  ['FastMvdrScanner wasm K = 4 (default)', await FastMvdrScanner.create(table)],
  ['FastMvdrScanner wasm K = 2', await FastMvdrScanner.create(table, 0, B, { blockSize: 2 })],
  ['FastMvdrScanner js K = 2', FastMvdrScanner.createJs(table, 0, B, 2)],
];
for (const k of [4, 8, 12]) {
  fastVariants.push([`FastMvdrScanner wasm f32 forward subst., K = ${k}${k === 8 ? ' (default)' : ''}`, await FastMvdrScanner.create(table, 0, B, { precision: 'f32', blockSizeF32: k })]);
}
const ref64 = new Float64Array(B * D);
fastVariants[0][1].scan(bank, loading, ref64);
for (const [name, s] of fastVariants) {
  const t = time(() => s.scan(bank, loading, out), RUNS);
  let err = 0;
  for (let i = 0; i < out.length; i++) err = Math.max(err, Math.abs(out[i] - ref64[i]) / ref64[i]);
  const errNote = s.precision === 'f32' ? `, max rel. error vs float64 ${err.toExponential(1)}` : '';
  console.log(`   ${name.padEnd(58)} ${fmt(t, 1e3, 2).padEnd(14)} ${perS(t, SPECTRUM_HZ)}   (${(tPlain.medianS / t.medianS).toFixed(2)}× plain${errNote})`);
}
const tFactorOnly = time(() => {
  const inv = new InverseCholesky(M);
  for (let b = 0; b < B; b++) inv.factor(bank.data, bank.matrixOffset(b), 1, false);
}, RUNS);
const paired = await PairedCholesky.create(M);
const subA = new Float64Array(2 * M * M);
const subB = new Float64Array(2 * M * M);
const tPaired = time(() => {
  for (let b = 0; b + 1 < B; b += 2) {
    bank.gather(b, subA);
    bank.gather(b + 1, subB);
    paired.load(0, subA, M, 1);
    paired.load(1, subB, M, 1);
    paired.run(M);
  }
}, RUNS);
console.log(`   (all ${B} bins' factors: Cholesky in JavaScript ${fmt(tFactorOnly, 1e3, 2)} ms, two bins per SIMD lane pair as the f32 path runs it ` +
  `${fmt(tPaired, 1e3, 2)} ms (${B - (B % 2)} bins, gathers included); with L⁻¹ as the float64 path ${fmt(tInv, 1e3, 2)} ms)`);

// ---- 3. conventional --------------------------------------------------------------------------
console.log(`\n3. conventional spectrum, all ${B} bins                               ms each       ms per s of signal`);
const tConv = time(() => plainScanner.scan(bank, { loading }, { conventional: out, mvdr: null }), RUNS);
console.log(`   ${`plain scan (quadForm) per update, ×${SPECTRUM_HZ}/s`.padEnd(58)} ${fmt(tConv, 1e3, 2).padEnd(14)} ${perS(tConv, SPECTRUM_HZ)}`);
{
  const s32 = await FastMvdrScanner.create(table, 0, B, { precision: 'f32' });
  const tRow = time(() => s32.conventional(bank, out), RUNS);
  console.log(`   ${`per row from the covariance, f32x4 quad (FastMvdrScanner.conventional), ×${SPECTRUM_HZ}/s`.padEnd(58)} ${fmt(tRow, 1e3, 2).padEnd(14)} ${perS(tRow, SPECTRUM_HZ)}`);
}
const hops = 40;
const snaps = Array.from({ length: 4 }, () => Float64Array.from({ length: 2 * M * B }, rnd));
const trackers = [
  ['ConventionalTracker js, per snapshot, ×187.5/s', new ConventionalTracker(table)],
  ['ConventionalTracker wasm, per snapshot, ×187.5/s', await ConventionalTracker.create(table)],
  ['ConventionalTracker wasm f32, per snapshot, ×187.5/s', await ConventionalTracker.create(table, 0, B, 'f32')],
] as const;
for (const [name, tr] of trackers) {
  const t = time(() => {
    for (let k = 0; k < hops; k++) tr.update(snaps[k & 3], 0.99);
  }, RUNS);
  const each: Timing = { medianS: t.medianS / hops, minS: t.minS / hops, runs: t.runs };
  console.log(`   ${name.padEnd(58)} ${fmt(each, 1e3, 3).padEnd(14)} ${perS(each, SNAPSHOTS_PER_S)}`);
}
{
  // Same snapshots into the float64 and float32 trackers: the largest error in units of the mean
  // sensor power tr(R)/M (the unit of conventional-tracker.ts's bound).
  const [a, b] = [await ConventionalTracker.create(table), await ConventionalTracker.create(table, 0, B, 'f32')];
  let power = 0;
  for (let k = 0; k < 50; k++) {
    a.update(snaps[k & 3], 0.99);
    b.update(snaps[k & 3], 0.99);
  }
  for (const s of snaps) for (const x of s) power += x * x;
  power /= snaps.length * M * B;
  let err = 0;
  for (let i = 0; i < a.power.length; i++) err = Math.max(err, Math.abs(a.power[i] - b.power[i]));
  console.log(`   (f32 tracker after 50 snapshots: max |error| ${(err / power).toExponential(1)} of the mean sensor power; bound ${trackerF32Bound(M).toExponential(1)})`);
}
const seeder = new ConventionalTracker(table);
const tSeed = time(() => seeder.seedFrom(bank, 0.5), 5);
console.log(`   ${'ConventionalTracker.seedFrom (after a mask change; once)'.padEnd(58)} ${fmt(tSeed, 1e3, 2)}`);
