/**
 * The front end's per-channel correction (dsp/calibration.ts) against analytic values: a channel
 * that reads g dB hot and lags by d needs the factor 10^{−g/20}·e^{+j2πfd} (the delay theorem of the
 * Fourier transform with this project's sign, s(t − d) ↦ S(f)·e^{−j2πfd}); applied to the STFT of
 * the errored channel it gives the STFT of the nominal one.
 */
import { describe, expect, it } from 'vitest';
import { applyCorrection, correctionFactors, describeCalibration } from '../../server/dsp/calibration.ts';
import { Stft } from '../../server/dsp/stft.ts';
import { splOffsetDb } from '../../shared/levels.ts';

describe('per-channel correction factors', () => {
  it('are 10^(−g/20)·e^(+j2πfd), bin-major and interleaved; null for a nominal array', () => {
    const c = correctionFactors({ gainDb: [0, 6, -3], delayUs: [0, 100, -50] }, 3, [1000, 2500])!;
    expect(c).toHaveLength(2 * 3 * 2);
    const at = (b: number, m: number) => [c[2 * (b * 3 + m)], c[2 * (b * 3 + m) + 1]];
    expect(at(0, 0)).toEqual([1, 0]);
    // Channel 1 at 1 kHz: amplitude 10^(−6/20) = 0.501187, phase 2π·1000·100e-6 = 0.2π.
    expect(Math.hypot(...at(0, 1))).toBeCloseTo(0.5011872336, 9);
    expect(Math.atan2(at(0, 1)[1], at(0, 1)[0])).toBeCloseTo(0.2 * Math.PI, 12);
    // Channel 2 at 2.5 kHz: amplitude 10^(3/20) = 1.412538, phase −2π·2500·50e-6 = −0.25π.
    expect(Math.hypot(...at(1, 2))).toBeCloseTo(1.4125375446, 9);
    expect(Math.atan2(at(1, 2)[1], at(1, 2)[0])).toBeCloseTo(-0.25 * Math.PI, 12);
    expect(correctionFactors({ gainDb: [0, 0], delayUs: [0, 0] }, 2, [1000])).toBeNull();
    expect(correctionFactors(undefined, 2, [1000])).toBeNull();
    expect(() => correctionFactors({ gainDb: [0], delayUs: [0, 0] }, 2, [1000])).toThrow(/1 gains and 2 delays for 2 channels/);
    expect(describeCalibration({ gainDb: [0, 6, -7], delayUs: [0, 100, -150] })).toEqual({ gainDbMax: 7, delayUsMax: 150, splOffsetDb: null });
  });

  it('dB SPL from dBFS: a 50 mV/Pa microphone into a 1 V full scale adds 120 dB; 1 Pa reads 93.98 dB SPL', () => {
    // 20·log10(1 V / (0.05 V/Pa · 20 µPa)) = 20·log10(10⁶) = 120 dB.
    expect(splOffsetDb(50, 1)).toBeCloseTo(120, 12);
    // 1 Pa rms (93.98 dB SPL re 20 µPa, common practice) gives 50 mV rms = 0.05 full scale:
    // 10·log10(0.05²) = −26.02 dBFS, + 120 = 93.98.
    expect(10 * Math.log10(0.05 ** 2) + splOffsetDb(50, 1)).toBeCloseTo(20 * Math.log10(1 / 20e-6), 10);
    expect(20 * Math.log10(1 / 20e-6)).toBeCloseTo(93.9794, 4);
    // A 12 mV/Pa microphone into 2.5 V: 20·log10(2.5 / (0.012 · 20e-6)) = 140.355 dB.
    expect(splOffsetDb(12, 2.5)).toBeCloseTo(140.3546, 4);
    expect(describeCalibration({ gainDb: [0], delayUs: [0], sensitivityMvPerPa: 50, fullScaleVolts: 1 })!.splOffsetDb).toBeCloseTo(120, 12);
  });

  it('turn the STFT of a hot, late tone into that of the nominal tone', () => {
    // A tone at bin 40 of N = 512 (3750 Hz at 48 kHz), delayed by 37.5 µs and 2.5 dB hot.
    const n = 512;
    const fs = 48000;
    const k = 40;
    const f = (k * fs) / n;
    const d = 37.5e-6;
    const g = 2.5;
    const stft = new Stft(n);
    const nominal = Float64Array.from({ length: n }, (_, i) => Math.cos(2 * Math.PI * f * (i / fs)));
    const errored = Float64Array.from({ length: n }, (_, i) => Math.pow(10, g / 20) * Math.cos(2 * Math.PI * f * (i / fs - d)));
    const a = new Float64Array(2 * stft.bins);
    const b = new Float64Array(2 * stft.bins);
    stft.analyze(a, nominal);
    stft.analyze(b, errored);
    const c = correctionFactors({ gainDb: [g], delayUs: [d * 1e6] }, 1, [f])!;
    applyCorrection(b, 2 * k, c);
    // At the tone's own bin the delay is a pure phase (exact up to the window's leakage from −f,
    // −84 dB here).
    const err = Math.hypot(b[2 * k] - a[2 * k], b[2 * k + 1] - a[2 * k + 1]) / Math.hypot(a[2 * k], a[2 * k + 1]);
    console.log(`calibration of a tone at bin 40: corrected error ${(20 * Math.log10(err)).toFixed(1)} dB re the bin`);
    expect(err).toBeLessThan(1e-3);
    // Uncorrected, the same bin is off by the gain and a 54° phase.
    stft.analyze(b, errored);
    expect(Math.hypot(b[2 * k] - a[2 * k], b[2 * k + 1] - a[2 * k + 1]) / Math.hypot(a[2 * k], a[2 * k + 1])).toBeGreaterThan(0.5);
  });
});

describe('describeCalibration: polarity and channel order', () => {
  it('lists inverted positions and positions reading another channel, only when there are any', () => {
    expect(describeCalibration({ gainDb: [0, 0, 0], delayUs: [0, 0, 0], polarity: [1, -1, 1], channelOrder: [0, 2, 1] })).toEqual({ gainDbMax: 0, delayUsMax: 0, splOffsetDb: null, inverted: [1], reordered: [1, 2] });
    expect(describeCalibration({ gainDb: [0, 0], delayUs: [0, 0], polarity: [1, 1], channelOrder: [0, 1] })).toEqual({ gainDbMax: 0, delayUsMax: 0, splOffsetDb: null });
  });
});
