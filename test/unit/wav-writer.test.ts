import { spawnSync } from 'node:child_process';
import { mkdtempSync, readFileSync, rmSync, statSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { decodeInterleaved } from '../../shared/frame.ts';
import { encodeSamples, openWav, WAVE_FORMAT_EXTENSIBLE, WAVE_FORMAT_IEEE_FLOAT, WAVE_FORMAT_PCM } from '../../server/io/wav.ts';
import { isOutputError, OUTPUT_ERRORS, WavStreamWriter, type RecordingEncoding } from '../../server/outputs/wav-writer.ts';

const dir = mkdtempSync(join(tmpdir(), 'nullsteer-wav-writer-'));
afterAll(() => rmSync(dir, { recursive: true, force: true }));
let n = 0;
const fresh = (ext = 'wav') => join(dir, `f${++n}.${ext}`);

/** Planar (channel-major) test signal in about ±1.1, so integer encodings also clip. */
function planar(channels: number, frames: number, offset = 0): Float32Array {
  const x = new Float32Array(channels * frames);
  for (let c = 0; c < channels; c++) for (let i = 0; i < frames; i++) x[c * frames + i] = 1.1 * Math.sin(0.013 * (offset + i) * (c + 1) + 0.3 * c);
  return x;
}

/** Planar → interleaved, the reference layout of WAV data. */
function interleave(p: Float32Array, channels: number, frames: number): Float32Array {
  const out = new Float32Array(channels * frames);
  for (let c = 0; c < channels; c++) for (let i = 0; i < frames; i++) out[i * channels + c] = p[c * frames + i];
  return out;
}

async function readAll(path: string) {
  const r = await openWav(path);
  try {
    return { info: r.info, bytes: await r.readFrames(0, r.info.frames) };
  } finally {
    await r.close();
  }
}

/** python3 with the wave module, or null (the tests must run without Python). */
const python = (() => {
  const r = spawnSync('python3', ['-c', 'import sys, wave; print(sys.version_info[0] * 100 + sys.version_info[1])'], { encoding: 'utf8' });
  return r.status === 0 ? { version: Number(r.stdout.trim()) } : null;
})();
function pythonWave(path: string): [number, number, number] {
  const r = spawnSync('python3', ['-c', 'import sys, wave; w = wave.open(sys.argv[1]); print(w.getnchannels(), w.getframerate(), w.getnframes())', path], {
    encoding: 'utf8',
  });
  if (r.status !== 0) throw new Error(r.stderr);
  return r.stdout.trim().split(/\s+/).map(Number) as [number, number, number];
}

describe('WavStreamWriter round trip', () => {
  const cases: { channels: number; encoding: RecordingEncoding; tag: number }[] = [
    { channels: 1, encoding: 'int16', tag: WAVE_FORMAT_PCM },
    { channels: 2, encoding: 'int16', tag: WAVE_FORMAT_PCM },
    { channels: 3, encoding: 'int16', tag: WAVE_FORMAT_EXTENSIBLE },
    { channels: 1, encoding: 'int24', tag: WAVE_FORMAT_EXTENSIBLE },
    { channels: 5, encoding: 'int24', tag: WAVE_FORMAT_EXTENSIBLE },
    { channels: 4, encoding: 'int32', tag: WAVE_FORMAT_EXTENSIBLE },
    { channels: 2, encoding: 'float32', tag: WAVE_FORMAT_IEEE_FLOAT },
    { channels: 4, encoding: 'float32', tag: WAVE_FORMAT_EXTENSIBLE },
  ];
  for (const { channels, encoding, tag } of cases) {
    it(`${channels} ch ${encoding}: frames, format tag, samples and zeros exact (small chunks)`, async () => {
      const path = fresh();
      // chunkBytes small so blocks straddle chunk boundaries.
      const w = await WavStreamWriter.open(path, { sampleRateHz: 48000, channels, encoding, chunkBytes: 1000 });
      const blocks = [37, 256, 0, 1, 999, 128];
      const silenceAfter = 2; // silence of 300 frames after the third block
      const expected: number[] = [];
      let t = 0;
      blocks.forEach((frames, b) => {
        const p = planar(channels, frames, t);
        w.write(p, frames);
        expected.push(...interleave(p, channels, frames));
        t += frames;
        if (b === silenceAfter) {
          w.writeSilence(300);
          expected.push(...new Array(300 * channels).fill(0));
          t += 300;
        }
      });
      expect(w.frames).toBe(t);
      expect(w.bytes).toBe(t * w.blockAlignBytes);
      await w.close();
      const { info, bytes } = await readAll(path);
      expect(info).toMatchObject({ channels, sampleRateHz: 48000, encoding, frames: t, formatTag: tag, truncated: false, container: 'wav' });
      // The same bytes shared/frame.ts's quantiser makes of the interleaved reference …
      expect(Buffer.from(bytes).equals(Buffer.from(encodeSamples(expected, encoding)))).toBe(true);
      // … and within half a step of the input (clipped at full scale).
      const back = new Float32Array(channels * t);
      decodeInterleaved(bytes, channels, t, encoding, back);
      const step = encoding === 'int16' ? 1 / 32768 : encoding === 'int24' ? 1 / 8388608 : encoding === 'int32' ? 2 ** -31 : 0;
      // int32 steps are finer than float32 resolves: the read-back (float32) is within half its spacing, ≤ 2^-25 below 1.
      const tolerance = encoding === 'int32' ? 2 ** -25 + step : step / 2 + 1e-9;
      let worst = 0;
      for (let i = 0; i < t; i++) {
        for (let c = 0; c < channels; c++) {
          const want = expected[i * channels + c];
          const clipped = encoding === 'float32' ? want : Math.max(-1, Math.min(1 - step, want));
          worst = Math.max(worst, Math.abs(back[c * t + i] - clipped));
        }
      }
      expect(worst).toBeLessThanOrEqual(tolerance);
      // The file ends at the data (plus RIFF's pad byte for odd sizes).
      const dataBytes = t * w.blockAlignBytes;
      expect(statSync(path).size).toBe(w.headerBytes + dataBytes + (dataBytes & 1));
    });
  }

  it('writes a header an independent parser accepts: RIFF size, JUNK reserve for ds64, fmt, data size, pad byte', async () => {
    const path = fresh();
    const w = await WavStreamWriter.open(path, { sampleRateHz: 8000, channels: 1, encoding: 'int24' });
    w.write(planar(1, 5), 5); // 15 bytes: odd, so one pad byte
    await w.close();
    const b = readFileSync(path);
    const id = (at: number) => b.toString('latin1', at, at + 4);
    expect(id(0)).toBe('RIFF');
    expect(b.readUInt32LE(4)).toBe(b.length - 8);
    expect(id(8)).toBe('WAVE');
    expect(id(12)).toBe('JUNK');
    expect(b.readUInt32LE(16)).toBe(28);
    expect(id(48)).toBe('fmt ');
    expect(b.readUInt16LE(56)).toBe(WAVE_FORMAT_EXTENSIBLE); // int24 → EXTENSIBLE
    expect(id(w.headerBytes - 8)).toBe('data');
    expect(b.readUInt32LE(w.headerBytes - 4)).toBe(15);
    expect(b.length).toBe(w.headerBytes + 16);
    expect(b[b.length - 1]).toBe(0);
  });
});

describe('WavStreamWriter while open', () => {
  it('refreshHeader() makes everything written so far readable; later writes wait for the next refresh', async () => {
    const path = fresh();
    const w = await WavStreamWriter.open(path, { sampleRateHz: 16000, channels: 3, encoding: 'int16', headerRefreshMs: 60_000 });
    w.write(planar(3, 1000), 1000);
    await w.refreshHeader();
    expect(w.headerFrames).toBe(1000);
    let r = await readAll(path);
    expect(r.info).toMatchObject({ frames: 1000, channels: 3, sampleRateHz: 16000, truncated: false });
    w.write(planar(3, 500, 1000), 500);
    r = await readAll(path);
    expect(r.info.frames).toBe(1000); // the header still says 1000 until the next refresh
    await w.refreshHeader();
    r = await readAll(path);
    expect(r.info.frames).toBe(1500);
    await w.close();
  });

  it('the timer refreshes the header every headerRefreshMs: a reader sees all but at most one interval', async () => {
    const path = fresh();
    const fs = 8000;
    const refreshMs = 50;
    const w = await WavStreamWriter.open(path, { sampleRateHz: fs, channels: 2, encoding: 'float32', headerRefreshMs: refreshMs });
    for (let k = 0; k < 10; k++) {
      w.write(planar(2, 80, 80 * k), 80);
      await new Promise((r) => setTimeout(r, 10));
    }
    await new Promise((r) => setTimeout(r, 3 * refreshMs));
    const { info } = await readAll(path);
    expect(info.frames).toBe(800);
    expect(info.frames).toBeGreaterThanOrEqual(w.frames - (fs * refreshMs) / 1000);
    await w.close();
  });

  it('refuses a write beyond maxDataBytes with ERR_REC_FULL and writes nothing of it (the caller rotates)', async () => {
    const path = fresh();
    const w = await WavStreamWriter.open(path, { sampleRateHz: 8000, channels: 2, encoding: 'int16', maxDataBytes: 400 });
    expect(w.framesLeft).toBe(100);
    w.write(planar(2, 60), 60);
    expect(w.framesLeft).toBe(40);
    let err: unknown;
    try {
      w.write(planar(2, 41), 41);
    } catch (e) {
      err = e;
    }
    expect(isOutputError(err) && err.code).toBe('ERR_REC_FULL');
    expect(err).toBeInstanceOf(RangeError);
    w.writeSilence(40);
    expect(w.full).toBe(true);
    await w.close();
    expect((await readAll(path)).info.frames).toBe(100);
  });

  it("onLimit 'rf64' turns the file into RF64 in place (EBU Tech 3306 ds64 over the reserved JUNK)", async () => {
    const path = fresh();
    const w = await WavStreamWriter.open(path, { sampleRateHz: 8000, channels: 2, encoding: 'int16', maxDataBytes: 400, onLimit: 'rf64' });
    w.write(planar(2, 100), 100);
    await w.refreshHeader();
    expect(w.container).toBe('wav');
    w.write(planar(2, 150, 100), 150);
    const { frames } = await w.close();
    expect(frames).toBe(250);
    expect(w.container).toBe('rf64');
    const b = readFileSync(path);
    expect(b.toString('latin1', 0, 4)).toBe('RF64');
    expect(b.readUInt32LE(4)).toBe(0xffffffff);
    expect(b.toString('latin1', 12, 16)).toBe('ds64');
    expect(Number(b.readBigUInt64LE(20))).toBe(b.length - 8);
    expect(Number(b.readBigUInt64LE(28))).toBe(1000);
    expect(Number(b.readBigUInt64LE(36))).toBe(250);
    const { info, bytes } = await readAll(path);
    expect(info).toMatchObject({ container: 'rf64', frames: 250, channels: 2 });
    const ref = encodeSamples(interleave(planar(2, 250), 2, 250), 'int16');
    expect(Buffer.from(bytes).subarray(0, 400).equals(Buffer.from(ref).subarray(0, 400))).toBe(true);
  });

  it('a full queue writes synchronously (counted) and loses nothing', async () => {
    const path = fresh();
    const w = await WavStreamWriter.open(path, { sampleRateHz: 8000, channels: 2, encoding: 'int16', chunkBytes: 64, maxQueueBytes: 0 });
    const p = planar(2, 1000);
    w.write(p, 1000);
    expect(w.syncWrites).toBeGreaterThan(0);
    await w.close();
    const { info, bytes } = await readAll(path);
    expect(info.frames).toBe(1000);
    expect(Buffer.from(bytes).equals(Buffer.from(encodeSamples(interleave(p, 2, 1000), 'int16')))).toBe(true);
  });

  it('bounds the queue otherwise: no synchronous write while it has room', async () => {
    const w = await WavStreamWriter.open(fresh(), { sampleRateHz: 8000, channels: 1, encoding: 'int16', chunkBytes: 256, maxQueueBytes: 1 << 20 });
    for (let k = 0; k < 50; k++) w.write(planar(1, 100, 100 * k), 100);
    expect(w.syncWrites).toBe(0);
    expect(w.maxQueuedBytesSeen).toBeLessThanOrEqual(1 << 20);
    await w.close();
  });
});

describe('WavStreamWriter errors', () => {
  it('catalogue entries have a class, an HTTP status and a message', () => {
    for (const [code, spec] of Object.entries(OUTPUT_ERRORS)) {
      expect(code).toMatch(/^ERR_REC_[A-Z_]+$/);
      expect([Error, RangeError, TypeError]).toContain(spec.errorClass);
      expect(spec.httpStatus).toBeGreaterThanOrEqual(400);
      expect(spec.message.length).toBeGreaterThan(0);
    }
  });

  it('does not overwrite an existing file (ERR_REC_WRITE_FAILED, EEXIST)', async () => {
    const path = fresh();
    writeFileSync(path, 'keep me');
    await expect(WavStreamWriter.open(path, { sampleRateHz: 8000, channels: 1, encoding: 'int16' })).rejects.toMatchObject({
      code: 'ERR_REC_WRITE_FAILED',
      message: expect.stringMatching(/^recording write failed: open .*EEXIST/),
    });
    expect(readFileSync(path, 'utf8')).toBe('keep me');
  });

  it('create() reports a failed open through onError once, then write() throws it', async () => {
    const errors: unknown[] = [];
    const w = WavStreamWriter.create(join(dir, 'missing', 'x.wav'), { sampleRateHz: 8000, channels: 1, encoding: 'int16', onError: (e) => errors.push(e) });
    w.write(planar(1, 10), 10); // queued before the open fails
    await new Promise((r) => setTimeout(r, 50));
    expect(errors).toHaveLength(1);
    expect(errors[0]).toMatchObject({ code: 'ERR_REC_WRITE_FAILED' });
    expect(() => w.write(planar(1, 10), 10)).toThrow(errors[0] as Error);
    await expect(w.close()).rejects.toBe(errors[0]);
    expect(errors).toHaveLength(1);
  });

  it('rejects bad options and writes after close', async () => {
    expect(() => WavStreamWriter.create(fresh(), { sampleRateHz: 0, channels: 1, encoding: 'int16' })).toThrow(/^invalid recording option: sampleRateHz 0/);
    expect(() => WavStreamWriter.create(fresh(), { sampleRateHz: 8000, channels: 1, encoding: 'int8' as RecordingEncoding })).toThrow(RangeError);
    const w = await WavStreamWriter.open(fresh(), { sampleRateHz: 8000, channels: 1, encoding: 'int16' });
    await w.close();
    expect(() => w.write(planar(1, 1), 1)).toThrow(expect.objectContaining({ code: 'ERR_REC_CLOSED' }));
    await w.close(); // idempotent
  });
});

describe('outside reader (Python wave)', () => {
  it.skipIf(python === null)('reads a PCM16 stereo file: channels, rate, frames', async () => {
    const path = fresh();
    const w = await WavStreamWriter.open(path, { sampleRateHz: 44100, channels: 2, encoding: 'int16' });
    w.write(planar(2, 12345), 12345);
    w.writeSilence(55);
    await w.close();
    expect(pythonWave(path)).toEqual([2, 44100, 12400]);
  });

  it.skipIf(python === null)('reads a PCM24 EXTENSIBLE 4-channel file (wave from Python 3.12 on, else scipy.io.wavfile)', async () => {
    const path = fresh();
    const w = await WavStreamWriter.open(path, { sampleRateHz: 48000, channels: 4, encoding: 'int24' });
    w.write(planar(4, 4801), 4801);
    await w.close();
    if (python!.version >= 312) expect(pythonWave(path)).toEqual([4, 48000, 4801]);
    else {
      // Python's wave reads WAVE_FORMAT_EXTENSIBLE only from 3.12 on; scipy's reader is the outside one here.
      const r = spawnSync('python3', ['-c', 'import sys; from scipy.io import wavfile; fs, x = wavfile.read(sys.argv[1]); print(x.shape[1], fs, x.shape[0])', path], { encoding: 'utf8' });
      expect(r.status, r.stderr).toBe(0);
      expect(r.stdout.trim().split(/\s+/).map(Number)).toEqual([4, 48000, 4801]);
    }
  });

  it.skipIf(python === null)('reads a file whose header was refreshed while still open (what a kill leaves)', async () => {
    const path = fresh();
    const w = await WavStreamWriter.open(path, { sampleRateHz: 8000, channels: 1, encoding: 'int16', headerRefreshMs: 60_000 });
    w.write(planar(1, 4000), 4000);
    await w.refreshHeader();
    w.write(planar(1, 1000), 1000);
    await new Promise((r) => setTimeout(r, 20));
    expect(pythonWave(path)).toEqual([1, 8000, 4000]);
    await w.close();
    expect(pythonWave(path)).toEqual([1, 8000, 5000]);
  });
});
