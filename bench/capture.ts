/**
 * Capture path throughput: a raw PCM file written by sox, piped by `cat` (as fast as the pipe
 * goes) through the capture source (capture thread → shared queue → conversion → sink) with a queue
 * large enough that nothing is dropped. Prints seconds of signal delivered per wall second from the
 * first block to the last, the start-up (start() to the first block: the thread and the command
 * starting), and any drops. Skipped when sox is not installed.
 * `npx tsx bench/capture.ts [--quick]`, or within `npm run bench -- --ingest`.
 */
import { execFileSync } from 'node:child_process';
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { pathToFileURL } from 'node:url';
import { CaptureSource } from '../server/ingest/capture.ts';
import type { SampleEncoding } from '../shared/frame.ts';

export interface CaptureBenchResult {
  name: string;
  channels: number;
  encoding: SampleEncoding;
  seconds: number;
  /** Seconds of signal delivered to the sink per wall second, first block to last. */
  speedX: number;
  /** start() to the first block, ms. */
  startupMs: number;
  /** Megabytes of PCM per wall second. */
  mbPerS: number;
  droppedSamples: number;
  blocks: number;
}

const FS = 48000;
const BITS: Record<SampleEncoding, [number, string]> = { int16: [16, 'signed-integer'], int24: [24, 'signed-integer'], int32: [32, 'signed-integer'], float32: [32, 'floating-point'] };

async function one(dir: string, channels: number, encoding: SampleEncoding, seconds: number): Promise<CaptureBenchResult> {
  const file = join(dir, `${channels}-${encoding}.raw`);
  const [bits, e] = BITS[encoding];
  // Channels of sox's synth beyond those listed repeat the last tone; -D: no dither.
  execFileSync('sox', ['-D', '-n', '-r', String(FS), '-c', String(channels), '-b', String(bits), '-e', e, '-t', 'raw', file, 'synth', String(seconds), 'sine', '440', 'sine', '1000']);
  const total = seconds * FS;
  let frames = 0;
  let blocks = 0;
  let firstMs = 0;
  let lastMs = 0;
  let firstFrames = 0;
  let done: () => void = () => {};
  const finished = new Promise<void>((r) => (done = r));
  const src = new CaptureSource({ command: ['cat', file], channels, encoding, sampleRateHz: FS, restartMinMs: 60_000, restartMaxMs: 60_000, queueMs: (seconds + 1) * 1000 }, (b) => {
    if (blocks === 0) {
      firstMs = performance.now();
      firstFrames = b.frames;
    }
    frames += b.frames;
    blocks++;
    if (frames >= total) {
      lastMs = performance.now();
      done();
    }
  });
  const t0 = performance.now();
  src.start();
  await finished;
  const s = src.status();
  await src.stop();
  // The first block's samples arrived before the clock started: not counted.
  const wallS = (lastMs - firstMs) / 1000;
  const signalS = (total - firstFrames) / FS;
  const bytes = (total - firstFrames) * channels * (bits / 8);
  return { name: `${channels} ch ${encoding}`, channels, encoding, seconds, speedX: signalS / wallS, startupMs: firstMs - t0, mbPerS: bytes / 1e6 / wallS, droppedSamples: s.droppedSamples, blocks };
}

export async function benchCapture(quick = false, say: (s: string) => void = console.log): Promise<CaptureBenchResult[]> {
  try {
    execFileSync('sox', ['--version'], { stdio: 'ignore' });
  } catch {
    say('\ncapture: sox not installed, skipped');
    return [];
  }
  const dir = mkdtempSync(join(tmpdir(), 'nullsteer-bench-capture-'));
  const seconds = quick ? 3 : 10;
  const out: CaptureBenchResult[] = [];
  try {
    for (const [m, enc] of [[16, 'int32'], [64, 'int32'], [64, 'int24'], [256, 'int16']] as const) out.push(await one(dir, m, enc, seconds));
  } finally {
    rmSync(dir, { recursive: true, force: true });
  }
  say(`\ncapture (cat of a sox file → capture thread → queue → planar float32 blocks), ${seconds} s at 48 kHz, nothing paced`);
  for (const r of out) say(`  ${r.name.padEnd(16)} ${r.speedX.toFixed(1).padStart(7)}× real time  ${r.mbPerS.toFixed(0).padStart(5)} MB/s  ${r.blocks} blocks  dropped ${r.droppedSamples}  start-up ${r.startupMs.toFixed(0)} ms`);
  return out;
}

if (import.meta.url === pathToFileURL(process.argv[1] ?? '').href) await benchCapture(process.argv.includes('--quick'));
