/**
 * shared/tau-advisor.ts against closed forms, the RMB worked value of shared/CHECKS.md and a numpy
 * fixture (test/fixtures/tau-advisor/generate.py: white noise through the project's STFT and
 * exponential averaging, the per-bin variance measured).
 */
import { spawnSync } from 'node:child_process';
import { mkdtempSync, readFileSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { afterAll, describe, expect, it } from 'vitest';
import { sqrtHannWindow } from '../../server/dsp/stft.ts';
import {
  adviseTau,
  effectiveSnapshots,
  independentSnapshots,
  lambdaOfTau,
  meanAgeS,
  overlapCorrelations,
  rmbLossDb,
  rmbSinrRatio,
  roundUp3,
  sqrtHann,
  sqrtHannRho1,
  suggestTau,
  tauOfLambda,
} from '../../shared/tau-advisor.ts';

const fixture = JSON.parse(readFileSync(new URL('../fixtures/tau-advisor/snapshots.json', import.meta.url), 'utf8')) as {
  fftSize: number;
  hopSamples: number;
  rho: number[];
  cases: { lambda: number; measuredSnapshots: number; independentSnapshots: number }[];
};

const SHAPE = { fftSize: 512, hopSamples: 256, sampleRateHz: 48000 };

describe('overlap correlation of the analysis window', () => {
  it('is the window of server/dsp/stft.ts', () => {
    for (const n of [256, 512, 4096]) expect(Array.from(sqrtHann(n))).toEqual(Array.from(sqrtHannWindow(n)));
  });
  it('sqrt-Hann at 50 %: only ρ1, equal to the closed form cot²(π/N)/N² and tending to 1/π²', () => {
    for (const n of [256, 512, 1024, 4096]) {
      const rho = overlapCorrelations(sqrtHann(n), n / 2);
      expect(rho.length).toBe(1);
      expect(rho[0]).toBeCloseTo(sqrtHannRho1(n), 12);
    }
    expect(sqrtHannRho1(1 << 20)).toBeCloseTo(1 / Math.PI ** 2, 9);
  });
  it('Hann (sin²) at 50 %: ρ1 = (1/6)² (Hann overlap correlation 1/6; F. J. Harris, Proc. IEEE 66(1), 1978, from memory)', () => {
    const n = 512;
    const w = Array.from({ length: n }, (_, i) => Math.sin((Math.PI * i) / n) ** 2);
    expect(overlapCorrelations(w, n / 2)[0]).toBeCloseTo(1 / 36, 6);
  });
  it('agrees with the fixture generator', () => {
    expect(overlapCorrelations(sqrtHann(fixture.fftSize), fixture.hopSamples)[0]).toBeCloseTo(fixture.rho[0], 12);
  });
});

describe('snapshot counts', () => {
  it('(1+λ)/(1−λ): λ = 0.99 → 199 (shared/CHECKS.md)', () => {
    expect(independentSnapshots(0.99)).toBeCloseTo(199, 9);
  });
  it('without overlap K_eff is (1+λ)/(1−λ)', () => {
    expect(effectiveSnapshots(0.9, [])).toBeCloseTo(19, 9);
  });
  it('K_eff matches the variance measured on white noise (numpy fixture) within 5 %; the uncorrected count is off by > 8 %', () => {
    const rho = overlapCorrelations(sqrtHann(fixture.fftSize), fixture.hopSamples);
    for (const c of fixture.cases) {
      const k = effectiveSnapshots(c.lambda, rho);
      expect(Math.abs(k / c.measuredSnapshots - 1)).toBeLessThan(0.05);
      if (c.lambda >= 0.9) expect(c.independentSnapshots / c.measuredSnapshots - 1).toBeGreaterThan(0.08);
    }
  });
});

describe('Reed–Mallett–Brennan', () => {
  it('N = 8, K = 16 → 0.5882 (shared/CHECKS.md; RMB, IEEE Trans. AES 10(6), 1974)', () => {
    expect(rmbSinrRatio(16, 8)).toBeCloseTo(0.5882, 4);
    expect(rmbLossDb(16, 8)).toBeCloseTo(-10 * Math.log10(10 / 17), 9);
  });
  it('K ≈ 2N loses about 3 dB: (M+2)/(2M+1) → 1/2 (2.30 dB at M = 8, 3.01 dB in the limit)', () => {
    expect(rmbLossDb(16, 8)).toBeCloseTo(2.3045, 4);
    for (const m of [32, 64, 1024]) expect(rmbLossDb(2 * m, m)).toBeGreaterThan(2.8);
    for (const m of [8, 32, 64, 1024]) expect(rmbLossDb(2 * m, m)).toBeLessThan(10 * Math.log10(2) + 1e-9);
  });
  it('K < M − 1: infinite loss (singular without loading)', () => {
    expect(rmbLossDb(5, 8)).toBe(Infinity);
  });
});

describe('τ, λ, mean age', () => {
  it('τ = hop/(fs(1−λ)): λ = 0.99, hop 256 at 48 kHz → 0.533 s (shared/CHECKS.md)', () => {
    expect(tauOfLambda(0.99, SHAPE)).toBeCloseTo(0.5333, 4);
    expect(lambdaOfTau(tauOfLambda(0.97, SHAPE), SHAPE)).toBeCloseTo(0.97, 12);
  });
  it('mean age (N/2)/fs + λ/(1−λ)·hop/fs equals τ at hop N/2', () => {
    for (const lam of [0.5, 0.9, 0.999]) expect(meanAgeS(lam, SHAPE)).toBeCloseTo(tauOfLambda(lam, SHAPE), 12);
    // the weights' mean: Σ k (1−λ) λ^k summed directly
    const lam = 0.95;
    let s = 0;
    for (let k = 0; k < 5000; k++) s += k * (1 - lam) * lam ** k;
    expect(meanAgeS(lam, SHAPE)).toBeCloseTo((256 + s * 256) / 48000, 9);
  });
});

describe('adviseTau and suggestTau', () => {
  it('a very short τ warns (K_eff < 2M)', () => {
    const a = adviseTau(0.02, 8, SHAPE)!;
    expect(a.fewSnapshots).toBe(true);
    expect(a.snapshots).toBeLessThan(16);
    expect(adviseTau(256 / 48000, 8, SHAPE)).toBeNull();
  });
  it('the suggestion is the shortest 3-digit τ with K_eff ≥ 2M', () => {
    for (const m of [8, 24, 32, 64]) {
      for (const shape of [SHAPE, { fftSize: 4096, hopSamples: 2048, sampleRateHz: 48000 }]) {
        const tau = suggestTau(m, shape);
        const a = adviseTau(tau, m, shape)!;
        expect(a.snapshots).toBeGreaterThanOrEqual(2 * m);
        expect(a.fewSnapshots).toBe(false);
        // one step down in the third digit no longer meets it
        const step = 10 ** (Math.floor(Math.log10(tau)) - 2);
        expect(adviseTau(tau - step, m, shape)?.snapshots ?? 0).toBeLessThan(2 * m);
      }
    }
  });
  it('honours a lower bound on τ', () => {
    expect(suggestTau(2, SHAPE, { minTauS: 0.01 })).toBeGreaterThanOrEqual(0.01);
  });
  it('roundUp3', () => {
    expect(roundUp3(0.12301)).toBe(0.124);
    expect(roundUp3(0.123)).toBe(0.123);
    expect(roundUp3(1234)).toBe(1240);
  });
});

describe('the fixture', () => {
  const python = spawnSync('python3', ['-c', 'import numpy, scipy'], { encoding: 'utf8' }).status === 0;
  const dir = mkdtempSync(join(tmpdir(), 'nullsteer-tau-'));
  afterAll(() => rmSync(dir, { recursive: true, force: true }));
  it.skipIf(!python)('regenerating it gives no difference', () => {
    const fixtures = fileURLToPath(new URL('../fixtures/tau-advisor/', import.meta.url));
    const run = spawnSync('python3', [join(fixtures, 'generate.py'), dir], { encoding: 'utf8' });
    expect(run.status, run.stderr).toBe(0);
    expect(readFileSync(join(dir, 'snapshots.json'), 'utf8')).toBe(readFileSync(join(fixtures, 'snapshots.json'), 'utf8'));
  }, 60_000);
});
