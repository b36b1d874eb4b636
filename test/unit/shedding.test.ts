/**
 * The load shedder's policy (../shared/DESIGN.md §4, the project's own design: spectrum rate first,
 * then the grid, then covariance decimation) and the history it keeps for status.
 */
import { describe, expect, it } from 'vitest';
import { DEFAULT_SHED_POLICY, LoadShedder, MAX_SHED_STEP, SHED_HISTORY, shedEffect } from '../../server/engine/shedding.ts';

describe('LoadShedder', () => {
  it('maps steps to effects in the design order', () => {
    expect([0, 1, 2, 3, 4, 5].map(shedEffect)).toEqual([
      { rateDivisor: 1, gridCoarsening: 1, covarianceDecimation: 1 },
      { rateDivisor: 2, gridCoarsening: 1, covarianceDecimation: 1 },
      { rateDivisor: 4, gridCoarsening: 1, covarianceDecimation: 1 },
      { rateDivisor: 4, gridCoarsening: 2, covarianceDecimation: 1 },
      { rateDivisor: 4, gridCoarsening: 2, covarianceDecimation: 2 },
      { rateDivisor: 4, gridCoarsening: 2, covarianceDecimation: 4 },
    ]);
    expect(MAX_SHED_STEP).toBe(5);
  });

  it('rises one step per two overloaded windows, falls one per recoverWindows calm ones, and records each change', () => {
    let sample = 0;
    const s = new LoadShedder(DEFAULT_SHED_POLICY, () => sample);
    const steps: number[] = [];
    for (let w = 0; w < 12; w++) {
      sample = 24000 * w;
      s.update(1.2);
      steps.push(s.step);
    }
    expect(steps).toEqual([0, 1, 1, 2, 2, 3, 3, 4, 4, 5, 5, 5]); // capped at 5
    s.update(0.7); // between the thresholds: no change, counters cleared
    for (let w = 0; w < DEFAULT_SHED_POLICY.recoverWindows - 1; w++) s.update(0.1);
    expect(s.step).toBe(5);
    sample = 999;
    s.update(0.1);
    expect(s.step).toBe(4);
    expect(s.changes).toBe(6);
    expect(s.history.map((h) => [h.from, h.step, h.sampleIndex])).toEqual([
      [0, 1, 24000],
      [1, 2, 72000],
      [2, 3, 120000],
      [3, 4, 168000],
      [4, 5, 216000],
      [5, 4, 999],
    ]);
    expect(s.history[0].load).toBe(1.2);
    expect(Number.isNaN(Date.parse(s.history[0].at))).toBe(false);
  });

  it('keeps only the last SHED_HISTORY changes', () => {
    const s = new LoadShedder({ windowMs: 500, highLoad: 0.85, lowLoad: 0.5, recoverWindows: 1 });
    for (let i = 0; i < 200; i++) s.update(i % 4 < 2 ? 1 : 0);
    expect(s.history.length).toBe(SHED_HISTORY);
    expect(s.changes).toBeGreaterThan(SHED_HISTORY);
  });
});
