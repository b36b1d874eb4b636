/**
 * `nullsteer analyze` on recordings written here: resolution beyond the conventional beamwidth, dead
 * and masked channels, the JSON and table outputs, and its errors.
 */
import { spawnSync } from 'node:child_process';
import { copyFileSync, mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { beforeAll, describe, expect, it } from 'vitest';
import { loadGeometry } from '../../server/config/array-file.ts';
import { SceneSimulator } from '../../server/ingest/simulator.ts';
import { writeWavFile } from '../../server/io/wav.ts';
import { analyzeCommand } from '../../server/tools/analyze.ts';
import { renderPlaneWaves } from '../helpers/plane-waves.ts';

const BIN = fileURLToPath(new URL('../../bin/nullsteer.mjs', import.meta.url));
const ARRAYS = fileURLToPath(new URL('../../config/arrays/', import.meta.url));
const dir = mkdtempSync(join(tmpdir(), 'nullsteer-analyze-'));

async function analyze(args: string[]): Promise<{ code: number; out: string; err: string }> {
  let out = '';
  let err = '';
  const code = await analyzeCommand(args, { out: (s) => (out += s), err: (s) => (err += s) });
  return { code, out, err };
}

const line8 = `${ARRAYS}line-8.json`;
const ring24 = `${ARRAYS}ring-24.json`;

describe('nullsteer analyze', () => {
  const twoSources = join(dir, 'two-sources.wav');
  beforeAll(async () => {
    // Two equal broadband sources 10° apart near broadside of the 8-mic, 4 cm line: inside the
    // conventional half-power beamwidth (≈ 0.891·λ/(N·d) rad, Van Trees 2002 ch. 2, from memory;
    // ≈ 20° at 3 kHz here), so delay-and-sum shows one lobe where MVDR shows two.
    const g = await loadGeometry(line8);
    const x = renderPlaneWaves({
      positions: g.positions,
      sampleRateHz: 48000,
      frames: 65536,
      speedOfSoundMps: 343.2,
      sources: [
        { azimuthDeg: 84, rms: 0.05, loHz: 1500, hiHz: 4000, seed: 11 },
        { azimuthDeg: 94, rms: 0.05, loHz: 1500, hiHz: 4000, seed: 12 },
      ],
      noiseRms: 0.0005,
      noiseSeed: 13,
    });
    await writeWavFile(twoSources, { sampleRateHz: 48000, channels: 8, encoding: 'float32', interleaved: x });
  });

  it('MVDR resolves two sources closer than the conventional beamwidth; conventional shows one', async () => {
    const r = await analyze([twoSources, '--array', line8, '--band', '1500:4000', '--json', '--loading', 'ratio:0.001']);
    expect(r.err).toBe('');
    expect(r.code).toBe(0);
    const rep = JSON.parse(r.out);
    expect(rep.grid.azimuth_deg).toHaveLength(181);
    const mv = rep.methods.mvdr.peaks.slice(0, 2).map((p: any) => p.azimuth_deg).sort((a: number, b: number) => a - b);
    expect(Math.abs(mv[0] - 84)).toBeLessThan(1);
    expect(Math.abs(mv[1] - 94)).toBeLessThan(1);
    // Both MVDR peaks carry the source level: 0.05 rms = −26.0 dBFS, within 1.5 dB.
    for (const p of rep.methods.mvdr.peaks.slice(0, 2)) expect(Math.abs(p.level_db - 20 * Math.log10(0.05))).toBeLessThan(1.5);
    const conv = rep.methods.conventional.peaks.filter((p: any) => p.azimuth_deg > 60 && p.azimuth_deg < 120);
    expect(conv).toHaveLength(1);
    expect(Math.abs(conv[0].azimuth_deg - 89)).toBeLessThan(2);
  });

  it('recursive covariance with --tau gives the same directions and reports λ and τ', async () => {
    const r = await analyze([twoSources, '--array', line8, '--band', '1500:4000', '--json', '--tau', '0.5', '--method', 'mvdr', '--loading', 'db:-30']);
    expect(r.code).toBe(0);
    const rep = JSON.parse(r.out);
    expect(rep.covariance).toBe('recursive');
    expect(rep.tau_s).toBeCloseTo(0.5, 9);
    expect(rep.lambda).toBeCloseTo(1 - 256 / (48000 * 0.5), 12); // τ = hop/(fs(1−λ)), common practice
    expect(Object.keys(rep.methods)).toEqual(['mvdr']);
    const mv = rep.methods.mvdr.peaks.slice(0, 2).map((p: any) => p.azimuth_deg).sort((a: number, b: number) => a - b);
    expect(Math.abs(mv[0] - 84)).toBeLessThan(1);
    expect(Math.abs(mv[1] - 94)).toBeLessThan(1);
  });

  it('still finds the scene sources with a dead channel and a masked (corrupted) channel', async () => {
    const g = await loadGeometry(ring24);
    const sim = new SceneSimulator({ geometry: g, sampleRateHz: 48000, blockFrames: 4800, seed: 3 });
    const M = 24;
    const blocks = 10;
    const x = new Float32Array(M * 4800 * blocks);
    let r = 0x1234;
    for (let k = 0; k < blocks; k++) {
      const b = sim.next();
      for (let i = 0; i < 4800; i++) {
        for (let c = 0; c < M; c++) {
          let v = b.data[c * 4800 + i];
          if (c === 5) v = 0; // a dead microphone
          if (c === 11) v = ((r = (r * 1103515245 + 12345) >>> 0) / 2 ** 32 - 0.5) * 0.5; // a loose connector
          x[(k * 4800 + i) * M + c] = v;
        }
      }
    }
    const truth = sim.truth(24000);
    const path = join(dir, 'scene-faulty.wav');
    await writeWavFile(path, { sampleRateHz: 48000, channels: M, encoding: 'int24', interleaved: x });
    const res = await analyze([path, '--array', ring24, '--band', '1000:6000', '--mask', '11', '--json']);
    expect(res.code).toBe(0);
    const rep = JSON.parse(res.out);
    expect(rep.dead_channels).toEqual([5]);
    expect(rep.masked_channels).toEqual([11]);
    expect(rep.active_channels).toBe(22);
    const peaks = rep.methods.mvdr.peaks.map((p: any) => p.azimuth_deg);
    for (const t of truth) {
      const nearest = Math.min(...peaks.map((a: number) => Math.abs(((a - t.azimuthDeg + 540) % 360) - 180)));
      // The cart moves about 1.5° during the second analysed; the others are fixed.
      expect(nearest, t.name).toBeLessThan(t.name === 'service-cart' ? 1.5 : 1);
    }
  });

  it('prints a table by default through the real command: summary and peaks; --all adds every direction', () => {
    const p = spawnSync(process.execPath, [BIN, 'analyze', twoSources, '--array', line8, '--band', '1500:4000', '--grid', '60:120:2'], { encoding: 'utf8' });
    expect(p.status).toBe(0);
    expect(p.stdout).toMatch(/mvdr peaks:\n\s+azimuth_deg\s+level_db\n/);
    expect(p.stdout).not.toMatch(/broadband spectrum \(dB\):/);
    expect(p.stdout).toContain('(--all adds the broadband spectrum at all 31 directions)');
    const all = spawnSync(process.execPath, [BIN, 'analyze', twoSources, '--array', line8, '--band', '1500:4000', '--grid', '60:120:2', '--all'], { encoding: 'utf8' });
    expect(all.status).toBe(0);
    expect(all.stdout).toMatch(/mvdr peaks:\n\s+azimuth_deg\s+level_db\n/);
    expect(all.stdout).toMatch(/broadband spectrum \(dB\):\n\s+azimuth_deg\s+mvdr\s+conventional/);
    // 60:120:2 is 31 directions, one line each (the peak lines have two numbers, these three).
    expect(all.stdout.trim().split('\n').filter((l) => /^\s+\d+\.00\s+-?\d+\.\d+\s+-?\d+\.\d+$/.test(l)).length).toBe(31);
  });

  it('takes the array from the recording\'s sidecar when --array is omitted', async () => {
    const rec = join(dir, 'recorded.wav');
    copyFileSync(twoSources, rec);
    // The recorder's sidecar (server/outputs/sidecar.ts) holds the geometry as loaded; only `array` is read here.
    const g = await loadGeometry(line8);
    writeFileSync(join(dir, 'recorded.json'), JSON.stringify({ startSampleIndex: 0, array: g, params: {}, changes: [] }));
    const viaSidecar = await analyze([rec, '--band', '1500:4000', '--json', '--loading', 'ratio:0.001']);
    expect(viaSidecar.err).toBe('');
    expect(viaSidecar.code).toBe(0);
    const viaFile = await analyze([rec, '--array', line8, '--band', '1500:4000', '--json', '--loading', 'ratio:0.001']);
    const a = JSON.parse(viaSidecar.out);
    const b = JSON.parse(viaFile.out);
    expect(a.array_from).toBe('sidecar');
    expect(a.array_file).toBe(join(dir, 'recorded.json'));
    expect(b.array_from).toBe('file');
    expect(a.methods).toEqual(b.methods);
    const table = await analyze([rec, '--band', '1500:4000']);
    expect(table.out.split('\n')[0]).toContain(`array line-8 (from the sidecar ${join(dir, 'recorded.json')})`);
    // A sidecar without an array, and no sidecar at all: a usage error that says to give --array.
    writeFileSync(join(dir, 'recorded.json'), JSON.stringify({ array: null }));
    const none = await analyze([rec]);
    expect(none.code).toBe(2);
    expect(none.err).toContain(`no array geometry: give --array (the sidecar ${join(dir, 'recorded.json')} has none)`);
    const missing = await analyze([twoSources]);
    expect(missing.code).toBe(2);
    expect(missing.err).toContain(`no array geometry: give --array (no sidecar ${join(dir, 'two-sources.json')}: ENOENT)`);
  });

  it('reads raw files and reports usage errors by flag, with exit code 2', async () => {
    const raw = join(dir, 'tiny.raw');
    const buf = Buffer.alloc(8 * 2 * 4096);
    writeFileSync(join(dir, 'silent.raw'), buf);
    let r = 99;
    for (let i = 0; i < buf.length; i += 2) buf.writeInt16LE(((r = (r * 1103515245 + 12345) >>> 0) >>> 20) - 2048, i);
    writeFileSync(raw, buf);
    const ok = await analyze([raw, '--array', line8, '--raw', '--channels', '8', '--rate', '16000', '--encoding', 'int16', '--json']);
    expect(ok.err).toBe('');
    expect(ok.code).toBe(0);
    const rep = JSON.parse(ok.out);
    expect(rep.band_hz).toEqual([300, 6000]);
    expect(rep.frames).toBe(4096);
    // A silent recording has no covariance to invert: a clear error, not a crash.
    const silent = await analyze([join(dir, 'silent.raw'), '--array', line8, '--raw', '--channels', '8', '--rate', '16000', '--encoding', 'int16', '--dead-db', 'off']);
    expect(silent.code).toBe(1);
    expect(silent.err).toMatch(/not positive definite[\s\S]*loading/);
    const cases: [string[], RegExp][] = [
      [[twoSources], /no array geometry: give --array/],
      [[twoSources, '--array', line8, '--json', '--all'], /give --json or --all, not both/],
      [[twoSources, '--array', line8, '--method', 'music'], /--method music: allowed mvdr, conventional, both/],
      [[twoSources, '--array', line8, '--loading', 'ratio:-1'], /--loading ratio:-1: loading\.ratio must be in 0…1000000, got -1/],
      [[twoSources, '--array', line8, '--band', '3000:1000'], /--band 3000:1000: HI must exceed LO/],
      [[twoSources, '--array', line8, '--fft', '1000'], /--fft 1000: must be a power of two/],
      [[twoSources, '--array', line8, '--mask', '8'], /--mask 8: the array has channels 0–7/],
      [[twoSources, '--array', ring24], /has 8 channels, the array ring-24 has 24/],
      [[twoSources, '--array', line8, '--lambda', '0.9', '--tau', '1'], /--lambda or --tau, not both/],
    ];
    for (const [args, re] of cases) {
      const r = await analyze(args);
      expect(r.code, args.join(' ')).toBe(2);
      expect(r.err).toMatch(re);
    }
    const missing = await analyze([join(dir, 'nope.wav'), '--array', line8]);
    expect(missing.code).toBe(1);
    expect(missing.err).toMatch(/ENOENT|no such file/);
  });
});
