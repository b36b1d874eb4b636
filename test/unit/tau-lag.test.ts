/**
 * The τ advisor's bearing lag (shared/tau-advisor.ts meanAgeS × the tracked bearing rate of
 * shared/bearing-rate.ts) against the lag measured on the built-in scene: the service cart of
 * server/ingest/scenario.ts (azimuth 150° + 50°·sin(2πt/100 s), 3.14°/s at t = 50 s) heard by the
 * ring-24 array, run through the offline scan chain (server/dsp/scan-pipeline.ts, the same
 * covariance, MVDR and peak stages as the live engine) with τ = 1.5 s. The truth is the scene's own
 * trajectory at each row's sample index (SceneSimulator.truth), not the code under test.
 */
import { readFileSync } from 'node:fs';
import { describe, expect, it } from 'vitest';
import { validateGeometry } from '../../server/config/array-file.ts';
import { ScanPipeline } from '../../server/dsp/scan-pipeline.ts';
import { SceneSimulator } from '../../server/ingest/simulator.ts';
import { BearingRateTracker, wrapDeg180 } from '../../shared/bearing-rate.ts';
import { lambdaOfTau, meanAgeS } from '../../shared/tau-advisor.ts';

const FS = 48000;
const N = 512;
const SHAPE = { fftSize: N, hopSamples: N / 2, sampleRateHz: FS };

interface LagMeasure {
  measuredDeg: number;
  predictedDeg: number;
  rows: number;
}

/** Scan the scene with τ around the cart's fastest point; mean measured and predicted lag over the rows. */
function measureLag(tauS: number): LagMeasure {
  const geometry = validateGeometry(JSON.parse(readFileSync(new URL('../../config/arrays/ring-24.json', import.meta.url), 'utf8')), 'ring-24.json');
  const lambda = lambdaOfTau(tauS, SHAPE);
  const pipe = new ScanPipeline({
    geometry, sampleRateHz: FS, fftSize: N, bandHz: [500, 4000],
    grid: { azimuthDeg: { startDeg: 60, stopDeg: 240, stepDeg: 0.5 } },
    methods: ['mvdr'], lambda, loading: { mode: 'relative', ratio: 0.01 }, speedOfSoundMps: 343.2,
    peakThresholdDb: 3, maxPeaks: 4,
  });
  const sim = new SceneSimulator({ geometry, sampleRateHz: FS, blockFrames: 2400, seed: 7 });
  // Warm up 5τ first (a younger estimate has a shorter mean age), then 4 s for the rate fit, then
  // scan every 0.25 s from t = 50 s (the cart's fastest point, −3.14°/s) to 58 s.
  const t0 = 50 - 5 * tauS - 4;
  sim.skip(Math.round(t0 * FS));
  const tracker = new BearingRateTracker({ sampleRateHz: FS, windowS: 4 });
  const lags: number[] = [];
  const predicted: number[] = [];
  let nextScan = (t0 + 5 * tauS) * FS;
  while (sim.sampleIndex < 58 * FS) {
    const b = sim.next();
    pipe.push(b);
    const end = b.sampleIndex + b.frames;
    if (end < nextScan) continue;
    nextScan += 0.25 * FS;
    const peaks = pipe.result().methods.mvdr!.peaks;
    tracker.push(end - 1, peaks);
    const r = tracker.rate();
    const truth = sim.truth(end - 1).find((s) => s.name === 'service-cart')!.azimuthDeg;
    const near = peaks.filter((p) => Math.abs(wrapDeg180(p.azimuthDeg - truth)) < 20).sort((p, q) => q.levelDb - p.levelDb)[0];
    if (!near || !r || r.spanS < 3) continue;
    // Lag: how far the peak trails the truth along the direction of motion.
    lags.push(wrapDeg180(truth - near.azimuthDeg) * Math.sign(r.rateDegPerS));
    predicted.push(Math.abs(r.rateDegPerS) * meanAgeS(lambda, SHAPE));
  }
  const mean = (a: number[]) => a.reduce((s, x) => s + x, 0) / a.length;
  const m = { measuredDeg: mean(lags), predictedDeg: mean(predicted), rows: lags.length };
  console.log(`τ ${tauS} s: measured lag ${m.measuredDeg.toFixed(2)}°, predicted ${m.predictedDeg.toFixed(2)}° (${m.rows} rows)`);
  return m;
}

describe('bearing lag on the built-in scene (MVDR, ring-24, τ = hop/(fs(1−λ)))', () => {
  it('τ = 1 s and 1.5 s: the measured lag is within 30 % (or 1°, the larger) of rate × mean age', () => {
    for (const tauS of [1, 1.5]) {
      const m = measureLag(tauS);
      expect(m.rows).toBeGreaterThan(25);
      expect(m.measuredDeg).toBeGreaterThan(1);
      expect(Math.abs(m.measuredDeg - m.predictedDeg)).toBeLessThanOrEqual(Math.max(0.3 * m.predictedDeg, 1));
    }
  }, 180_000);
  it('τ = 3 s: the source moves several beamwidths within τ and the peak leans toward the newest frames: rate × mean age is an upper bound', () => {
    const m = measureLag(3);
    expect(m.measuredDeg).toBeLessThan(m.predictedDeg);
    expect(m.measuredDeg).toBeGreaterThan(0.4 * m.predictedDeg);
  }, 180_000);
});
