/**
 * `nullsteer analyze FILE --array-check` on a WAV written here: the faulty 8-microphone ring of
 * test/unit/array-check.test.ts (plane waves from test/helpers/plane-waves.ts, written from
 * DESIGN.md §3), cables 2 and 5 swapped, channel 6 inverted, channel 4 dead. Float32 WAV
 * (WAVE_FORMAT_EXTENSIBLE, server/io/wav.ts), read back by the command.
 */
import { mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { writeWavFile } from '../../server/io/wav.ts';
import { analyzeCommand } from '../../server/tools/analyze.ts';
import { renderPlaneWaves } from '../helpers/plane-waves.ts';

const M = 8;
const RING = Array.from({ length: M }, (_, m) => [0.1 * Math.cos((2 * Math.PI * m) / M), 0.1 * Math.sin((2 * Math.PI * m) / M), 0] as [number, number, number]);
let dir = '';
let wav = '';
let arrayFile = '';

beforeAll(async () => {
  dir = mkdtempSync(join(tmpdir(), 'nullsteer-cli-check-'));
  arrayFile = join(dir, 'ring-8.json');
  writeFileSync(arrayFile, JSON.stringify({ name: 'cli ring', positions: RING }));
  const frames = 1 << 17;
  const x = renderPlaneWaves({ positions: RING, sampleRateHz: 48000, frames, speedOfSoundMps: 343.2, sources: [{ azimuthDeg: 120, rms: 0.1, loHz: 200, hiHz: 8000, seed: 31 }], noiseRms: 0.001, noiseSeed: 32 });
  const src = [0, 1, 5, 3, 4, 2, 6, 7];
  const out = new Float32Array(x.length);
  for (let i = 0; i < frames; i++) for (let c = 0; c < M; c++) out[i * M + c] = c === 4 ? 0 : x[i * M + src[c]] * (c === 6 ? -1 : 1);
  wav = join(dir, 'faulty.wav');
  await writeWavFile(wav, { sampleRateHz: 48000, channels: M, encoding: 'float32', interleaved: out });
});

function run(args: string[]) {
  const outs: string[] = [];
  const errs: string[] = [];
  return analyzeCommand(args, { out: (s) => outs.push(s), err: (s) => errs.push(s) }).then((code) => ({ code, out: outs.join('\n'), err: errs.join('\n') }));
}

describe('nullsteer analyze --array-check', () => {
  it('names the faults in a table (direction stated)', async () => {
    const r = await run([wav, '--array', arrayFile, '--array-check', '--azimuth', '120']);
    expect(r.code, r.err).toBe(0);
    expect(r.out).toContain('source at azimuth 120.00° (stated)');
    const faults = r.out.split('faults:\n')[1].split('\n\n')[0].trim().split('\n').map((l) => l.trim());
    expect(faults).toEqual(['channels 2 and 5 look swapped', 'channel 4 dead (digital silence)', 'channel 6 inverted']);
    expect(r.out).toMatch(/"channelOrder":\[0,1,5,3,4,2,6,7\]/);
  });

  it('--json without a direction: the strongest peak, the same object as the REST answer', async () => {
    const r = await run([wav, '--array', arrayFile, '--array-check', '--json', '--bound-us', '30']);
    expect(r.code, r.err).toBe(0);
    const doc = JSON.parse(r.out);
    expect(doc.direction.from).toBe('scan');
    expect(Math.abs(doc.direction.azimuthDeg - 120)).toBeLessThan(1);
    expect(doc.misplacedBoundUs).toBe(30);
    expect(doc.faults.map((f: { kind: string }) => f.kind).sort()).toEqual(['dead', 'inverted', 'swapped']);
    expect(doc.calibration.polarity).toEqual([1, 1, 1, 1, 1, 1, -1, 1]);
    expect(doc.seconds).toBeCloseTo((1 << 17) / 48000, 6);
  });

  it('misspelt and misplaced flags get clear messages', async () => {
    let r = await run([wav, '--array', arrayFile, '--array-chek']);
    expect(r.code).toBe(2);
    expect(r.err.split('\n')[0]).toBe('nullsteer analyze: unknown flag --array-chek; did you mean --array-check?');
    r = await run([wav, '--array', arrayFile, '--azimuth', '30']);
    expect(r.err.split('\n')[0]).toBe('nullsteer analyze: --azimuth and --bound-us go with --array-check');
    r = await run([wav, '--array', arrayFile, '--array-check', '--bound-us', '0']);
    expect(r.err.split('\n')[0]).toBe('nullsteer analyze: --bound-us 0: allowed a number 1–1000');
  });
});
