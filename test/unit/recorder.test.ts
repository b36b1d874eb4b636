import { spawn, spawnSync } from 'node:child_process';
import { mkdtempSync, readdirSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { basename, join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { afterAll, describe, expect, it } from 'vitest';
import { decodeInterleaved } from '../../shared/frame.ts';
import type { Block } from '../../shared/types.ts';
import { openWav, WAVE_FORMAT_EXTENSIBLE, WAVE_FORMAT_PCM } from '../../server/io/wav.ts';
import { fileStamp, Recorder, type RecorderStartOptions } from '../../server/outputs/recorder.ts';
import type { SidecarDoc } from '../../server/outputs/sidecar.ts';

const ROOT = fileURLToPath(new URL('../../', import.meta.url));
const base = mkdtempSync(join(tmpdir(), 'nullsteer-recorder-'));
afterAll(() => rmSync(base, { recursive: true, force: true }));
let n = 0;
const freshDir = () => join(base, `r${++n}`);

const META: RecorderStartOptions['meta'] = {
  array: { name: 'line4', positions: [[0, 0, 0], [0.05, 0, 0], [0.1, 0, 0], [0.15, 0, 0]] },
  params: { method: 'mvdr', lambda: 0.98 },
  source: { kind: 'simulator' },
};

/** Deterministic planar block content; gap blocks carry garbage to prove zeros are written instead. */
function block(sampleIndex: number, frames: number, channels: number, opts: Partial<Block> = {}): Block {
  const data = new Float32Array(channels * frames);
  for (let c = 0; c < channels; c++) for (let i = 0; i < frames; i++) data[c * frames + i] = opts.gap ? 0.7 : 0.9 * Math.sin(0.01 * (sampleIndex + i) + c);
  return { streamId: 1, sampleIndex, sampleRateHz: 8000, channels, frames, data, gap: false, discontinuity: false, ...opts };
}

async function readWav(path: string) {
  const r = await openWav(path);
  try {
    const bytes = await r.readFrames(0, r.info.frames);
    const samples = new Float32Array(r.info.channels * r.info.frames);
    decodeInterleaved(bytes, r.info.channels, r.info.frames, r.info.encoding, samples);
    return { info: r.info, samples };
  } finally {
    await r.close();
  }
}
const sidecar = (dir: string, name: string): SidecarDoc => JSON.parse(readFileSync(join(dir, name), 'utf8'));

describe('Recorder: sample-exact raw capture', () => {
  it('the WAV holds exactly the timeline: gap blocks as exact zeros, the rest within quantisation; the sidecar lists gaps and changes', async () => {
    const dir = freshDir();
    const rec = new Recorder();
    await rec.start({ dir, prefix: 'test', encoding: 'int24', meta: META });
    const sizes = [128, 128, 77, 128, 300, 128, 1, 128];
    const gapAt = new Set([2, 3, 6]); // 2 and 3 are contiguous: one merged gap
    const blocks: Block[] = [];
    let idx = 1000;
    sizes.forEach((frames, k) => {
      const b = block(idx, frames, 4, { gap: gapAt.has(k) });
      blocks.push(b);
      rec.push(b);
      if (k === 1) rec.noteParams(idx + frames, { method: 'mvdr', lambda: 0.99 }, { lambda: 0.99 });
      if (k === 4) rec.noteParams(idx, { method: 'das', lambda: 0.99 });
      idx += frames;
    });
    const total = sizes.reduce((a, b) => a + b, 0);
    const st = await rec.stop();
    expect(st).toMatchObject({ recording: false, frames: total });
    expect(st.files).toHaveLength(1);
    const f = st.files[0];
    expect(f.wav).toMatch(/^test-\d{8}T\d{6}Z-raw-0001\.wav$/);
    expect(f).toMatchObject({ track: 'raw', part: 1, startSampleIndex: 1000, frames: total, closed: true });

    const { info, samples } = await readWav(join(dir, f.wav));
    expect(info).toMatchObject({ channels: 4, sampleRateHz: 8000, encoding: 'int24', frames: total, formatTag: WAVE_FORMAT_EXTENSIBLE });
    let worst = 0;
    for (const b of blocks) {
      const off = b.sampleIndex - 1000;
      for (let c = 0; c < 4; c++) {
        for (let i = 0; i < b.frames; i++) {
          const got = samples[c * total + off + i];
          if (b.gap) expect(got).toBe(0);
          else worst = Math.max(worst, Math.abs(got - b.data[c * b.frames + i]));
        }
      }
    }
    expect(worst).toBeLessThanOrEqual(0.5 / 8388608 + 1e-9);

    const doc = sidecar(dir, f.sidecar);
    expect(doc).toMatchObject({
      format: 'nullsteer-recording',
      version: 1,
      file: f.wav,
      track: 'raw',
      part: 1,
      startSampleIndex: 1000,
      endSampleIndex: 1000 + total,
      frames: total,
      sampleRateHz: 8000,
      channels: 4,
      encoding: 'int24',
      container: 'wav',
      source: { kind: 'simulator' },
      array: META.array,
      params: META.params,
      closed: true,
      previousFile: null,
      nextFile: null,
      discontinuities: [],
    });
    expect(doc.gaps).toEqual([
      { sampleIndex: 1000 + 256, frames: 77 + 128 },
      { sampleIndex: 1000 + 256 + 205 + 300 + 128, frames: 1 },
    ]);
    expect(doc.changes).toHaveLength(2);
    expect(doc.changes[0]).toMatchObject({ sampleIndex: 1256, patch: { lambda: 0.99 } });
    expect(doc.changes[1]).toMatchObject({ sampleIndex: 1461, params: { method: 'das', lambda: 0.99 } });
    // Wall clock is derived from the sample index: 256 samples at 8 kHz after the start.
    const dt = Date.parse(doc.changes[0].wallClock) - Date.parse(doc.startWallClock);
    expect(dt).toBe(32);
    expect(readdirSync(dir).filter((x) => x.endsWith('.tmp'))).toEqual([]);
  });

  it('rotation by seconds: consecutive parts within the limit, frames add up, sidecars chain', async () => {
    const dir = freshDir();
    const rec = new Recorder();
    await rec.start({ dir, prefix: 'rot', encoding: 'int16', rotateSeconds: 0.1, meta: META }); // 800 frames
    let idx = 0;
    for (let k = 0; k < 30; k++) {
      rec.push(block(idx, 100 + (k % 3) * 7, 2, { gap: k === 12 }));
      idx += 100 + (k % 3) * 7;
      if (k === 20) rec.noteParams(idx, { method: 'mvdr', lambda: 0.5 });
    }
    const st = await rec.stop();
    const parts = st.files;
    expect(parts.length).toBeGreaterThan(3);
    expect(parts.map((p) => p.part)).toEqual(parts.map((_, i) => i + 1));
    let expectStart = 0;
    let sum = 0;
    for (let i = 0; i < parts.length; i++) {
      const p = parts[i];
      const doc = sidecar(dir, p.sidecar);
      const { info } = await readWav(join(dir, p.wav));
      expect(info.frames).toBe(doc.frames);
      expect(info.frames).toBeLessThanOrEqual(800);
      expect(info.formatTag).toBe(WAVE_FORMAT_PCM);
      expect(doc.startSampleIndex).toBe(expectStart);
      expect(doc.endSampleIndex).toBe(expectStart + info.frames);
      expect(doc.previousFile).toBe(i === 0 ? null : parts[i - 1].wav);
      expect(doc.nextFile).toBe(i === parts.length - 1 ? null : parts[i + 1].wav);
      expect(doc.closed).toBe(true);
      expectStart += info.frames;
      sum += info.frames;
    }
    expect(sum).toBe(idx);
    expect(st.frames).toBe(idx);
    // The gap sits in whichever part covers it; parts after the change start with the new params.
    const docs = parts.map((p) => sidecar(dir, p.sidecar));
    expect(docs.flatMap((d) => d.gaps)).toHaveLength(1);
    expect(docs.at(-1)!.params).toEqual({ method: 'mvdr', lambda: 0.5 });
    expect(docs[0].params).toEqual(META.params);
  });

  it('rotation by bytes keeps every part within rotateBytes', async () => {
    const dir = freshDir();
    const rec = new Recorder();
    await rec.start({ dir, encoding: 'float32', rotateBytes: 4096, meta: META });
    let idx = 0;
    for (let k = 0; k < 20; k++) {
      rec.push(block(idx, 64, 3));
      idx += 64;
    }
    const st = await rec.stop();
    expect(st.files.length).toBe(Math.ceil(20 / Math.floor(4096 / (64 * 12))));
    for (const p of st.files) expect(p.bytes).toBeLessThanOrEqual(4096);
    expect(st.files.reduce((a, p) => a + p.frames, 0)).toBe(idx);
    expect(st.bytes).toBe(idx * 12);
  });

  it('a discontinuity or a block that does not continue the clock ends the part; both sidecars note it', async () => {
    const dir = freshDir();
    const rec = new Recorder();
    await rec.start({ dir, encoding: 'int16', meta: META });
    rec.push(block(0, 100, 2));
    rec.push(block(100, 100, 2));
    rec.push(block(50_000, 100, 2, { discontinuity: true }));
    rec.push(block(50_100, 100, 2));
    rec.push(block(60_000, 100, 2)); // unflagged jump
    const st = await rec.stop();
    expect(st.files.map((f) => [f.startSampleIndex, f.frames])).toEqual([
      [0, 200],
      [50_000, 200],
      [60_000, 100],
    ]);
    expect(st.tracks.raw.breaks).toBe(2);
    const [a, b, c] = st.files.map((f) => sidecar(dir, f.sidecar));
    expect(a.discontinuities).toEqual([{ kind: 'discontinuity', sampleIndex: 200, nextSampleIndex: 50_000, nextFile: st.files[1].wav }]);
    expect(b.discontinuities).toEqual([
      { kind: 'discontinuity', sampleIndex: 50_000, previousEndSampleIndex: 200, previousFile: st.files[0].wav },
      { kind: 'clock', sampleIndex: 50_200, nextSampleIndex: 60_000, nextFile: st.files[2].wav },
    ]);
    expect(c.discontinuities[0]).toMatchObject({ kind: 'clock', previousEndSampleIndex: 50_200 });
    // The parts stay linked across breaks (the discontinuities say the timeline does not run on).
    expect(a.nextFile).toBe(st.files[1].wav);
    expect(c.previousFile).toBe(st.files[1].wav);
  });

  it('a second track (beams) records its own channel count beside raw', async () => {
    const dir = freshDir();
    const rec = new Recorder();
    await rec.start({ dir, prefix: 'two', encoding: 'float32', meta: META });
    const beams = rec.addTrack('beams', { channels: 3 });
    expect(beams.name).toBe('beams');
    for (let k = 0; k < 4; k++) {
      rec.push(block(k * 64, 64, 4));
      rec.pushTrack('beams', block(k * 64, 64, 3));
    }
    rec.pushTrack('beams', block(256, 64, 5)); // wrong channel count: the track fails, raw goes on
    rec.push(block(256, 64, 4));
    const st = await rec.stop();
    expect(st.tracks.raw.frames).toBe(320);
    expect(st.tracks.beams.frames).toBe(256);
    expect(st.tracks.beams.error).toMatchObject({ code: 'ERR_REC_BAD_BLOCK' });
    expect(st.error).toMatchObject({ code: 'ERR_REC_BAD_BLOCK' });
    const beamFile = st.files.find((f) => f.track === 'beams')!;
    expect(beamFile.wav).toMatch(/-beams-0001\.wav$/);
    expect((await readWav(join(dir, beamFile.wav))).info).toMatchObject({ channels: 3, frames: 256, formatTag: WAVE_FORMAT_EXTENSIBLE });
  });

  it('status while recording; start twice and stop when idle are refused with catalogue codes', async () => {
    const dir = freshDir();
    const rec = new Recorder();
    expect(rec.status()).toMatchObject({ recording: false, files: [], frames: 0 });
    await expect(rec.stop()).rejects.toMatchObject({ code: 'ERR_REC_NOT_RECORDING', httpStatus: 409 });
    const st0 = await rec.start({ dir, meta: META });
    expect(st0).toMatchObject({ recording: true, dir: basename(dir), files: [], frames: 0 }); // status names the folder, not its absolute path
    expect(Date.parse(st0.startedAt!)).toBeGreaterThan(0);
    await expect(rec.start({ dir, meta: META })).rejects.toMatchObject({ code: 'ERR_REC_ALREADY_RECORDING' });
    rec.push(block(0, 80, 2));
    const st = rec.status();
    expect(st).toMatchObject({ recording: true, frames: 80, bytes: 80 * 8 });
    expect(st.files).toHaveLength(1);
    expect(st.files[0]).toMatchObject({ frames: 80, closed: false });
    await rec.stop();
    rec.push(block(80, 80, 2)); // ignored after stop
    expect(rec.status().frames).toBe(80);
    await expect(rec.start({ dir, encoding: 'int8' as never, meta: META })).rejects.toMatchObject({ code: 'ERR_REC_BAD_OPTIONS' });
    // A second recording into the same directory never reuses a name (same second: a -2 suffix).
    await rec.start({ dir, meta: META });
    rec.push(block(0, 80, 2));
    const again = await rec.stop();
    expect(again.files[0].wav).not.toBe(st.files[0].wav);
    expect(again.files[0].wav).toMatch(/^nullsteer-\d{8}T\d{6}Z(-2)?-raw-0001\.wav$/);
  });

  it('fileStamp is ISO 8601 basic UTC', () => {
    expect(fileStamp(Date.UTC(2025, 0, 2, 3, 4, 5, 678))).toBe('20250102T030405Z');
  });
});

describe('Recorder: crash safety', () => {
  it('kill -9 during a real-time recording leaves a readable WAV missing at most the last second, and a sidecar with the gap and changes', async () => {
    const dir = freshDir();
    const script = join(base, 'crash-child.mts');
    const recorderUrl = new URL('../../server/outputs/recorder.ts', import.meta.url).href;
    writeFileSync(
      script,
      `import { Recorder } from ${JSON.stringify(recorderUrl)};
const fs = 16000, C = 4, B = 160;
const rec = new Recorder();
await rec.start({ dir: ${JSON.stringify(dir)}, prefix: 'crash', encoding: 'int24', headerRefreshMs: 500,
  meta: { array: null, params: { lambda: 0.9 }, source: { kind: 'test' } } });
const data = new Float32Array(C * B);
let idx = 0;
const t0 = performance.now();
function tick() {
  const due = Math.floor(((performance.now() - t0) / 1000) * fs);
  while (idx + B <= due) {
    for (let c = 0; c < C; c++) for (let i = 0; i < B; i++) data[c * B + i] = 0.5 * Math.sin(0.05 * (idx + i) + c);
    const gap = idx >= 6400 && idx < 8000; // 0.4–0.5 s
    rec.push({ streamId: 1, sampleIndex: idx, sampleRateHz: fs, channels: C, frames: B, data, gap, discontinuity: false });
    idx += B;
    if (idx === 3200) rec.noteParams(idx, { lambda: 0.95 }, { lambda: 0.95 });
    if (idx === 9600) rec.noteParams(idx, { lambda: 0.99 }, { lambda: 0.99 });
  }
  process.stdout.write('progress ' + idx + '\\n');
  if (idx < 10 * fs) setTimeout(tick, 10);
}
tick();
`,
    );
    const child = spawn(process.execPath, ['--import', 'tsx', script], { cwd: ROOT, stdio: ['ignore', 'pipe', 'pipe'] });
    let out = '';
    let err = '';
    child.stderr.setEncoding('utf8').on('data', (d: string) => (err += d));
    const fs = 16000;
    let lastSeen = 0;
    let firstAt = 0;
    const exited = new Promise<NodeJS.Signals | null>((resolve) => child.on('exit', (_code, sig) => resolve(sig)));
    await new Promise<void>((resolve, reject) => {
      const t = setTimeout(() => reject(new Error(`child made no progress: ${err}`)), 20_000);
      child.stdout.setEncoding('utf8').on('data', (d: string) => {
        out += d;
        const m = [...out.matchAll(/progress (\d+)\n/g)];
        if (m.length === 0) return;
        lastSeen = Number(m[m.length - 1][1]);
        if (firstAt === 0) firstAt = Date.now();
        if (Date.now() - firstAt >= 2000 && lastSeen >= 2 * fs) {
          clearTimeout(t);
          child.kill('SIGKILL');
          resolve();
        }
      });
    });
    expect(await exited).toBe('SIGKILL');
    // Progress lines read before the kill: frames the child had handed to the recorder.
    const killedAt = lastSeen;
    const allProgress = [...out.matchAll(/progress (\d+)\n/g)].map((m) => Number(m[1]));
    const finalProgress = allProgress[allProgress.length - 1];

    const files = readdirSync(dir);
    const wav = files.find((f) => /^crash-\d{8}T\d{6}Z-raw-0001\.wav$/.test(f))!;
    expect(wav).toBeDefined();
    const { info, samples } = await readWav(join(dir, wav));
    expect(info).toMatchObject({ channels: 4, sampleRateHz: fs, encoding: 'int24' });
    expect(info.frames).toBeGreaterThanOrEqual(killedAt - fs);
    expect(info.frames).toBeLessThanOrEqual(finalProgress);
    expect(info.frames % 160).toBe(0);
    // The gap (0.4–0.5 s) is zeros; the samples around it are the signal.
    for (let c = 0; c < 4; c++) {
      for (let i = 6400; i < 8000; i++) expect(samples[c * info.frames + i]).toBe(0);
      expect(samples[c * info.frames + 100]).toBeCloseTo(0.5 * Math.sin(0.05 * 100 + c), 6);
      expect(samples[c * info.frames + 8100]).toBeCloseTo(0.5 * Math.sin(0.05 * 8100 + c), 6);
    }

    const doc = sidecar(dir, wav.replace(/\.wav$/, '.json'));
    expect(doc).toMatchObject({ closed: false, startSampleIndex: 0, sampleRateHz: fs, channels: 4, params: { lambda: 0.9 } });
    expect(doc.gaps).toEqual([{ sampleIndex: 6400, frames: 1600 }]);
    expect(doc.changes.map((ch) => [ch.sampleIndex, ch.patch])).toEqual([
      [3200, { lambda: 0.95 }],
      [9600, { lambda: 0.99 }],
    ]);
    expect(doc.frames).toBeGreaterThanOrEqual(killedAt - fs);
  });
});

// Outside reader on a recorder file, when Python is there (PCM16 stereo: every wave module reads it).
const hasPython = spawnSync('python3', ['-c', 'import wave'], { encoding: 'utf8' }).status === 0;
describe('Recorder: outside reader', () => {
  it.skipIf(!hasPython)('Python wave reads a recorded part with the right channels, rate and length', async () => {
    const dir = freshDir();
    const rec = new Recorder();
    await rec.start({ dir, encoding: 'int16', meta: META });
    rec.push(block(0, 500, 2));
    rec.push(block(500, 300, 2, { gap: true }));
    rec.push(block(800, 201, 2));
    const st = await rec.stop();
    const r = spawnSync('python3', ['-c', 'import sys, wave; w = wave.open(sys.argv[1]); print(w.getnchannels(), w.getframerate(), w.getnframes())', join(dir, st.files[0].wav)], {
      encoding: 'utf8',
    });
    expect(r.stderr).toBe('');
    expect(r.stdout.trim()).toBe('2 8000 1001');
  });
});
