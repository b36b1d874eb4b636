/**
 * The capture source (server/ingest/capture.ts) with real commands: sox (Debian's sox) generating
 * known signals, sh for commands that exit, print to standard error or leave children behind, and
 * this Node binary for byte patterns sox cannot make (NaN, odd write sizes, a partial frame).
 *
 * The reference for samples is sox's own output of the same command written to a file; the
 * scaling is shared/frame.ts's (int16 / 2^15, int24 / 2^23, int32 / 2^31). Waits are conditions
 * on the source's counters (`waitFor`), never wall-clock spacing.
 */
import { execFileSync } from 'node:child_process';
import { mkdtempSync, readdirSync, readFileSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, afterEach, describe, expect, it } from 'vitest';
import { CaptureSource, type CaptureOptions, type CaptureStatus } from '../../server/ingest/capture.ts';
import type { Block } from '../../shared/types.ts';
import { waitFor } from '../helpers/service.ts';

const FS = 48000;
const dir = mkdtempSync(join(tmpdir(), 'nullsteer-capture-'));
afterAll(() => rmSync(dir, { recursive: true, force: true }));

let sources: CaptureSource[] = [];
afterEach(async () => {
  await Promise.all(sources.map((s) => s.stop()));
  sources = [];
});

/** A started source collecting its blocks. restartMinMs 60 s unless given: one run per test. */
function capture(opts: Partial<CaptureOptions> & Pick<CaptureOptions, 'command' | 'channels' | 'encoding'>, hold = false) {
  const blocks: Block[] = [];
  const src = new CaptureSource({ sampleRateHz: FS, restartMinMs: 60_000, restartMaxMs: 60_000, queueMs: 5000, ...opts }, (b) => blocks.push(b));
  sources.push(src);
  if (hold) src.holdDrain(true);
  src.start();
  return { src, blocks };
}

/** sox's output of `args` (which write to "-") written to a file instead, read back. */
function soxReference(args: string[]): Buffer {
  const file = join(dir, `ref-${Math.random().toString(36).slice(2)}.raw`);
  execFileSync('sox', args.map((a) => (a === '-' ? file : a)));
  return readFileSync(file);
}

const soxArgs = (bits: number, encoding: 'signed-integer' | 'floating-point', seconds: number, channels = 4) => [
  '-D', // no dither: the same command gives the same bytes every time
  '-n', '-r', String(FS), '-c', String(channels), '-b', String(bits), '-e', encoding, '-t', 'raw', '-',
  'synth', String(seconds), 'sine', '440', 'sine', '1000', 'sine', '2000', 'sine', '3000',
].slice(0, channels === 4 ? undefined : 13 + 2 + 2 * channels);

/**
 * Check the blocks form one timeline from 0 (each starts where the previous ended), every block
 * bounded, and return channel c's samples as one array.
 */
function timeline(blocks: Block[], channels: number): Float32Array[] {
  let next = 0;
  for (const b of blocks) {
    expect(b.sampleIndex).toBe(next);
    expect(b.channels).toBe(channels);
    expect(b.frames).toBeGreaterThan(0);
    expect(b.frames).toBeLessThanOrEqual(1024);
    expect(b.data.length).toBe(channels * b.frames);
    next += b.frames;
  }
  const out = Array.from({ length: channels }, () => new Float32Array(next));
  for (const b of blocks) for (let c = 0; c < channels; c++) out[c].set(b.data.subarray(c * b.frames, (c + 1) * b.frames), b.sampleIndex);
  return out;
}

/** Interleaved little-endian integers of `bytes` per sample, as numbers. */
function ints(buf: Buffer, bytes: 2 | 3 | 4): Int32Array {
  const n = buf.length / bytes;
  const out = new Int32Array(n);
  for (let k = 0; k < n; k++) out[k] = bytes === 2 ? buf.readInt16LE(2 * k) : bytes === 3 ? buf.readIntLE(3 * k, 3) : buf.readInt32LE(4 * k);
  return out;
}

/** Processes in process group `pgid` that are not zombies (Linux /proc; a zombie holds nothing). */
function liveInGroup(pgid: number): number[] {
  const live: number[] = [];
  for (const name of readdirSync('/proc')) {
    if (!/^\d+$/.test(name)) continue;
    let stat: string;
    try {
      stat = readFileSync(`/proc/${name}/stat`, 'utf8');
    } catch {
      continue;
    }
    // pid (comm) state ppid pgrp … — comm may hold spaces and parentheses: split after the last ')'.
    const f = stat.slice(stat.lastIndexOf(')') + 2).split(' ');
    if (Number(f[2]) === pgid && f[0] !== 'Z' && f[0] !== 'X') live.push(Number(name));
  }
  return live;
}

