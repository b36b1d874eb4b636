/**
 * Re-analysis of a capture: a live session is recorded (raw float32, started before the first
 * frame, with a τ change half-way); `nullsteer analyze FILE --timeline DIR` runs the file through
 * the live engine with the sidecar's parameters and replays the change at its sample index. Its
 * direction history must equal the rows the dashboard received, row for row.
 */
import { createSocket } from 'node:dgram';
import { mkdtempSync, readdirSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { inflateSync } from 'node:zlib';
import { afterEach, describe, expect, it } from 'vitest';
import WebSocket from 'ws';
import type { Service } from '../../server/service.ts';
import { timelineCommand } from '../../server/tools/timeline.ts';
import { encodeFrame } from '../../shared/frame.ts';
import { decodeRow } from '../../shared/messages.ts';
import { renderPlaneWaves } from '../helpers/plane-waves.ts';
import { sleep, startTestService, waitFor } from '../helpers/service.ts';

let svc: Service | null = null;
let ws: WebSocket | null = null;
afterEach(async () => {
  ws?.terminate();
  await svc?.close();
  svc = null;
});

const FS = 48000;
const M = 8;
const N = 480;
const FRAMES = 300; // 3 s
const CHANGE_AT = 150;

describe('re-analysis of a capture', () => {
  it('reproduces the live direction history row for row, with the τ change replayed', async () => {
    const dir = mkdtempSync(join(tmpdir(), 'nullsteer-reanalysis-'));
    const positions = Array.from({ length: M }, (_, m) => [0.1 * Math.cos((2 * Math.PI * m) / M), 0.1 * Math.sin((2 * Math.PI * m) / M), 0] as [number, number, number]);
    const arrayFile = join(dir, 'reanalysis-ring-8.json');
    // A calibrated array (channels a little hot or cold and late), so the capture's sidecar must
    // carry the calibration for the re-analysis to match.
    const calibration = { gainDb: [0, 0.8, -0.5, 0.3, -1, 0.6, 0.1, -0.4], delayUs: [0, 6, -4, 10, 2, -8, 5, -3] };
    writeFileSync(arrayFile, JSON.stringify({ name: 'reanalysis ring, 8 sensors', positions, calibration }));
    const x = renderPlaneWaves({ positions, sampleRateHz: FS, frames: 1 << 18, speedOfSoundMps: 343.2, sources: [{ azimuthDeg: 60, rms: 0.1, loHz: 400, hiHz: 1800, seed: 5 }, { azimuthDeg: 200, rms: 0.05, loHz: 400, hiHz: 1800, seed: 6 }], noiseRms: 0.005, noiseSeed: 7, channelGainDb: calibration.gainDb, channelDelayS: calibration.delayUs.map((d) => d * 1e-6) });
    svc = await startTestService({ array: { file: arrayFile }, outputs: { dir: join(dir, 'rec') }, engine: { workers: 2 }, processing: { bandLowHz: 400, bandHighHz: 1800, azimuthStepDeg: 2, spectrumRateHz: 20 } });
    const live: { sampleIndex: number; mvdr: Float32Array; conv: Float32Array }[] = [];
    ws = new WebSocket(`${svc.url.replace(/^http/, 'ws')}/api/live`);
    ws.on('message', (data, isBinary) => {
      if (!isBinary) return;
      const b = data as Buffer;
      const r = decodeRow(new Uint8Array(b.buffer, b.byteOffset, b.byteLength));
      live.push({ sampleIndex: r.sampleIndex, mvdr: Float32Array.from(r.mvdrDb!), conv: Float32Array.from(r.conventionalDb!) });
    });
    await new Promise<void>((r) => ws!.once('open', () => r()));
    const post = (path: string, method: string, body?: unknown) => fetch(`${svc!.url}${path}`, { method, headers: method !== 'GET' ? { 'content-type': 'application/json' } : {}, body: body ? JSON.stringify(body) : undefined });
    expect((await post('/api/recording', 'POST', { encoding: 'float32', beams: false })).status).toBe(200);
    const udp = createSocket('udp4');
    for (let k = 0; k < FRAMES; k++) {
      if (k === CHANGE_AT) {
        await waitFor(() => svc!.bus.status().samples >= k * N, 5000, 'frames before the change');
        expect((await post('/api/processing', 'PATCH', { tauS: 0.1 })).status).toBe(200);
      }
      const f = encodeFrame({ streamId: 1, sequence: k, firstSample: k * N, sampleRateHz: FS, channels: M, samplesPerChannel: N, encoding: 'float32' }, x.subarray(k * N * M, (k + 1) * N * M));
      await new Promise<void>((r) => udp.send(f, svc!.udpPort!, '127.0.0.1', () => r()));
      if (k % 4 === 3) await sleep(10); // about 4× real time
    }
    udp.close();
    await waitFor(() => svc!.bus.status().samples >= FRAMES * N, 5000, 'all frames');
    await sleep(400);
    expect((await post('/api/recording', 'DELETE')).status).toBe(200);
    const st = svc.engine.status() as { shed: { changes: number }; scansDeferred: number; hopsSkipped: number };
    expect([st.shed.changes, st.scansDeferred, st.hopsSkipped]).toEqual([0, 0, 0]); // the live rows came on schedule

    const wav = join(dir, 'rec', readdirSync(join(dir, 'rec')).find((f) => f.endsWith('-raw-0001.wav'))!);
    expect(JSON.parse(readFileSync(wav.replace(/\.wav$/, '.json'), 'utf8')).array.calibration).toEqual(calibration);
    expect((await (await fetch(`${svc.url}/api/status`)).json()).array.calibration).toEqual({ gainDbMax: 1, delayUsMax: 10, splOffsetDb: null });
    const outDir = join(dir, 'timeline');
    let said = '';
    const progress: string[] = [];
    const code = await timelineCommand([wav, '--timeline', outDir], { out: (s) => (said += s), err: (s) => (said += s), progress: (s) => progress.push(s) });
    expect(code, said).toBe(0);
    expect(said).toMatch(/^\d+ rows from 3\.00 s of signal in [\d.]+ s: [\d.]+× real time \(parameters: .*1 change\(s\) replayed\)/);
    expect(progress[progress.length - 1]).toBe('analyze: 100% (3.0 of 3.0 s)');
    const doc = JSON.parse(readFileSync(join(outDir, 'history.json'), 'utf8'));
    // Row for row: the same sample indices, and levels equal within float32 rounding.
    expect(doc.rows.map((r: { sampleIndex: number }) => r.sampleIndex)).toEqual(live.map((r) => r.sampleIndex));
    let worst = 0;
    for (let i = 0; i < live.length; i++) {
      for (let d = 0; d < live[i].mvdr.length; d++) {
        worst = Math.max(worst, Math.abs(doc.rows[i].mvdrDb[d] - live[i].mvdr[d]), Math.abs(doc.rows[i].conventionalDb[d] - live[i].conv[d]));
      }
    }
    console.log(`re-analysis: ${live.length} rows, worst level difference ${worst.toExponential(2)} dB; ${said}`);
    expect(worst).toBeLessThan(1e-3);
    expect(live.length).toBeGreaterThan(50);
    expect(doc.changes).toHaveLength(1);
    expect(doc.changes[0].sampleIndex).toBe(CHANGE_AT * N);

    // The other outputs: CSV rows, PNG signature and size, peaks near the sources, tracks.
    const csv = readFileSync(join(outDir, 'history.csv'), 'utf8').trim().split('\n');
    expect(csv[1].split(',').slice(0, 4)).toEqual(['time_s', 'stream_time_s', 'sample_index', 'az_0']);
    expect(csv.length).toBe(2 + live.length);
    const png = readFileSync(join(outDir, 'history.png'));
    expect([...png.subarray(0, 8)]).toEqual([0x89, 0x50, 0x4e, 0x47, 0x0d, 0x0a, 0x1a, 0x0a]); // PNG signature (ISO/IEC 15948)
    // The annotated image (axes, colour bar, caption) round the 180 × rows history raster.
    expect([doc.image.raster.w, doc.image.raster.h]).toEqual([180, live.length]);
    expect([png.readUInt32BE(16), png.readUInt32BE(20)]).toEqual([doc.image.width, doc.image.height]);
    const idat = png.indexOf('IDAT');
    expect(inflateSync(png.subarray(idat + 4, idat + 4 + png.readUInt32BE(idat - 4))).length).toBe(doc.image.height * (1 + doc.image.width * 3));
    const tracks = JSON.parse(readFileSync(join(outDir, 'tracks.json'), 'utf8')).tracks.filter((t: { method: string; points: unknown[] }) => t.method === 'mvdr' && t.points.length > 20);
    const bearings = tracks.map((t: { points: { azimuthDeg: number }[] }) => t.points[t.points.length - 1].azimuthDeg).sort((a: number, b: number) => a - b);
    expect(bearings, JSON.stringify(bearings)).toHaveLength(2);
    expect(Math.abs(bearings[0] - 60)).toBeLessThanOrEqual(2);
    expect(Math.abs(bearings[1] - 200)).toBeLessThanOrEqual(2);
    expect(readFileSync(join(outDir, 'peaks.csv'), 'utf8').split('\n')[0]).toBe('time_s,stream_time_s,sample_index,method,rank,azimuth_deg,elevation_deg,level_db');
  }, 40000);
});
