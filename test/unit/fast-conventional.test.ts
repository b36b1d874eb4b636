/**
 * ConventionalTracker (server/dsp/fast/conventional-tracker.ts) against the plain path:
 * SpectrumScanner's conventional output vᴴRv/M² from a CovarianceBank fed the same snapshots
 * (the recursion of covariance.ts, including its bias-corrected weight and a λ change midway),
 * with masks (re-seeded from the bank), reset, and seeding a fresh tracker from a bank with history.
 * Both backends (plain JavaScript and WebAssembly SIMD). Tolerance 1e-9 relative (float64).
 */
import { describe, expect, it } from 'vitest';
import { CovarianceBank } from '../../server/dsp/covariance.ts';
import { ConventionalTracker, recursionWeightSum } from '../../server/dsp/fast/conventional-tracker.ts';
import { SpectrumScanner } from '../../server/dsp/spectrum.ts';
import { SteeringTable, directionGrid } from '../../server/dsp/steering.ts';
import { TestRandom } from '../helpers/random.ts';

const C = 343.2;

function setup(seed: number, m: number, directions: number, freqs: number[]) {
  const rng = new TestRandom(seed);
  const positions = Array.from({ length: m }, () => [0.3 * rng.uniform(), 0.3 * rng.uniform(), 0.05 * rng.uniform()] as [number, number, number]);
  const grid = directionGrid({ azimuthDeg: { startDeg: 0, stopDeg: 360 - 360 / directions, stepDeg: 360 / directions } });
  const table = (f: number[]) => new SteeringTable({ positions, grid, freqsHz: f, speedOfSoundMps: C });
  return { rng, table, grid };
}

function plainConventional(table: SteeringTable, bank: CovarianceBank): Float64Array {
  const out = new Float64Array(table.bins * table.directions);
  new SpectrumScanner(table).scan(bank, { loading: { mode: 'fixed', delta: 0 } }, { conventional: out, mvdr: null });
  return out;
}

function maxRelativeError(a: Float64Array, b: Float64Array): number {
  let e = 0;
  for (let i = 0; i < b.length; i++) e = Math.max(e, Math.abs(a[i] - b[i]) / Math.abs(b[i]));
  return e;
}

const make = async (backend: 'js' | 'wasm', table: SteeringTable, start: number, count: number) =>
  backend === 'js' ? new ConventionalTracker(table, start, count) : await ConventionalTracker.create(table, start, count);

