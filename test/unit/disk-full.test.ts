/**
 * A full disk under the WAV writer, the recorder and the preset store, on a real small tmpfs
 * (./helpers/full-disk.ts; an emulated one where mounting is not permitted). What must hold:
 * the writer reports ENOSPC once as ERR_REC_NO_SPACE and leaves a WAV whose header covers exactly
 * the frames on file; the recorder stops itself with the reason, counts what it could not write,
 * and refuses to start while the free space is below the reserve; it also stops before the disk
 * fills once the free space drops below the reserve; preset saves are refused and leave no
 * temporary file. Outside checks: Python's `wave` module and `sox --i` read the WAV files back.
 */
import { execFileSync } from 'node:child_process';
import { existsSync, mkdirSync, readdirSync, readFileSync, rmSync, statSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it, vi } from 'vitest';

vi.mock('node:fs', async (real) => (await import('../helpers/full-disk-state.ts')).wrapFs(await real()));
vi.mock('node:fs/promises', async (real) => (await import('../helpers/full-disk-state.ts')).wrapFsPromises(await real()));

import { patchParams, type ProcessingParams } from '../../server/engine/params.ts';
import { openWav } from '../../server/io/wav.ts';
import { Recorder, type RecorderStartOptions, type RecorderStatus } from '../../server/outputs/recorder.ts';
import { WavStreamWriter } from '../../server/outputs/wav-writer.ts';
import { PresetError, PresetStore } from '../../server/session/presets.ts';
import { decodeInterleaved, encodeInterleaved } from '../../shared/frame.ts';
import type { Block } from '../../shared/types.ts';
import { smallDisk, tmpFilesUnder, type SmallDisk } from '../helpers/full-disk.ts';

let disk: SmallDisk;
beforeAll(() => {
  disk = smallDisk(2 * 1024 * 1024);
});
afterAll(() => disk.close());

let n = 0;
/** A new folder on the disk, with the ballast and the earlier tests' files gone. */
const fresh = (name: string) => {
  disk.release();
  for (const e of readdirSync(disk.dir)) rmSync(join(disk.dir, e), { recursive: true, force: true });
  const d = join(disk.dir, `${name}${++n}`);
  mkdirSync(d);
  return d;
};

/** Python's wave module (outside reader): channels, rate, frames, and the frames' bytes as hex. */
function pythonWave(path: string): { channels: number; rate: number; frames: number; hex: string } {
  const out = execFileSync('python3', ['-c', 'import sys, wave; w = wave.open(sys.argv[1]); f = w.readframes(w.getnframes()); print(w.getnchannels(), w.getframerate(), w.getnframes(), f.hex())', path], { encoding: 'utf8' });
  const [channels, rate, frames, hex] = out.trim().split(' ');
  return { channels: Number(channels), rate: Number(rate), frames: Number(frames), hex: hex ?? '' };
}

const META: RecorderStartOptions['meta'] = { array: null, params: { lambda: 0.99 }, source: { kind: 'test' } };
const FS = 8000;
const C = 2; // two channels of int16: plain PCM, which Python's wave module reads (it does not read WAVE_FORMAT_EXTENSIBLE)
function block(sampleIndex: number, frames: number): Block {
  const data = new Float32Array(C * frames);
  for (let c = 0; c < C; c++) for (let i = 0; i < frames; i++) data[c * frames + i] = 0.5 * Math.sin(0.013 * (sampleIndex + i) * (c + 1));
  return { streamId: 1, sampleIndex, sampleRateHz: FS, channels: C, frames, data, gap: false, discontinuity: false };
}
/** The int16 bytes a block of frames [from, from + frames) must have on file (interleaved, little-endian). */
function expectedInt16(from: number, frames: number): Uint8Array {
  const b = block(from, frames);
  const inter = new Float32Array(C * frames);
  for (let i = 0; i < frames; i++) for (let c = 0; c < C; c++) inter[i * C + c] = b.data[c * frames + i];
  const out = new Uint8Array(C * frames * 2);
  encodeInterleaved(out, inter, 'int16');
  return out;
}
const tick = () => new Promise<void>((r) => setTimeout(r, 5));

