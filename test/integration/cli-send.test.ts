/**
 * `nullsteer send` as a user runs it, against a running server: a WAV file written here reaches the
 * server, and the server's counters match the file's sample count exactly.
 */
import { spawn } from 'node:child_process';
import { mkdtempSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { afterEach, describe, expect, it } from 'vitest';
import { writeWavFile } from '../../server/io/wav.ts';
import type { Service } from '../../server/service.ts';
import { collectBlocks, getStatus, startTestService, waitFor } from '../helpers/service.ts';

const BIN = fileURLToPath(new URL('../../bin/nullsteer.mjs', import.meta.url));
const dir = mkdtempSync(join(tmpdir(), 'nullsteer-send-'));

let svc: Service | null = null;
afterEach(async () => {
  await svc?.close();
  svc = null;
});

function runSend(args: string[]): Promise<{ code: number | null; out: string; err: string }> {
  return new Promise((resolve) => {
    const p = spawn(process.execPath, [BIN, 'send', ...args], { stdio: ['ignore', 'pipe', 'pipe'] });
    let out = '';
    let err = '';
    p.stdout.on('data', (d) => (out += d));
    p.stderr.on('data', (d) => (err += d));
    p.once('exit', (code) => resolve({ code, out, err }));
  });
}

async function wavFile(name: string, frames: number, channels: number, encoding: 'int16' | 'int24' | 'int32' | 'float32'): Promise<{ path: string; x: Float32Array }> {
  const x = new Float32Array(frames * channels);
  for (let i = 0; i < frames; i++) for (let c = 0; c < channels; c++) x[i * channels + c] = 0.5 * Math.sin(2 * Math.PI * (200 + 50 * c) * (i / 48000));
  const path = join(dir, name);
  await writeWavFile(path, { sampleRateHz: 48000, channels, encoding, interleaved: x });
  return { path, x };
}

describe('nullsteer send → server', () => {
  it('UDP at 4× real time: every sample of the file is counted, none lost', async () => {
    svc = await startTestService();
    const blocks = collectBlocks(svc);
    const frames = 48000 + 123; // a last frame shorter than the rest
    const { path } = await wavFile('four.wav', frames, 4, 'int24');
    const r = await runSend([path, '--udp', `127.0.0.1:${svc.udpPort}`, '--speed', '4', '--stream-id', '3']);
    expect(r.err).toBe('');
    expect(r.code).toBe(0);
    await waitFor(() => blocks.reduce((n, b) => n + b.frames, 0) >= frames, 5000, 'all samples');
    const st = await getStatus(svc);
    expect(st.streams).toHaveLength(1);
    expect(st.streams[0]).toMatchObject({ streamId: 3, transport: 'udp', samplesAccepted: frames, framesLost: 0, gapSamples: 0, framesDuplicated: 0, encoding: 'int24', firstSample: 0, nextSample: frames });
    expect(st.timeline.samples).toBe(frames);
    expect(Object.values(st.ingest.rejected).every((n) => n === 0)).toBe(true);
  });

  it('WebSocket, as fast as the connection takes: exact count and exact samples', async () => {
    svc = await startTestService();
    const blocks = collectBlocks(svc);
    const frames = 30000;
    const { path, x } = await wavFile('ws.wav', frames, 4, 'float32');
    const r = await runSend([path, '--ws', `${svc.url.replace('http', 'ws')}/ingest`, '--fast', '--start-sample', '96000']);
    expect(r.code).toBe(0);
    // No --stream-id: a fresh random id, named on the first line and in the summary.
    const lines = r.out.trim().split('\n');
    expect(lines).toHaveLength(2);
    const id = Number(/^sending .* as stream (\d+) to ws:/.exec(lines[0])![1]);
    expect(lines[1]).toContain(`as stream ${id} to ws:`);
    await waitFor(() => blocks.reduce((n, b) => n + b.frames, 0) >= frames, 5000, 'all samples');
    const st = await getStatus(svc);
    expect(st.streams[0]).toMatchObject({ streamId: id, transport: 'websocket', samplesAccepted: frames, framesLost: 0, firstSample: 96000, nextSample: 96000 + frames });
    // Float32 passes through bit for bit.
    let k = 0;
    let worst = 0;
    for (const b of blocks) {
      for (let i = 0; i < b.frames; i++, k++) for (let c = 0; c < 4; c++) worst = Math.max(worst, Math.abs(b.data[c * b.frames + i] - x[k * 4 + c]));
    }
    expect(worst).toBe(0);
  });

  it('a file that does not fit the array is rejected by the server and counted, not crashed on', async () => {
    svc = await startTestService();
    const { path } = await wavFile('six.wav', 4800, 6, 'int16');
    const r = await runSend([path, '--udp', `127.0.0.1:${svc.udpPort}`, '--fast']);
    expect(r.code).toBe(0);
    await waitFor(async () => ((await getStatus(svc!)).streams[0]?.rejected.channel_mismatch ?? 0) > 0, 3000, 'rejections');
    const st = await getStatus(svc);
    expect(st.streams[0].samplesAccepted).toBe(0);
    expect(st.ingest.lastRejected.detail).toBe('6-channel frames refused: the array has 4');
  });
});
