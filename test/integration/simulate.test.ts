/**
 * `nullsteer simulate` as a user runs it: the WAV it writes holds exactly the samples the live
 * simulator (`--source simulator`, SceneSimulator) renders for the same array and seed, quantised to
 * the file's encoding; and the README's "Try live ingest" example runs with the file it makes.
 *
 * The WAV is read here by hand from the RIFF layout (Microsoft & IBM, Multimedia Programming Interface
 * and Data Specifications 1.0, 1991: chunk id + uint32 LE size; fmt holds channels at +2, sample rate
 * at +4, bits per sample at +14 of its body), not through the project's reader.
 */
import { spawn } from 'node:child_process';
import { mkdtempSync, readFileSync, statSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { afterEach, describe, expect, it } from 'vitest';
import { SceneSimulator } from '../../server/ingest/simulator.ts';
import type { Service } from '../../server/service.ts';
import { getStatus, startTestService, waitFor } from '../helpers/service.ts';

const ROOT = fileURLToPath(new URL('../../', import.meta.url));
const BIN = join(ROOT, 'bin/nullsteer.mjs');
const dir = mkdtempSync(join(tmpdir(), 'nullsteer-simulate-'));

let svc: Service | null = null;
afterEach(async () => {
  await svc?.close();
  svc = null;
});

function run(args: string[], cwd = dir): Promise<{ code: number | null; out: string; err: string }> {
  return new Promise((resolve) => {
    const p = spawn(process.execPath, [BIN, ...args], { cwd, stdio: ['ignore', 'pipe', 'pipe'] });
    let out = '';
    let err = '';
    p.stdout.on('data', (d) => (out += d));
    p.stderr.on('data', (d) => (err += d));
    p.once('exit', (code) => resolve({ code, out, err }));
  });
}

interface WavData {
  formatTag: number;
  /** IEEE float samples: format tag 3, or WAVE_FORMAT_EXTENSIBLE (0xFFFE) whose SubFormat GUID starts with 3. */
  isFloat: boolean;
  channels: number;
  sampleRateHz: number;
  bitsPerSample: number;
  data: Buffer;
}

/** Walk the RIFF chunks (RIFF spec 1991; unknown chunks such as JUNK are skipped by their size). */
function readWavByHand(path: string): WavData {
  const b = readFileSync(path);
  expect(b.toString('latin1', 0, 4)).toBe('RIFF');
  expect(b.toString('latin1', 8, 12)).toBe('WAVE');
  let fmt: Omit<WavData, 'data'> | null = null;
  for (let p = 12; p + 8 <= b.length; ) {
    const id = b.toString('latin1', p, p + 4);
    const size = b.readUInt32LE(p + 4);
    if (id === 'fmt ') {
      const formatTag = b.readUInt16LE(p + 8);
      // WAVE_FORMAT_EXTENSIBLE: cbSize at +16, SubFormat GUID at +24 of the body (its first two bytes are the format tag).
      const isFloat = formatTag === 3 || (formatTag === 0xfffe && size >= 40 && b.readUInt16LE(p + 8 + 24) === 3);
      fmt = { formatTag, isFloat, channels: b.readUInt16LE(p + 10), sampleRateHz: b.readUInt32LE(p + 12), bitsPerSample: b.readUInt16LE(p + 22) };
    }
    if (id === 'data') {
      expect(fmt).not.toBeNull();
      return { ...fmt!, data: b.subarray(p + 8, p + 8 + size) };
    }
    p += 8 + size + (size & 1);
  }
  throw new Error(`${path}: no data chunk`);
}

/**
 * The SceneSimulator's samples for the first `frames` frames, interleaved, as float64 copies of the
 * float32 values. Rendered with blockFrames 480 (the server's default), not the tool's own block
 * size: the simulator's output must not depend on it.
 */
function simulatorSamples(arrayFile: string, seed: number, sampleRateHz: number, frames: number): Float32Array {
  const geometry = JSON.parse(readFileSync(join(ROOT, arrayFile), 'utf8'));
  const blockFrames = 480;
  const sim = new SceneSimulator({ geometry, sampleRateHz, blockFrames, seed, speedOfSoundMps: 343.2 });
  const M = sim.channels;
  const out = new Float32Array(frames * M);
  for (let start = 0; start < frames; start += blockFrames) {
    const b = sim.next();
    for (let i = 0; i < blockFrames && start + i < frames; i++) for (let c = 0; c < M; c++) out[(start + i) * M + c] = b.data[c * blockFrames + i];
  }
  return out;
}

/** Integer sample k of the data chunk (little-endian two's complement, `bits` wide). */
function intSample(data: Buffer, k: number, bits: number): number {
  if (bits === 16) return data.readInt16LE(2 * k);
  if (bits === 24) return data.readIntLE(3 * k, 3);
  return data.readInt32LE(4 * k);
}

/** Count of samples that differ from the simulator's, quantised as the usage text says (round to nearest, clip). */
function mismatches(w: WavData, x: Float32Array): number {
  let bad = 0;
  if (w.isFloat) {
    for (let k = 0; k < x.length; k++) if (w.data.readFloatLE(4 * k) !== x[k]) bad++;
    return bad;
  }
  const full = 2 ** (w.bitsPerSample - 1);
  for (let k = 0; k < x.length; k++) {
    const q = Math.max(-full, Math.min(full - 1, Math.round(x[k] * full)));
    if (intSample(w.data, k, w.bitsPerSample) !== q) bad++;
  }
  return bad;
}

describe('nullsteer simulate', () => {
  it('line-8, int24, seed 7: 8 channels, seconds × rate frames, every sample equal to the simulator’s', async () => {
    const out = join(dir, 'line8.wav');
    const r = await run(['simulate', out, '--array', join(ROOT, 'config/arrays/line-8.json'), '--seconds', '0.75', '--seed', '7']);
    expect(r.err).toBe('');
    expect(r.code).toBe(0);
    expect(r.out).toContain('8 channels, 48000 Hz, int24, 36000 frames');
    const w = readWavByHand(out);
    expect(w.channels).toBe(8);
    expect(w.sampleRateHz).toBe(48000);
    expect(w.bitsPerSample).toBe(24);
    expect(w.data.length).toBe(0.75 * 48000 * 8 * 3);
    const x = simulatorSamples('config/arrays/line-8.json', 7, 48000, 36000);
    expect(mismatches(w, x)).toBe(0);
    // A different seed gives different samples (the check above is not vacuous).
    expect(mismatches(w, simulatorSamples('config/arrays/line-8.json', 8, 48000, 36000))).toBeGreaterThan(30000 * 8);
  });

  it('ring-24 at 16 kHz in int16 and float32, default seed = simulator.seed of config/default.json', async () => {
    const seed = JSON.parse(readFileSync(join(ROOT, 'config/default.json'), 'utf8')).simulator.seed;
    // 0.3 s at 16 kHz = 4800 frames: the tool's own block size, plus a shorter last block below.
    for (const [encoding, seconds, frames] of [['int16', '0.3', 4800], ['float32', '0.31', 4960]] as const) {
      const out = join(dir, `ring24-${encoding}.wav`);
      const r = await run(['simulate', out, '--array', join(ROOT, 'config/arrays/ring-24.json'), '--seconds', seconds, '--rate', '16000', '--encoding', encoding]);
      expect(r.err).toBe('');
      expect(r.code).toBe(0);
      const w = readWavByHand(out);
      expect(w.channels).toBe(24);
      expect(w.sampleRateHz).toBe(16000);
      expect(w.bitsPerSample).toBe(encoding === 'int16' ? 16 : 32);
      expect(w.data.length).toBe(frames * 24 * (encoding === 'int16' ? 2 : 4));
      expect(w.isFloat).toBe(encoding === 'float32');
      expect(mismatches(w, simulatorSamples('config/arrays/ring-24.json', seed, 16000, frames))).toBe(0);
    }
  });

  it('refuses an existing OUT unless --force, names unknown flags and missing array files', async () => {
    const out = join(dir, 'exists.wav');
    writeFileSync(out, 'keep me');
    const array = join(ROOT, 'config/arrays/line-8.json');
    const refused = await run(['simulate', out, '--array', array, '--seconds', '0.01']);
    expect(refused.code).toBe(2);
    expect(refused.err).toContain('exists.wav exists');
    expect(refused.err).toContain('--force');
    expect(readFileSync(out, 'utf8')).toBe('keep me');

    const forced = await run(['simulate', out, '--array', array, '--seconds', '0.01', '--force']);
    expect(forced.code).toBe(0);
    expect(readWavByHand(out).data.length).toBe(480 * 8 * 3);

    const unknown = await run(['simulate', join(dir, 'u.wav'), '--array', array, '--colour', 'blue']);
    expect(unknown.code).toBe(2);
    // The shared flag check (server/tools/flag-suggest.ts): one line naming the flag, then the usage with every flag.
    expect(unknown.err).toContain('unknown flag --colour');
    for (const f of ['--array', '--seconds', '--seed', '--rate', '--encoding', '--force']) expect(unknown.err).toContain(f);

    const missing = await run(['simulate', join(dir, 'm.wav'), '--array', 'no/such-array.json']);
    expect(missing.code).toBe(2);
    expect(missing.err).toContain('no/such-array.json');
    expect(missing.err).toContain('no such file (tried ');

    const badEnc = await run(['simulate', join(dir, 'e.wav'), '--array', array, '--encoding', 'int8']);
    expect(badEnc.code).toBe(2);
    expect(badEnc.err).toContain('--encoding int8');
    expect(() => statSync(join(dir, 'u.wav'))).toThrow();
    expect(() => statSync(join(dir, 'm.wav'))).toThrow();
  });

  it('README "Try live ingest": simulate makes the 8-channel 48 kHz file, send delivers all of it to a line-8 server', async () => {
    const out = join(dir, 'recording.wav');
    // The README's command, run from the project folder (its --array path is relative to it).
    const made = await run(['simulate', out, '--array', 'config/arrays/line-8.json', '--seconds', '20'], ROOT);
    expect(made.err).toBe('');
    expect(made.code).toBe(0);
    const w = readWavByHand(out);
    expect([w.channels, w.sampleRateHz]).toEqual([8, 48000]);
    const frames = 20 * 48000;
    expect(w.data.length).toBe(frames * 8 * 3);

    svc = await startTestService({ array: { file: join(ROOT, 'config/arrays/line-8.json') } });
    const sent = await run(['send', out, '--udp', `127.0.0.1:${svc.udpPort}`, '--speed', '4', '--stream-id', '5']);
    expect(sent.err).toBe('');
    expect(sent.code).toBe(0);
    await waitFor(async () => (await getStatus(svc!)).timeline.samples >= frames, 30_000, 'all samples of recording.wav');
    const st = await getStatus(svc);
    expect(st.streams).toHaveLength(1);
    expect(st.streams[0]).toMatchObject({ streamId: 5, samplesAccepted: frames, framesLost: 0, gapSamples: 0, encoding: 'int24' });
    expect(Object.values(st.ingest.rejected).every((n) => n === 0)).toBe(true);
  }, 90_000);
});