describe('disk full: WAV writer', () => {
  it('ENOSPC is reported once as ERR_REC_NO_SPACE without the folder; the file keeps a header over exactly the frames on it', async () => {
    const dir = fresh('w');
    const path = join(dir, 'x.wav');
    const errors: Error[] = [];
    const w = await WavStreamWriter.open(path, { sampleRateHz: FS, channels: 1, encoding: 'int16', chunkBytes: 4096, onError: (e) => errors.push(e) });
    const ramp = (from: number, k: number) => Float32Array.from({ length: k }, (_, i) => (((from + i) % 2000) - 1000) / 1000);
    w.write(ramp(0, 3001), 3001); // odd data size: the pad byte must be there (RIFF 1991, chunks are word aligned)
    await w.refreshHeader();
    expect(w.headerFrames).toBe(3001);
    disk.fill(0);
    let written = 3001;
    for (let k = 0; k < 400 && errors.length === 0; k++) {
      w.write(ramp(written, 4001), 4001);
      written += 4001;
      await tick();
    }
    expect(errors).toHaveLength(1);
    expect(errors[0]).toMatchObject({ code: 'ERR_REC_NO_SPACE', httpStatus: 507, message: 'not enough free space: write x.wav: no space left on device (ENOSPC)' });
    await expect(w.close()).rejects.toBe(errors[0]);
    expect(errors).toHaveLength(1);
    const onFile = w.headerFrames;
    expect(onFile).toBeGreaterThanOrEqual(3001);
    expect(onFile).toBeLessThan(written);
    // RIFF: header + data + pad byte of odd-sized data, nothing after it (what could not be written is cut off).
    expect(statSync(path).size).toBe(w.headerBytes + 2 * onFile + ((2 * onFile) & 1));
    const py = pythonWave(path);
    expect([py.channels, py.rate, py.frames]).toEqual([1, FS, onFile]);
    expect(execFileSync('sox', ['--i', '-s', path], { encoding: 'utf8' }).trim()).toBe(String(onFile)); // sox (outside reader)
    // The frames on file are the ones written, in order.
    const r = await openWav(path);
    const got = new Float32Array(onFile);
    decodeInterleaved(await r.readFrames(0, onFile), 1, onFile, 'int16', got);
    await r.close();
    const want = ramp(0, onFile);
    let worst = 0;
    for (let i = 0; i < onFile; i++) worst = Math.max(worst, Math.abs(got[i] - want[i]));
    expect(worst).toBeLessThanOrEqual(1 / 32768); // int16 quantisation
  });
});

describe('disk full: recorder', () => {
  it('stops itself on ENOSPC: recording false, the reason in status, counted losses, a readable WAV; no new start while space is short', async () => {
    const dir = fresh('rec');
    const stops: RecorderStatus[] = [];
    const rec = new Recorder({ onStop: (st) => stops.push(st) });
    // No reserve for this start, so that the disk really fills under the writer.
    await rec.start({ dir, dirLabel: 'rec', prefix: 'full', encoding: 'int16', headerRefreshMs: 50, meta: META });
    let next = 0;
    let accepted = 0;
    const push = (frames: number) => {
      if (rec.recording) accepted += frames;
      rec.push(block(next, frames));
      next += frames;
    };
    for (let k = 0; k < 10; k++) push(800); // 1 s
    // Wait until that second is on file (the header refresh hands the open chunk to the file).
    const wavPath = () => join(dir, rec.status().files[0].wav);
    while (!existsSync(wavPath()) || statSync(wavPath()).size < 8000 * C * 2) await tick();
    disk.fill(0);
    for (let k = 0; k < 3000 && rec.recording; k++) {
      push(800);
      await tick();
    }
    expect(rec.recording).toBe(false);
    while (stops.length === 0) await tick(); // the files are closed before onStop
    const st = rec.status();
    expect(stops).toHaveLength(1);
    expect(stops[0]).toEqual(st);
    expect(st.recording).toBe(false);
    expect(st.dir).toBe('rec');
    expect(st.stopReason).toEqual({ code: 'ERR_REC_NO_SPACE', message: expect.stringMatching(/^not enough free space: write full-\d{8}T\d{6}Z-raw-0001\.(wav|json): no space left on device \(ENOSPC\)$/) });
    expect(st.error).toEqual(st.stopReason);
    expect(JSON.stringify(st)).not.toContain(disk.dir);
    const raw = st.tracks.raw;
    expect(raw.files).toHaveLength(1);
    expect(raw.files[0].closed).toBe(true);
    // Every accepted frame is either on file or counted as lost.
    expect(raw.frames + raw.lostFrames).toBe(accepted);
    expect(raw.frames).toBeGreaterThanOrEqual(8000);
    expect(raw.lostFrames).toBeGreaterThan(0);
    expect(st.frames).toBe(raw.frames);
    const wav = join(dir, raw.files[0].wav);
    const py = pythonWave(wav);
    expect([py.channels, py.rate, py.frames]).toEqual([C, FS, raw.frames]);
    expect(py.hex).toBe(Buffer.from(expectedInt16(0, raw.frames)).toString('hex'));
    expect(tmpFilesUnder(disk.dir)).toEqual([]);
    rec.push(block(next, 800)); // ignored once stopped
    expect(rec.status().frames).toBe(raw.frames);
    await expect(rec.stop()).rejects.toMatchObject({ code: 'ERR_REC_NOT_RECORDING', httpStatus: 409 });

    // While space is short, a start is refused (507); with space back, it starts again.
    const again = { dir, dirLabel: 'rec', prefix: 'full', encoding: 'int16' as const, minFreeBytes: 65536, meta: META };
    await expect(rec.start(again)).rejects.toMatchObject({
      code: 'ERR_REC_NO_SPACE',
      httpStatus: 507,
      message: expect.stringMatching(/^not enough free space: the recordings folder "rec" has \d+ bytes free, below the reserve of 65536 bytes$/),
    });
    disk.release();
    await rec.start(again);
    expect(rec.status()).toMatchObject({ recording: true, stopReason: null, error: null });
    push(800);
    const done = await rec.stop();
    expect(done).toMatchObject({ recording: false, stopReason: null, frames: 800 });
    expect(stops).toHaveLength(1); // a stop on request is not reported through onStop
  });

  it('stops before the disk fills once the free space drops below the reserve; everything accepted is on file', async () => {
    const dir = fresh('reserve');
    const stops: RecorderStatus[] = [];
    const rec = new Recorder({ onStop: (st) => stops.push(st) });
    const reserve = 1024 * 1024;
    // Reserve 1 MiB on a 2 MiB disk; checked at least every reserve/4 bytes recorded.
    await rec.start({ dir, dirLabel: 'rec', prefix: 'low', encoding: 'int16', minFreeBytes: reserve, spaceCheckMs: 3_600_000, meta: META });
    let next = 0;
    let accepted = 0;
    for (let k = 0; k < 5; k++) {
      rec.push(block(next, 1600));
      accepted += 1600;
      next += 1600;
    }
    disk.fill(512 * 1024);
    // Blocks of 6400 bytes: the 37th after the fill crosses reserve/4 = 262 144 bytes recorded (with
    // the 32 000 bytes before it), which starts a check; 60 blocks could not fill the 512 KiB left.
    for (let k = 0; k < 60 && rec.recording; k++) {
      rec.push(block(next, 1600));
      accepted += 1600;
      next += 1600;
      await tick();
    }
    expect(rec.recording).toBe(false);
    while (stops.length === 0) await tick();
    const st = rec.status();
    expect(st.stopReason).toEqual({ code: 'ERR_REC_NO_SPACE', message: expect.stringMatching(/^not enough free space: the recordings folder "rec" has \d+ bytes free, below the reserve of 1048576 bytes$/) });
    const free = Number(/has (\d+) bytes free/.exec(st.stopReason!.message)![1]);
    expect(free).toBeLessThan(reserve);
    expect(free).toBeGreaterThan(100 * 1024); // stopped with room to spare
    console.log(`reserve stop (${disk.mounted ? 'tmpfs' : 'emulated'}): ${accepted} frames on file, stopped with ${free} bytes free of a ${reserve}-byte reserve`);
    expect(st.tracks.raw).toMatchObject({ frames: accepted, lostFrames: 0 });
    const wav = join(dir, st.files[0].wav);
    const py = pythonWave(wav);
    expect([py.channels, py.frames]).toEqual([C, accepted]);
    expect(py.hex).toBe(Buffer.from(expectedInt16(0, accepted)).toString('hex'));
    const side = JSON.parse(readFileSync(join(dir, st.files[0].sidecar), 'utf8'));
    expect(side).toMatchObject({ closed: true, frames: accepted });
    expect(tmpFilesUnder(disk.dir)).toEqual([]);
  });
});

