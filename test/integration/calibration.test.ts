/**
 * Per-channel calibration in the front end (dsp/calibration.ts): an array whose channels read a
 * little hot or cold and lag a little, as a real array before calibration does. MVDR is known to be
 * sensitive to such steering mismatch: at high SNR it treats the mismatched target as interference
 * and partly nulls it (signal self-cancellation; common practice, e.g. H. Cox, "Resolving power and
 * sensitivity to mismatch of optimum array processors", JASA 54(3), 1973; reference from memory).
 * With the errors declared in the array file, the engine's rows must come back to those of the
 * error-free array.
 */
import { afterEach, describe, expect, it } from 'vitest';
import { loadGeometry } from '../../server/config/array-file.ts';
import { ScanPipeline } from '../../server/dsp/scan-pipeline.ts';
import { Engine, type EngineRow } from '../../server/engine/engine.ts';
import type { ProcessingParams } from '../../server/engine/params.ts';
import type { ArrayGeometry } from '../../shared/types.ts';
import { planarBlocks, renderPlaneWaves } from '../helpers/plane-waves.ts';
import { mulberry32 } from '../helpers/random.ts';

const ARRAYS = new URL('../../config/arrays/', import.meta.url).pathname;
const FS = 48000;
const FRAMES = 32768;

let engine: Engine | null = null;
afterEach(async () => {
  await engine?.close();
  engine = null;
});

const params: ProcessingParams = {
  lambda: 0.98,
  loading: { mode: 'relative', ratio: 0.001 },
  bandHz: [500, 4000],
  grid: { azimuthDeg: { startDeg: 0, stopDeg: 359, stepDeg: 1 } },
  methods: ['mvdr', 'conventional'],
  spectrumRateHz: 20,
  normalise: false,
  fftSize: 512,
};

function render(g: ArrayGeometry, gainDb?: number[], delayUs?: number[]): Float32Array {
  return renderPlaneWaves({
    positions: g.positions,
    sampleRateHz: FS,
    frames: FRAMES,
    speedOfSoundMps: 343.2,
    sources: [
      { azimuthDeg: 40, rms: 0.1, loHz: 300, hiHz: 6000, seed: 1 },
      { azimuthDeg: 200, rms: 0.03, loHz: 300, hiHz: 6000, seed: 2 },
    ],
    noiseRms: 0.001,
    noiseSeed: 3,
    channelGainDb: gainDb,
    channelDelayS: delayUs?.map((d) => d * 1e-6),
  });
}

async function rowsOf(g: ArrayGeometry, x: Float32Array): Promise<EngineRow[]> {
  const rows: EngineRow[] = [];
  engine = await Engine.create({ geometry: g, sampleRateHz: FS, params, workers: 2, speedOfSoundMps: 343.2, onRow: (r) => rows.push(r), shedding: false });
  for (const b of planarBlocks(x, g.positions.length, FS, 1000)) await engine.pushAsync(b);
  await engine.drain();
  await engine.close();
  engine = null;
  return rows;
}

/** Seeded channel errors: gains uniform in ±gainDb, delays uniform in ±delayUs. */
function errors(M: number, gainDb: number, delayUs: number) {
  const r = mulberry32(17);
  return { gainDb: Array.from({ length: M }, () => (2 * r() - 1) * gainDb), delayUs: Array.from({ length: M }, () => (2 * r() - 1) * delayUs) };
}

const levelAt = (r: EngineRow, az: number) => r.mvdrDb![az];
const maxDiffDb = (a: EngineRow, b: EngineRow) => a.mvdrDb!.reduce((m, v, i) => Math.max(m, Math.abs(v - b.mvdrDb![i])), 0);

