/**
 * A beams recording says which channel is which beam: the sidecar lists per channel the beam id,
 * look direction, method, gain and limiter, and every steer, retune, addition and removal with its
 * sample index; a part opened when the number of beams changes starts with its own description and
 * names the file before it (previousFile).
 */
import { readdirSync, readFileSync, mkdtempSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterEach, describe, expect, it, vi } from 'vitest';
import WebSocket from 'ws';
import { encodeFrame } from '../../shared/frame.ts';
import type { Service } from '../../server/service.ts';
import { startTestService, waitFor } from '../helpers/service.ts';

vi.setConfig({ testTimeout: 60_000 });

const FS = 48000;
const N = 480;
let svc: Service | null = null;
afterEach(async () => {
  await svc?.close();
  svc = null;
});

const call = async (method: string, path: string, body?: unknown) => {
  const r = await fetch(`${svc!.url}${path}`, { method, headers: method === 'GET' ? {} : { 'content-type': 'application/json' }, ...(body === undefined ? {} : { body: JSON.stringify(body) }) });
  return { status: r.status, body: r.status === 204 ? null : await r.json() };
};

describe('beams sidecar', () => {
  it('lists per channel the beam, its look direction, method, gain and limiter, and every change with its sample index', async () => {
    const dir = mkdtempSync(join(tmpdir(), 'nullsteer-beamcar-'));
    svc = await startTestService({ outputs: { dir }, engine: { workers: 1 }, processing: { azimuthStepDeg: 5 } });
    const ws = new WebSocket(`${svc.url.replace(/^http/, 'ws')}/ingest`);
    await new Promise((r) => ws.once('open', r));
    let k = 0;
    const send = async (frames: number) => {
      const x = new Float32Array(4 * N);
      for (let f = 0; f < frames; f++, k++) {
        for (let i = 0; i < x.length; i++) x[i] = 0.1 * Math.sin(0.05 * (k * N * 4 + i));
        ws.send(encodeFrame({ streamId: 3, sequence: k, firstSample: k * N, sampleRateHz: FS, channels: 4, samplesPerChannel: N, encoding: 'float32' }, x));
      }
      await waitFor(() => svc!.bus.status().samples >= k * N, 20_000, 'frames in');
    };
    const a = await call('POST', '/api/beams', { azimuthDeg: 30, method: 'mvdr' });
    const b = await call('POST', '/api/beams', { azimuthDeg: 120, method: 'delay-and-sum' });
    expect(a.status).toBeLessThan(300);
    expect(b.status).toBeLessThan(300);
    expect((await call('POST', '/api/recording', { raw: false, beams: true, encoding: 'float32' })).status).toBe(200);
    await send(100);
    await waitFor(async () => ((await call('GET', '/api/recording')).body.tracks?.beams?.frames ?? 0) > 0, 20_000, 'beam audio recorded');
    const steerAt = svc.bus.status().nextSample;
    expect((await call('PATCH', `/api/beams/${a.body.id}`, { azimuthDeg: 45 })).status).toBe(200);
    await send(50);
    expect((await call('DELETE', `/api/beams/${b.body.id}`)).status).toBeLessThan(300);
    await send(50);
    await new Promise((r) => setTimeout(r, 300));
    expect((await call('DELETE', '/api/recording')).status).toBe(200);
    ws.close();
    const cars = readdirSync(dir).filter((f) => /-beams-\d+\.json$/.test(f)).sort().map((f) => JSON.parse(readFileSync(join(dir, f), 'utf8')));
    expect(cars.length).toBe(2); // two beams, then one: another channel count, another part
    const [first, second] = cars;
    expect(first.channels).toBe(2);
    expect(first.beamChannels).toEqual([
      { channel: 0, beamId: a.body.id, azimuthDeg: 30, elevationDeg: 0, method: 'mvdr', gainDb: 0, limiter: expect.any(Boolean) },
      { channel: 1, beamId: b.body.id, azimuthDeg: 120, elevationDeg: 0, method: 'delay-and-sum', gainDb: 0, limiter: expect.any(Boolean) },
    ]);
    const steer = first.beamChanges.find((c: { kind: string }) => c.kind === 'update');
    expect(steer).toMatchObject({ beamId: a.body.id, before: { azimuthDeg: 30 }, after: { azimuthDeg: 45 } });
    expect(steer.sampleIndex).toBe(steerAt);
    expect(first.beamChanges.find((c: { kind: string }) => c.kind === 'remove')).toMatchObject({ beamId: b.body.id, before: { azimuthDeg: 120 }, after: null });
    expect(second.channels).toBe(1);
    expect(second.beamChannels).toEqual([{ channel: 0, beamId: a.body.id, azimuthDeg: 45, elevationDeg: 0, method: 'mvdr', gainDb: 0, limiter: expect.any(Boolean) }]);
    expect(second.previousFile).toBe(first.file);
    expect(first.nextFile).toBe(second.file);
  });
});
