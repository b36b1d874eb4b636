import { describe, expect, it } from 'vitest';
import { ParamError, patchParams, type ProcessingParams } from '../../server/engine/params.ts';

const base: ProcessingParams = {
  lambda: 0.99,
  loading: { mode: 'relative', ratio: 0.01 },
  bandHz: [300, 6000],
  grid: { azimuthDeg: { startDeg: 0, stopDeg: 359, stepDeg: 1 } },
  methods: ['mvdr', 'conventional'],
  spectrumRateHz: 20,
  normalise: false,
  fftSize: 512,
};
const ctx = { sampleRateHz: 48000, hop: 256 };
const tau = (p: ProcessingParams) => p.fftSize / 2 / (48000 * (1 - p.lambda)); // τ = hop/(fs(1−λ)), common practice

describe('processing parameters', () => {
  it('a new FFT size keeps the time constant unless λ or τ is given with it', () => {
    const p = patchParams(base, { fftSize: 1024 }, ctx);
    expect(p.fftSize).toBe(1024);
    expect(tau(p)).toBeCloseTo(tau(base), 12); // 0.5333 s (CHECKS.md: λ = 0.99, hop 256, 48 kHz)
    expect(tau(base)).toBeCloseTo(0.5333, 4);
    const q = patchParams(base, { fftSize: 2048, tauS: 1 }, ctx);
    expect(q.lambda).toBeCloseTo(1 - 1024 / 48000, 12); // τ read with the new hop
    expect(patchParams(base, { fftSize: 256, lambda: 0.9 }, ctx).lambda).toBe(0.9);
  });

  it('names the field and the allowed values', () => {
    expect(() => patchParams(base, { fftSize: 1000 }, ctx)).toThrow(new ParamError('fftSize', '1000 not allowed; allowed 256, 512, 1024, 2048, 4096'));
    expect(() => patchParams(base, { lambda: 1 }, ctx)).toThrow(/^lambda: 1 out of range; allowed a number in \(0, 1\)$/);
    expect(() => patchParams(base, { bandHz: [6000, 300] }, ctx)).toThrow(/^bandHz: \[6000, 300\] out of range; allowed 0 ≤ low < high ≤ 24000$/);
    expect(() => patchParams(base, { grid: { azimuthDeg: { startDeg: 0, stopDeg: 359, stepDeg: 0.01 } } }, ctx)).toThrow(/^grid: 35901 directions; allowed at most 20000$/);
    expect(() => patchParams(base, { spectrumRateHz: 100 }, ctx)).toThrow(/^spectrumRateHz: 100 out of range; allowed 0.5–50$/);
    expect(() => patchParams(base, { methods: [] }, ctx)).toThrow(/^methods: \[\]: allowed a non-empty list of mvdr, conventional$/);
    expect(() => patchParams(base, { colour: 'red' }, ctx)).toThrow(/^colour: unknown field/);
  });

  it('leaves the base unchanged', () => {
    const copy = structuredClone(base);
    patchParams(base, { lambda: 0.5, grid: { azimuthDeg: { startDeg: 0, stopDeg: 180, stepDeg: 2 } } }, ctx);
    expect(base).toEqual(copy);
  });
});