describe('per-channel calibration', () => {
  it('gain errors declared in the array file are undone exactly: rows equal the nominal array\'s', async () => {
    const g = await loadGeometry(`${ARRAYS}ring-24.json`);
    const M = g.positions.length;
    const e = errors(M, 2, 0);
    const clean = await rowsOf(g, render(g));
    const fixed = await rowsOf({ ...g, calibration: { gainDb: e.gainDb, delayUs: Array(M).fill(0) } }, render(g, e.gainDb));
    expect(fixed.length).toBe(clean.length);
    let worst = 0;
    fixed.forEach((r, i) => {
      for (let d = 0; d < r.mvdrPower!.length; d++) {
        worst = Math.max(worst, Math.abs(r.mvdrPower![d] / clean[i].mvdrPower![d] - 1), Math.abs(r.conventionalPower![d] / clean[i].conventionalPower![d] - 1));
      }
    });
    console.log(`calibration, gains ±2 dB: worst relative difference to the nominal array ${worst.toExponential(2)} over ${fixed.length} rows`);
    expect(worst).toBeLessThan(1e-5); // float32 rounding of the errored input
  });

  it('gain and delay errors: MVDR loses the target without calibration and gets it back with it', async () => {
    const g = await loadGeometry(`${ARRAYS}ring-24.json`);
    const M = g.positions.length;
    const e = errors(M, 1.5, 25);
    const bad = render(g, e.gainDb, e.delayUs);
    const clean = (await rowsOf(g, render(g))).at(-1)!;
    const raw = (await rowsOf(g, bad)).at(-1)!;
    const fixed = (await rowsOf({ ...g, calibration: e }, bad)).at(-1)!;
    const peak = (r: EngineRow) => r.peaks.mvdr[0];
    console.log(
      `calibration, gains ±1.5 dB, delays ±25 µs: MVDR at the 40° target ${levelAt(clean, 40).toFixed(2)} dB nominal, ` +
        `${levelAt(raw, 40).toFixed(2)} dB uncorrected, ${levelAt(fixed, 40).toFixed(2)} dB corrected; ` +
        `strongest peak ${peak(clean).azimuthDeg}° / ${peak(raw).azimuthDeg}° / ${peak(fixed).azimuthDeg}°; ` +
        `200° source ${levelAt(clean, 200).toFixed(2)} / ${levelAt(raw, 200).toFixed(2)} / ${levelAt(fixed, 200).toFixed(2)} dB; ` +
        `largest difference corrected − nominal over all directions ${maxDiffDb(fixed, clean).toFixed(3)} dB`,
    );
    // Uncorrected, MVDR nulls much of its own target (and the other source).
    expect(levelAt(clean, 40) - levelAt(raw, 40)).toBeGreaterThan(10);
    expect(levelAt(clean, 200) - levelAt(raw, 200)).toBeGreaterThan(10);
    // Corrected, the spectrum is the nominal array's to a small fraction of a dB, peaks in place.
    expect(maxDiffDb(fixed, clean)).toBeLessThan(0.2);
    expect(Math.abs(peak(fixed).azimuthDeg - 40)).toBeLessThan(0.5);
    expect(Math.abs(levelAt(fixed, 40) - levelAt(clean, 40))).toBeLessThan(0.05);
  });

  it('analyze (the offline scan pipeline) applies the same correction', async () => {
    const g = await loadGeometry(`${ARRAYS}ring-24.json`);
    const M = g.positions.length;
    const e = errors(M, 1.5, 25);
    const bad = render(g, e.gainDb, e.delayUs);
    const scan = (geom: ArrayGeometry, x: Float32Array) => {
      const p = new ScanPipeline({ geometry: geom, sampleRateHz: FS, fftSize: 512, bandHz: [500, 4000], grid: params.grid, lambda: null, methods: ['mvdr'], loading: { mode: 'relative', ratio: 0.001 }, speedOfSoundMps: 343.2, deadBelowMedianDb: null });
      for (const b of planarBlocks(x, M, FS, 1000)) p.push(b);
      return p.result();
    };
    const clean = scan(g, render(g));
    const fixed = scan({ ...g, calibration: e }, bad);
    const raw = scan(g, bad);
    const at = (r: ReturnType<typeof scan>, az: number) => r.methods.mvdr!.spectrumDb[az];
    console.log(`calibration, analyze: MVDR at 40° ${at(clean, 40).toFixed(2)} nominal, ${at(raw, 40).toFixed(2)} uncorrected, ${at(fixed, 40).toFixed(2)} dB corrected`);
    expect(at(clean, 40) - at(raw, 40)).toBeGreaterThan(10);
    expect(Math.abs(at(fixed, 40) - at(clean, 40))).toBeLessThan(0.05);
  });
});
