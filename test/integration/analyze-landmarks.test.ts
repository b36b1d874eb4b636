/**
 * `nullsteer analyze` names the landmark nearest each peak when the array file has landmarks: a
 * plane wave from 35° on the 24-mic ring (rendered by test/helpers/plane-waves.ts from the
 * far-field delay τ_m = −(p_m·u)/c of DESIGN.md §3), the array file a temporary copy with landmarks.
 */
import { mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { beforeAll, describe, expect, it } from 'vitest';
import { loadGeometry } from '../../server/config/array-file.ts';
import { writeWavFile } from '../../server/io/wav.ts';
import { analyzeCommand } from '../../server/tools/analyze.ts';
import { renderPlaneWaves } from '../helpers/plane-waves.ts';

const dir = mkdtempSync(join(tmpdir(), 'nullsteer-analyze-landmarks-'));
const ARRAY = join(dir, 'ring-24-landmarks.json');
const WAV = join(dir, 'one-source.wav');

async function analyze(args: string[]): Promise<{ code: number; out: string; err: string }> {
  let out = '';
  let err = '';
  const code = await analyzeCommand(args, { out: (s) => (out += s), err: (s) => (err += s) });
  return { code, out, err };
}

describe('nullsteer analyze with landmarks', () => {
  beforeAll(async () => {
    const ring = JSON.parse(readFileSync(fileURLToPath(new URL('../../config/arrays/ring-24.json', import.meta.url)), 'utf8'));
    writeFileSync(ARRAY, JSON.stringify({ ...ring, landmarks: [{ name: 'gate', azimuthDeg: 33 }, { name: 'road', azimuthDeg: 180 }] }));
    const g = await loadGeometry(ARRAY);
    const x = renderPlaneWaves({ positions: g.positions, sampleRateHz: 48000, frames: 32768, speedOfSoundMps: 343.2, sources: [{ azimuthDeg: 35, rms: 0.05, loHz: 1000, hiHz: 4000, seed: 21 }], noiseRms: 0.0005, noiseSeed: 22 });
    await writeWavFile(WAV, { sampleRateHz: 48000, channels: g.positions.length, encoding: 'float32', interleaved: x });
  });

  it('adds the nearest landmark within 10° to the peaks of the JSON and the table', async () => {
    const j = await analyze([WAV, '--array', ARRAY, '--band', '1000:4000', '--json']);
    expect(j.err).toBe('');
    const peak = JSON.parse(j.out).methods.mvdr.peaks[0];
    expect(Math.abs(peak.azimuth_deg - 35)).toBeLessThan(1);
    expect(peak.landmark).toBe('gate');
    const t = await analyze([WAV, '--array', ARRAY, '--band', '1000:4000']);
    expect(t.code).toBe(0);
    expect(t.out).toMatch(/^\s+3[45]\.\d\d\s+-?\d+\.\d\d {2}· gate$/m);
  });
});