describe('disk full: presets', () => {
  const BASE: ProcessingParams = {
    lambda: 0.99,
    loading: { mode: 'relative', ratio: 0.01 },
    bandHz: [300, 6000],
    grid: { azimuthDeg: { startDeg: 0, stopDeg: 359, stepDeg: 1 } },
    methods: ['mvdr', 'conventional'],
    spectrumRateHz: 20,
    normalise: false,
    fftSize: 512,
  };
  const validate = (p: unknown) => patchParams(BASE, p, { sampleRateHz: 48000, hop: 256 });

  it('a save on a full disk is refused as no-space, leaves no temporary file and the earlier version intact', () => {
    const dir = fresh('presets');
    const s = new PresetStore(dir, validate, { label: 'data/presets' });
    s.save('keep', BASE);
    const before = readFileSync(join(dir, 'keep.json'), 'utf8');
    disk.fill(0);
    let err: unknown = null;
    try {
      s.save('keep', { ...BASE, lambda: 0.9 }, { overwrite: true });
    } catch (e) {
      err = e;
    }
    expect(err).toBeInstanceOf(PresetError);
    expect(err).toMatchObject({ kind: 'no-space', presetName: 'keep', message: 'saving preset "keep": no space left on device (ENOSPC)' });
    expect(readdirSync(dir)).toEqual(['keep.json']);
    expect(readFileSync(join(dir, 'keep.json'), 'utf8')).toBe(before);
    expect(s.get('keep').params.lambda).toBe(0.99);
  });

  it('a save is refused while the free space is below the reserve; stale temporary files go at start-up', () => {
    const dir = fresh('presets');
    writeFileSync(join(dir, 'old.json.4242.tmp'), '{"name": "old", "sav');
    const s = new PresetStore(dir, validate, { minFreeBytes: 65536, label: 'data/presets' });
    expect(existsSync(join(dir, 'old.json.4242.tmp'))).toBe(false);
    disk.fill(4096);
    expect(() => s.save('x', BASE)).toThrow(
      expect.objectContaining({ kind: 'no-space', message: expect.stringMatching(/^the presets folder "data\/presets" has \d+ bytes free, below the reserve of 65536 bytes$/) }),
    );
    expect(readdirSync(dir)).toEqual([]);
    disk.release();
    expect(s.save('x', BASE).preset.name).toBe('x');
  });
});
