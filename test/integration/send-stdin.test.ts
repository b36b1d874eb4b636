/**
 * `sox … -t raw - | nullsteer send - --raw …` into a running server, as a user's shell runs it: the
 * server's raw recording of the input equals the samples sox generated (the same sox command run
 * again on its own into a file), bit for bit; every sample accepted, none lost.
 */
import { spawn } from 'node:child_process';
import { mkdtempSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { afterEach, describe, expect, it } from 'vitest';
import type { Service } from '../../server/service.ts';
import { finishRawRecording, hasCommand, pipelineToFile, runPipeline, startRawRecording } from '../helpers/pcm-pipe.ts';
import { mulberry32 } from '../helpers/random.ts';
import { sleep, startTestService } from '../helpers/service.ts';

const BIN = fileURLToPath(new URL('../../bin/nullsteer.mjs', import.meta.url));
const HAS_SOX = hasCommand('sox', ['--version']);
const RATE_HZ = 48000;
const CHANNELS = 4; // the test service's array (test/fixtures/arrays/square-4.json)

let svc: Service | null = null;
afterEach(async () => {
  await svc?.close();
  svc = null;
});

/** sox writing `seconds` of four sines (one per channel) as raw PCM to standard output; -D: no dither, so runs agree. */
function soxSynth(bits: 16 | 24 | 32, seconds: string, encoding = 'signed-integer'): string[] {
  return ['sox', '-D', '-n', '-r', String(RATE_HZ), '-c', String(CHANNELS), '-b', String(bits), '-e', encoding, '-t', 'raw', '-', 'synth', seconds, 'sine', '440', 'sine', '1000', 'sine', '2000', 'sine', '3000'];
}

/** sox widening packed 24-bit raw input to 32-bit (S32_LE, the 24 bits at the top), as a 24-bit converter delivers S32_LE. */
const WIDEN_24_TO_32 = ['sox', '-D', '-t', 'raw', '-r', String(RATE_HZ), '-c', String(CHANNELS), '-b', '24', '-e', 'signed-integer', '-', '-t', 'raw', '-b', '32', '-e', 'signed-integer', '-'];

function sendCommand(encoding: string, ...more: string[]): string[] {
  return [process.execPath, BIN, 'send', '-', '--raw', '--channels', String(CHANNELS), '--rate', String(RATE_HZ), '--encoding', encoding, ...more];
}

async function recordingService(): Promise<{ svc: Service; dir: string }> {
  const dir = mkdtempSync(join(tmpdir(), 'nullsteer-stdin-'));
  svc = await startTestService({ outputs: { dir }, engine: { workers: 1 }, processing: { azimuthStepDeg: 5 } });
  return { svc, dir };
}

/** The stream id named on the first line of `nullsteer send`'s output, checked against its summary. */
function streamIdOf(out: string): number {
  const lines = out.trim().split('\n');
  const id = Number(/^sending standard input \(4 channels, \w+, 48000 Hz\) as stream (\d+) to /.exec(lines[0])?.[1]);
  expect(lines.at(-1)).toContain(`as stream ${id} to `);
  return id;
}

const int32s = (b: Uint8Array) => new Int32Array(b.buffer, b.byteOffset, b.byteLength / 4);

describe.skipIf(!HAS_SOX)('sox | nullsteer send - → recording', () => {
  it('int24 (S24_3LE) over WebSocket: the int24 recording is sox output bit for bit', async () => {
    const { svc, dir } = await recordingService();
    const want = pipelineToFile([soxSynth(24, '1')], join(dir, 'sox.raw'));
    expect(want.byteLength).toBe(RATE_HZ * CHANNELS * 3);
    await startRawRecording(svc, 'int24');
    const r = await runPipeline([soxSynth(24, '1'), sendCommand('int24', '--ws', `${svc.url.replace('http', 'ws')}/ingest`)]);
    expect(r.err).toBe('');
    expect(r.code).toBe(0);
    const id = streamIdOf(r.out);
    expect(r.out).toMatch(/sent \d+ frames, 48000 samples per channel \(1\.000 s at 48000 Hz, 576000 bytes\) .*; end of input, 0 bytes of a partial sample frame discarded\n$/);
    const got = await finishRawRecording(svc, dir, RATE_HZ);
    expect(got.stream).toMatchObject({ streamId: id, transport: 'websocket', encoding: 'int24', samplesAccepted: RATE_HZ, framesLost: 0, gapSamples: 0, firstSample: 0 });
    expect(got.info).toMatchObject({ channels: CHANNELS, sampleRateHz: RATE_HZ, encoding: 'int24', frames: RATE_HZ });
    expect(Buffer.from(got.bytes).equals(Buffer.from(want))).toBe(true);
  });

  it('int32 (S32_LE carrying 24-bit samples, as a 24-bit converter delivers them) over WebSocket: the int32 recording is sox output bit for bit', async () => {
    const { svc, dir } = await recordingService();
    const chain = [soxSynth(24, '1'), WIDEN_24_TO_32];
    const want = pipelineToFile(chain, join(dir, 'sox.raw'));
    // The reference itself: sox's 32-bit output is its 24-bit output shifted up by 8 bits.
    const narrow = pipelineToFile([soxSynth(24, '1')], join(dir, 'sox24.raw'));
    const w32 = int32s(want);
    expect(w32.length).toBe(RATE_HZ * CHANNELS);
    for (let k = 0; k < w32.length; k += 997) expect(w32[k]).toBe(((narrow[3 * k] | (narrow[3 * k + 1] << 8) | (narrow[3 * k + 2] << 16)) << 8) | 0);
    await startRawRecording(svc, 'int32');
    const r = await runPipeline([...chain, sendCommand('int32', '--ws', `${svc.url.replace('http', 'ws')}/ingest`, '--stream-id', '4000000000')]);
    expect(r.err).toBe('');
    expect(r.code).toBe(0);
    expect(streamIdOf(r.out)).toBe(4000000000);
    const got = await finishRawRecording(svc, dir, RATE_HZ);
    expect(got.stream).toMatchObject({ streamId: 4000000000, encoding: 'int32', samplesAccepted: RATE_HZ, framesLost: 0, gapSamples: 0 });
    expect(got.info).toMatchObject({ encoding: 'int32', frames: RATE_HZ });
    expect(Buffer.from(got.bytes).equals(Buffer.from(want))).toBe(true);
  });

  it('int32 with all 32 bits used: the recording is sox output rounded to the server float32 samples (24-bit significand)', async () => {
    const { svc, dir } = await recordingService();
    const want = int32s(pipelineToFile([soxSynth(32, '1')], join(dir, 'sox.raw')));
    await startRawRecording(svc, 'int32');
    const r = await runPipeline([soxSynth(32, '1'), sendCommand('int32', '--ws', `${svc.url.replace('http', 'ws')}/ingest`)]);
    expect(r.code).toBe(0);
    const got = await finishRawRecording(svc, dir, RATE_HZ);
    expect(got.stream).toMatchObject({ samplesAccepted: RATE_HZ, framesLost: 0 });
    const have = int32s(got.bytes);
    expect(have.length).toBe(want.length);
    // The server holds x / 2^31 as float32 (shared/frame.ts); the recorder writes round(x · 2^31),
    // clipped to 2^31 − 1. Math.fround is IEEE 754 round-to-nearest-even, as the Float32Array store.
    let mismatches = 0;
    let changed = 0;
    for (let k = 0; k < want.length; k++) {
      const expected = Math.min(2147483647, Math.fround(want[k] / 2147483648) * 2147483648);
      if (have[k] !== expected) mismatches++;
      if (expected !== want[k]) changed++;
    }
    expect(mismatches).toBe(0);
    expect(changed).toBeGreaterThan(want.length / 2); // sox's samples do use more than 24 bits
  });

  it('UDP, paced by its source, odd-sized writes, a partial sample frame at the end: recorded bit for bit, the partial bytes reported', async () => {
    const { svc, dir } = await recordingService();
    const want = pipelineToFile([soxSynth(24, '0.5')], join(dir, 'sox.raw'));
    await startRawRecording(svc, 'int24');
    const child = spawn(process.execPath, [BIN, 'send', '-', '--raw', '--channels', '4', '--rate', '48000', '--encoding', 'int24', '--udp', `127.0.0.1:${svc.udpPort}`], {
      stdio: ['pipe', 'pipe', 'pipe'],
    });
    let out = '';
    let err = '';
    child.stdout.on('data', (d) => (out += d));
    child.stderr.on('data', (d) => (err += d));
    const exited = new Promise<number | null>((resolve) => child.once('close', resolve));
    // The test is the source: writes of 1–3000 bytes (rarely whole sample frames), a pause after
    // each, so the stream runs near real time as a capture program's would (UDP on a busy machine).
    const rnd = mulberry32(2024);
    const input = Buffer.concat([want, Buffer.from([1, 2, 3, 4, 5])]);
    for (let p = 0; p < input.byteLength; ) {
      const len = 1 + Math.floor(rnd() * 3000);
      await new Promise<void>((resolve, reject) => child.stdin.write(input.subarray(p, p + len), (e) => (e ? reject(e) : resolve())));
      p += len;
      await sleep(2);
    }
    child.stdin.end();
    expect(await exited).toBe(0);
    expect(err).toBe('warning: standard input ended inside a sample frame: 5 bytes of an incomplete 12-byte sample frame not sent\n');
    const id = streamIdOf(out);
    expect(out).toMatch(/sent \d+ frames, 24000 samples per channel \(0\.500 s at 48000 Hz, 288000 bytes\) .*; end of input, 5 bytes of a partial sample frame discarded\n$/);
    const got = await finishRawRecording(svc, dir, 24000);
    expect(got.stream).toMatchObject({ streamId: id, transport: 'udp', samplesAccepted: 24000, framesLost: 0, gapSamples: 0 });
    expect(Buffer.from(got.bytes).equals(Buffer.from(want))).toBe(true);
  });
});