describe.each(['js', 'wasm'] as const)('ConventionalTracker (%s)', (backend) => {
  it.each([
    [1, 5, 2, 0],
    [4, 9, 3, 1],
    [13, 37, 2, 2],
    [32, 360, 2, 1],
  ])('equals the plain scan of the bank: M = %i, D = %i, %i bins from bin %i, λ changed midway', async (m, d, bins, start) => {
    const freqs = [350, 1200, 2700, 4100, 5800];
    const { rng, table } = setup(10 * m + d, m, d, freqs);
    const tracker = await make(backend, table(freqs), start, bins);
    expect(tracker.backend).toBe(backend);
    const bank = new CovarianceBank(m, bins);
    const plainTable = table(freqs.slice(start, start + bins));
    const snap = new Float64Array(2 * m * bins);
    for (let k = 0; k < 40; k++) {
      const lambda = k < 17 ? 0.9 : 0.97;
      rng.complexGaussian(snap, 1 + k % 3);
      bank.update(snap, lambda);
      tracker.update(snap, lambda);
      if (k === 0 || k === 16 || k === 39) {
        expect(maxRelativeError(tracker.power, plainConventional(plainTable, bank))).toBeLessThan(1e-9);
      }
    }
    expect(tracker.updates).toBe(40);
    expect(tracker.weightSum).toBeGreaterThan(0);
    expect(tracker.consistent).toBe(true);
  });

  it('masks: inconsistent after setMask, re-seeded from the bank, then tracks the masked spectrum', async () => {
    const m = 12;
    const d = 30;
    const freqs = [900, 2100, 3300];
    const { rng, table } = setup(3, m, d, freqs);
    const t = table(freqs);
    const tracker = await make(backend, t, 0, 3);
    const bank = new CovarianceBank(m, 3);
    const snap = new Float64Array(2 * m * 3);
    const feed = (n: number, lambda: number) => {
      for (let k = 0; k < n; k++) {
        rng.complexGaussian(snap);
        bank.update(snap, lambda);
        tracker.update(snap, lambda);
      }
    };
    feed(10, 0.95);
    for (const masked of [[2, 7], [0], [1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11], []]) {
      const mask = Array.from({ length: m }, (_, i) => !masked.includes(i));
      bank.setMask(mask);
      tracker.setMask(mask);
      expect(tracker.consistent).toBe(false); // every step changes the mask
      tracker.seedFrom(bank);
      expect(tracker.consistent).toBe(true);
      expect(Array.from(tracker.activeChannels)).toEqual(Array.from(bank.activeChannels));
      expect(maxRelativeError(tracker.power, plainConventional(t, bank))).toBeLessThan(1e-9);
      feed(6, 0.9);
      expect(maxRelativeError(tracker.power, plainConventional(t, bank))).toBeLessThan(1e-9);
    }
  });

  it('reset restarts the recursion like the bank (first snapshot weight 1)', async () => {
    const m = 5;
    const freqs = [1000, 2000];
    const { rng, table } = setup(4, m, 11, freqs);
    const t = table(freqs);
    const tracker = await make(backend, t, 0, 2);
    const bank = new CovarianceBank(m, 2);
    const snap = new Float64Array(2 * m * 2);
    for (let k = 0; k < 5; k++) {
      rng.complexGaussian(snap);
      bank.update(snap, 0.8);
      tracker.update(snap, 0.8);
    }
    tracker.reset();
    bank.reset();
    expect(tracker.updates).toBe(0);
    expect(tracker.weightSum).toBe(0);
    expect(tracker.power.every((p) => p === 0)).toBe(true);
    for (let k = 0; k < 3; k++) {
      rng.complexGaussian(snap);
      bank.update(snap, 0.99);
      tracker.update(snap, 0.99);
    }
    expect(maxRelativeError(tracker.power, plainConventional(t, bank))).toBeLessThan(1e-9);
  });

  it('a fresh tracker seeded from a bank with history needs the weight state, then tracks it', async () => {
    const m = 7;
    const freqs = [600, 1800, 3000];
    const { rng, table } = setup(8, m, 19, freqs);
    const t = table(freqs);
    const bank = new CovarianceBank(m, 3);
    const snap = new Float64Array(2 * m * 3);
    for (let k = 0; k < 12; k++) bank.update(rng.complexGaussian(snap), 0.9);
    const tracker = await make(backend, t, 0, 3);
    expect(() => tracker.seedFrom(bank)).toThrow(/weightSum/);
    tracker.seedFrom(bank, recursionWeightSum(0.9, bank.updates));
    expect(tracker.updates).toBe(12);
    for (let k = 0; k < 4; k++) {
      rng.complexGaussian(snap);
      bank.update(snap, 0.9);
      tracker.update(snap, 0.9);
    }
    expect(maxRelativeError(tracker.power, plainConventional(t, bank))).toBeLessThan(1e-9);
  });

  it('validates inputs before changing anything', async () => {
    const { table } = setup(1, 4, 6, [1000, 2000]);
    const t = table([1000, 2000]);
    const tracker = await make(backend, t, 0, 2);
    expect(() => tracker.update(new Float64Array(15), 0.9)).toThrow(RangeError);
    const bad = new Float64Array(16);
    bad[9] = Number.NaN;
    expect(() => tracker.update(bad, 0.9)).toThrow(/not finite/);
    expect(() => tracker.update(new Float64Array(16), 1)).toThrow(RangeError);
    expect(tracker.updates).toBe(0);
    expect(() => tracker.setMask([true, false])).toThrow(RangeError);
    expect(() => tracker.setMask([false, false, false, false])).toThrow(RangeError);
    expect(() => tracker.seedFrom(new CovarianceBank(4, 3))).toThrow(RangeError);
    expect(() => new ConventionalTracker(t, 1, 2)).toThrow(RangeError);
    expect(() => recursionWeightSum(1, 3)).toThrow(RangeError);
    expect(recursionWeightSum(0.5, 2)).toBe(0.75);
  });
});

describe('BinProcessor with the fast kernels', () => {
  it('a new grid after hops left out (λ^k) seeds the tracker from the bank: the conventional spectrum equals the plain scan', async () => {
    const { BinProcessor, SCAN_CONVENTIONAL } = await import('../../server/engine/bin-processor.ts');
    const { rng } = setup(11, 6, 12, [1000, 1500, 2000]);
    const positions = Array.from({ length: 6 }, (_, m) => [0.05 * m, 0.02 * (m % 2), 0] as [number, number, number]);
    const freqsHz = Float64Array.from([1000, 1500, 2000]);
    const grid = (n: number) => directionGrid({ azimuthDeg: { startDeg: 0, stopDeg: 360 - 360 / n, stepDeg: 360 / n } });
    const proc = await BinProcessor.create({ positions, freqsHz, grid: grid(12), speedOfSoundMps: C, snapshotScale: 1, fast: true });
    const snap = new Float64Array(2 * 6 * 3);
    // λ varies from hop to hop, as when hops are left out (the engine sends λ^k).
    for (const lambda of [0.9, 0.9, 0.729, 0.9, 0.81, 0.9]) {
      for (let i = 0; i < snap.length; i++) snap[i] = rng.gaussian();
      proc.hop(snap, lambda);
    }
    await proc.setGrid(grid(24)); // shedding or a re-plan: new tables, the covariance kept
    const conv = new Float64Array(24);
    const mvdr = new Float64Array(24);
    proc.scan(SCAN_CONVENTIONAL, { mode: 'fixed', delta: 0 }, conv, mvdr);
    const table = new SteeringTable({ positions, grid: grid(24), freqsHz: Array.from(freqsHz), speedOfSoundMps: C });
    const perBin = plainConventional(table, proc.bank);
    const want = new Float64Array(24);
    for (let b = 0; b < 3; b++) for (let d = 0; d < 24; d++) want[d] += perBin[b * 24 + d];
    expect(maxRelativeError(conv, want)).toBeLessThan(1e-9);
  });
});