const ended = (s: CaptureStatus) => s.exits >= 1 && s.nextSample === s.samplesRead && s.queue.queuedBytes === 0;

describe('capture source', () => {
  it('int32: delivers sox output sample for sample (float32 of v / 2^31), frames whole, one timeline', async () => {
    const args = soxArgs(32, 'signed-integer', 2);
    const { src, blocks } = capture({ command: ['sox', ...args], channels: 4, encoding: 'int32' });
    await waitFor(() => ended(src.status()), 20_000, 'the sox run to be delivered');
    const s = src.status();
    expect(s.lastExits[0]).toMatchObject({ code: 0, signal: null });
    expect(s.samplesRead).toBe(2 * FS);
    expect(s.bytesRead).toBe(2 * FS * 16);
    expect(s).toMatchObject({ bytesDiscarded: 0, droppedSamples: 0, gapSamples: 0, discontinuities: 0, starts: 1, restarts: 0 });
    const got = timeline(blocks, 4);
    const ref = ints(soxReference(args), 4);
    expect(ref.length).toBe(2 * FS * 4);
    let differ = 0;
    for (let i = 0; i < 2 * FS; i++) for (let c = 0; c < 4; c++) if (got[c][i] !== Math.fround(ref[4 * i + c] / 2 ** 31)) differ++;
    expect(differ).toBe(0);
    // The signal is not trivially zero: the 3 kHz channel reaches full scale (sox synth, amplitude 1).
    expect(Math.max(...got[3].subarray(0, 2000))).toBeGreaterThan(0.99);
  });

  it('int32 carrying 24-bit samples (low byte zero, as a 24-bit converter gives them): bit for bit after scaling back', async () => {
    // sox writes 24-bit samples, a second sox widens them to 32 bits (value × 256).
    const gen = soxArgs(24, 'signed-integer', 1);
    const widen = ['-D', '-t', 'raw', '-r', String(FS), '-c', '4', '-b', '24', '-e', 'signed-integer', '-', '-b', '32', '-t', 'raw', '-'];
    const { src, blocks } = capture({ command: ['sh', '-c', `sox ${gen.join(' ')} | sox ${widen.join(' ')}`], channels: 4, encoding: 'int32' });
    await waitFor(() => ended(src.status()), 20_000, 'the sox run to be delivered');
    expect(src.status().samplesRead).toBe(FS);
    const got = timeline(blocks, 4);
    const ref24 = ints(soxReference(gen), 3);
    let differ = 0;
    for (let i = 0; i < FS; i++) for (let c = 0; c < 4; c++) if (got[c][i] * 2 ** 31 !== ref24[4 * i + c] * 256) differ++;
    expect(differ).toBe(0);
  });

  it('int24 (packed 3 bytes) and int16: bit for bit after scaling back', async () => {
    for (const [bits, encoding, bytes] of [[24, 'int24', 3], [16, 'int16', 2]] as const) {
      const args = soxArgs(bits, 'signed-integer', 1);
      const { src, blocks } = capture({ command: ['sox', ...args], channels: 4, encoding });
      await waitFor(() => ended(src.status()), 20_000, `the ${encoding} run to be delivered`);
      expect(src.status().samplesRead).toBe(FS);
      const got = timeline(blocks, 4);
      const ref = ints(soxReference(args), bytes);
      let differ = 0;
      for (let i = 0; i < FS; i++) for (let c = 0; c < 4; c++) if (got[c][i] * 2 ** (bits - 1) !== ref[4 * i + c]) differ++;
      expect(differ, encoding).toBe(0);
    }
  });

  it('float32: sox floating-point output as is', async () => {
    const args = soxArgs(32, 'floating-point', 1);
    const { src, blocks } = capture({ command: ['sox', ...args], channels: 4, encoding: 'float32' });
    await waitFor(() => ended(src.status()), 20_000, 'the sox run to be delivered');
    const got = timeline(blocks, 4);
    const buf = soxReference(args);
    const ref = new Float32Array(buf.buffer, buf.byteOffset, buf.length / 4);
    let differ = 0;
    for (let i = 0; i < FS; i++) for (let c = 0; c < 4; c++) if (!Object.is(got[c][i], ref[4 * i + c])) differ++;
    expect(differ).toBe(0);
    expect(src.status().nonFinite).toBe(0);
  });

  it('float32 NaN and ±∞ become 0 and are counted; a partial frame at the end is thrown away and counted', async () => {
    // 2 channels: frames (0.5, NaN), (−0.25, +∞), (1, −∞), then 3 stray bytes.
    const script = 'process.stdout.write(Buffer.from(new Float32Array([0.5, NaN, -0.25, Infinity, 1, -Infinity]).buffer)); process.stdout.write(Buffer.alloc(3))';
    const { src, blocks } = capture({ command: [process.execPath, '-e', script], channels: 2, encoding: 'float32' });
    await waitFor(() => ended(src.status()), 20_000, 'the run to be delivered');
    const s = src.status();
    expect(s).toMatchObject({ samplesRead: 3, bytesRead: 27, bytesDiscarded: 3, nonFinite: 3 });
    const [c0, c1] = timeline(blocks, 2);
    expect([...c0]).toEqual([0.5, -0.25, 1]);
    expect([...c1]).toEqual([0, 0, 0]);
  });

  it('never splits a frame when the command writes in pieces that cut frames (int24, 3 channels, 7-byte writes)', async () => {
    // Frame k, channel c holds the 24-bit value (k·3 + c) · 1001 − 2^22, little-endian, packed.
    const frames = 500;
    const script = `
      const n = ${frames}, b = Buffer.alloc(n * 9);
      for (let k = 0; k < n; k++) for (let c = 0; c < 3; c++) b.writeIntLE((k * 3 + c) * 1001 - 4194304, 9 * k + 3 * c, 3);
      let at = 0;
      const step = () => { if (at >= b.length) return; process.stdout.write(b.subarray(at, at + 7), () => setTimeout(step, 1)); at += 7; };
      step();`;
    const { src, blocks } = capture({ command: [process.execPath, '-e', script], channels: 3, encoding: 'int24' });
    await waitFor(() => ended(src.status()), 30_000, 'the run to be delivered');
    expect(src.status()).toMatchObject({ samplesRead: frames, bytesDiscarded: 0 });
    const got = timeline(blocks, 3);
    let differ = 0;
    for (let k = 0; k < frames; k++) for (let c = 0; c < 3; c++) if (got[c][k] * 2 ** 23 !== (k * 3 + c) * 1001 - 4194304) differ++;
    expect(differ).toBe(0);
    // Written 7 bytes at a time, so delivered in many small blocks, none holding part of a frame.
    expect(blocks.length).toBeGreaterThan(10);
  });

  it('restarts a command that exits, with back-off; the first block of each new run is a discontinuity, the index continues', async () => {
    const args = soxArgs(16, 'signed-integer', 0.2, 2);
    const { src, blocks } = capture({ command: ['sh', '-c', `sox ${args.join(' ')}; exit 3`], channels: 2, encoding: 'int16', restartMinMs: 100, restartMaxMs: 400 });
    // Three restarts delivered: the first three runs are complete.
    await waitFor(() => src.status().discontinuities >= 3, 30_000, 'three restarts delivered');
    const s = src.status();
    expect(s.restarts).toBeGreaterThanOrEqual(3);
    expect(s.lastExits[0]).toMatchObject({ code: 3, signal: null });
    // Waits of 100, 200, then 400 ms (the cap): each restart within 1 s of the exit.
    expect([100, 200, 400]).toContain(s.restartDelayMs);
    expect(s.startFailures).toBe(0);
    // Each run read exactly 0.2 s (9600 frames); the discontinuities sit at the runs' starts.
    const per = 0.2 * FS;
    const starts = blocks.filter((b) => b.discontinuity).map((b) => b.sampleIndex);
    expect(starts.slice(0, 3)).toEqual([per, 2 * per, 3 * per]);
    expect(blocks.filter((b) => b.gap)).toEqual([]);
    // Every run is the same signal as sox's file of the command.
    const upTo = blocks.filter((b) => b.sampleIndex + b.frames <= 3 * per);
    const got = timeline(upTo, 2);
    expect(got[0].length).toBe(3 * per);
    const ref = ints(soxReference(args), 2);
    let differ = 0;
    for (let i = 0; i < 3 * per; i++) for (let c = 0; c < 2; c++) if (got[c][i] * 32768 !== ref[2 * (i % per) + c]) differ++;
    expect(differ).toBe(0);
  });

  it('a missing command: a clear error, no samples, retried with a doubling wait (no tight loop)', async () => {
    const { src } = capture({ command: ['/nonexistent/cmd', '-x'], channels: 2, encoding: 'int16', restartMinMs: 50, restartMaxMs: 400 });
    const waits: number[] = [];
    await waitFor(
      () => {
        const s = src.status();
        if (s.restartDelayMs !== null && waits.at(-1) !== s.restartDelayMs) waits.push(s.restartDelayMs);
        return s.startFailures >= 5;
      },
      30_000,
      'five failed starts',
    );
    const s = src.status();
    expect(s.state).toBe('failed');
    expect(s.error).toEqual({ code: 'ENOENT', message: 'command not found: /nonexistent/cmd' });
    expect(s).toMatchObject({ pid: null, samplesRead: 0, exits: 0, blocks: 0 });
    expect(s.starts).toBe(s.startFailures);
    // The waits seen double from restartMinMs to the cap and never shrink.
    expect(waits.every((w, i) => [50, 100, 200, 400].includes(w) && (i === 0 || w > waits[i - 1]))).toBe(true);
    expect(waits.at(-1)).toBe(400);
    expect(s.nextStartInMs).toBeLessThanOrEqual(400);
  });

  it('counts overrun reports on standard error and keeps its last lines, bounded', async () => {
    const args = soxArgs(16, 'signed-integer', 0.1, 2);
    // arecord's report reads "overrun!!! (at least N ms long)" (wording from memory).
    const script = [
      "echo 'overrun!!! (at least 1.2 ms long)' >&2",
      "echo 'a plain note' >&2",
      "printf 'Overrun again\\r' >&2",
      "head -c 500 /dev/zero | tr '\\0' x >&2; echo >&2",
      `sox ${args.join(' ')}`,
    ].join('; ');
    const { src } = capture({ command: ['sh', '-c', script], channels: 2, encoding: 'int16' });
    await waitFor(() => ended(src.status()), 20_000, 'the run to end');
    const s = src.status();
    expect(s.overruns).toBe(2);
    expect(s.stderrLines).toBe(4);
    expect(s.stderr.slice(0, 3)).toEqual(['overrun!!! (at least 1.2 ms long)', 'a plain note', 'Overrun again']);
    expect(s.stderr[3]).toBe(`${'x'.repeat(199)}…`);
    expect(s.samplesRead).toBe(0.1 * FS);
  });

  it('a slow consumer: the command is never blocked, the oldest audio is dropped and counted, the timeline keeps its length', async () => {
    const args = soxArgs(32, 'signed-integer', 2);
    // 100 ms of queue for 2 s of audio written at once, with delivery held (a stalled server thread).
    const { src, blocks } = capture({ command: ['sox', ...args], channels: 4, encoding: 'int32', queueMs: 100 }, true);
    await waitFor(() => src.status().exits >= 1, 20_000, 'sox to finish while delivery is held');
    const held = src.status();
    expect(held.lastExits[0]).toMatchObject({ code: 0, signal: null }); // it wrote everything: never blocked
    expect(held.samplesRead).toBe(2 * FS);
    expect(held.blocks).toBe(0);
    expect(held.droppedSamples).toBeGreaterThan(FS);
    expect(held.blocksDropped).toBeGreaterThan(0);
    expect(held.queue.capacityMs).toBe(100);
    // Full: at least queueMs waiting, at most two records (1024 frames each) more.
    expect(held.queue.queuedMs).toBeGreaterThanOrEqual(100);
    expect(held.queue.queuedMs).toBeLessThanOrEqual(100 + (2 * 1024 * 1000) / FS);
    expect(held.queue.queuedMs).toBe(((2 * FS - held.droppedSamples) * 1000) / FS);
    src.holdDrain(false);
    await waitFor(() => src.status().nextSample === 2 * FS, 20_000, 'the rest to be delivered');
    const s = src.status();
    expect(s.gapSamples).toBe(s.droppedSamples);
    const got = timeline(blocks, 4);
    expect(got[0].length).toBe(2 * FS);
    // Gap blocks: zeros, exactly the dropped span, first; then sox's samples at their true index.
    const gaps = blocks.filter((b) => b.gap);
    expect(gaps.reduce((a, b) => a + b.frames, 0)).toBe(s.droppedSamples);
    expect(gaps.every((b) => b.data.every((v) => v === 0))).toBe(true);
    expect(blocks.findIndex((b) => !b.gap)).toBe(gaps.length);
    const ref = ints(soxReference(args), 4);
    let differ = 0;
    for (let i = s.droppedSamples; i < 2 * FS; i++) for (let c = 0; c < 4; c++) if (got[c][i] !== Math.fround(ref[4 * i + c] / 2 ** 31)) differ++;
    expect(differ).toBe(0);
  });

  it('a command that writes nothing is "waiting"; stop() leaves no process of its group behind', async () => {
    // sh starts a child (sleep) and waits: stopping must end both.
    const { src } = capture({ command: ['sh', '-c', 'sleep 30 & wait'], channels: 2, encoding: 'int16' });
    await waitFor(() => src.status().state === 'waiting', 20_000, 'the command to run');
    const pid = src.status().pid!;
    expect(pid).toBeGreaterThan(0);
    await waitFor(() => liveInGroup(pid).length === 2, 20_000, 'sh and sleep to run');
    expect(src.status()).toMatchObject({ samplesRead: 0, lastSampleAgeMs: null, blocks: 0 });
    await src.stop();
    expect(liveInGroup(pid)).toEqual([]);
    const s = src.status();
    expect(s.state).toBe('stopped');
    expect(s.pid).toBeNull();
    expect(s.lastExits[0]).toMatchObject({ code: null, signal: 'SIGTERM' });
  });

  it('stop() kills a command that ignores SIGTERM after the grace time', async () => {
    const { src } = capture({ command: ['sh', '-c', "trap '' TERM; sleep 30 & wait; sleep 30"], channels: 2, encoding: 'int16', killGraceMs: 300 });
    await waitFor(() => src.status().state === 'waiting', 20_000, 'the command to run');
    const pid = src.status().pid!;
    await src.stop();
    expect(liveInGroup(pid)).toEqual([]);
    expect(src.status().lastExits[0]).toMatchObject({ code: null, signal: 'SIGKILL' });
  });

  it('a capture thread that ends unasked: its command is killed, a new thread starts it again, the timeline continues', async () => {
    // sox paced by a pipe that is read slowly would need a real device; a shell loop writing 4 frames
    // (2 channels × int16) every few ms stands in for a live card.
    const script = "while :; do printf '\\001\\000\\002\\000\\003\\000\\004\\000\\005\\000\\006\\000\\007\\000\\010\\000'; sleep 0.005; done";
    const { src, blocks } = capture({ command: ['sh', '-c', script], channels: 2, encoding: 'int16', restartMinMs: 50, restartMaxMs: 400 });
    await waitFor(() => src.status().samplesRead >= 40, 20_000, 'samples from the first run');
    const first = src.status().pid!;
    await src.killReader();
    await waitFor(() => src.status().threadRestarts === 1 && src.status().state === 'running' && src.status().pid !== first, 20_000, 'a new thread and run');
    await waitFor(() => src.status().discontinuities >= 1, 20_000, 'the new run delivered');
    expect(liveInGroup(first)).toEqual([]);
    const s = src.status();
    expect(s.starts).toBe(2);
    expect(s.error).toBeNull();
    // One timeline: the second run continues the index, flagged; every frame is (1,2),(3,4)… as written.
    const got = timeline(blocks, 2);
    const d = blocks.find((b) => b.discontinuity)!;
    expect(d.sampleIndex % 4).toBe(0);
    for (let i = 0; i < got[0].length; i++) {
      expect(got[0][i] * 32768).toBe(2 * (i % 4) + 1);
      expect(got[1][i] * 32768).toBe(2 * (i % 4) + 2);
    }
  });

  it('warns when the output starts with a WAV header instead of raw PCM', async () => {
    const { src } = capture({ command: ['sox', '-D', '-n', '-r', String(FS), '-c', '2', '-b', '16', '-t', 'wav', '-', 'synth', '0.05', 'sine', '440'], channels: 2, encoding: 'int16' });
    await waitFor(() => ended(src.status()), 20_000, 'the run to end');
    expect(src.status().formatWarning).toMatch(/"RIFF" file header.*-t raw/);
  });

  it('refuses bad options with the field, the value and what is allowed', () => {
    const ok: CaptureOptions = { command: ['sox'], channels: 2, encoding: 'int16', sampleRateHz: FS, restartMinMs: 100, restartMaxMs: 1000, queueMs: 500 };
    const sink = () => undefined;
    expect(() => new CaptureSource({ ...ok, command: [] }, sink)).toThrow(/capture\.command = \[\]: a list of 1 to 64 strings/);
    expect(() => new CaptureSource({ ...ok, channels: 0 }, sink)).toThrow('capture.channels = 0: an integer 1–1024');
    expect(() => new CaptureSource({ ...ok, encoding: 'int8' as never }, sink)).toThrow('capture.encoding = "int8": int16, int24, int32 or float32');
    expect(() => new CaptureSource({ ...ok, restartMaxMs: 50 }, sink)).toThrow('capture.restartMaxMs = 50: an integer from capture.restartMinMs (100) to 600000');
    try {
      new CaptureSource({ ...ok, queueMs: 0 }, sink);
    } catch (e) {
      expect(e).toBeInstanceOf(RangeError);
      expect((e as { code: string }).code).toBe('ERR_CAPTURE_OPTION');
    }
  });
});
