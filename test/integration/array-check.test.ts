/**
 * The array check over REST on a running service fed (WebSocket ingest) with a faulty 8-microphone
 * ring (test/helpers/faulty-ring.ts): cables 2 and 5 swapped, channel 6 inverted, microphone 1
 * sitting 2 cm out of its hole, gains ±2 dB. The proposed calibration is saved into a temporary copy of the array
 * file, whose content is checked, journaled, and handed to the running engine.
 */
import { mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterEach, describe, expect, it } from 'vitest';
import WebSocket from 'ws';
import type { Service } from '../../server/service.ts';
import { decodeRow } from '../../shared/messages.ts';
import { faultyRing, RING, RING_M, ringFrames } from '../helpers/faulty-ring.ts';
import { startTestService, waitFor } from '../helpers/service.ts';

let svc: Service | null = null;
let ws: WebSocket | null = null;
afterEach(async () => {
  ws?.terminate();
  ws = null;
  await svc?.close();
  svc = null;
});

const M = RING_M;

const json = (method: string, body?: unknown) => ({ method, headers: { 'content-type': 'application/json' }, body: body === undefined ? undefined : JSON.stringify(body) });

describe('POST /api/array-check on a running service', () => {
  it('names the faults of the live input, refuses a second check, saves and applies the calibration', async () => {
    const dir = mkdtempSync(join(tmpdir(), 'nullsteer-array-check-'));
    const arrayFile = join(dir, 'ring-8.json');
    // A field this project does not know stays in the file (updateArrayFile keeps it).
    writeFileSync(arrayFile, JSON.stringify({ name: 'check ring', positions: RING, site: 'test bench' }, null, 2));
    svc = await startTestService({ array: { file: arrayFile }, engine: { workers: 1 }, processing: { bandLowHz: 300, bandHighHz: 6000 } });
    const url = svc.url;

    // Closed bodies and ranges.
    let r = await fetch(`${url}/api/array-check`, json('POST', { seconds: 0.1 }));
    expect(r.status).toBe(400);
    expect(await r.json()).toEqual({ error: { code: 'ERR_HTTP_VALIDATION', message: 'seconds: 0.1 not allowed; a number in 0.5–10 s', statusCode: 400 } });
    r = await fetch(`${url}/api/array-check`, json('POST', { azimuth: 30 }));
    expect((await r.json()).error.message).toBe('azimuth: unknown field; known: azimuthDeg, elevationDeg, seconds, misplacedBoundUs');

    // The check taps the next second of input: start it, then send.
    const answer = fetch(`${url}/api/array-check`, json('POST', { azimuthDeg: 30, seconds: 1 })).then(async (res) => ({ status: res.status, body: await res.json() }));
    await waitFor(async () => (await (await fetch(`${url}/api/array-check`)).json()).running === true, 20_000, 'the check to start');
    r = await fetch(`${url}/api/array-check`, json('POST', {}));
    expect(r.status).toBe(409);
    expect((await r.json()).error.code).toBe('ERR_HTTP_CHECK_RUNNING');

    // The live rows: MVDR level at the source's 30° (1° grid from 0°) per row's sample index.
    const rows: { sampleIndex: number; at30: number }[] = [];
    const liveWs = new WebSocket(`${url.replace('http', 'ws')}/api/live`);
    liveWs.on('message', (data, isBinary) => {
      if (!isBinary) return;
      const buf = data as Buffer;
      const row = decodeRow(new Uint8Array(buf.buffer, buf.byteOffset, buf.byteLength));
      rows.push({ sampleIndex: row.sampleIndex, at30: row.mvdrDb![30] });
    });
    await new Promise<void>((res) => liveWs.once('open', () => res()));
    const frames = 150; // 1.5 s of 480-sample frames
    const x = faultyRing(1 << 18);
    const wire = ringFrames(x, 540);
    ws = new WebSocket(`${url.replace('http', 'ws')}/ingest`);
    await new Promise<void>((res) => ws!.once('open', () => res()));
    // Sent 10 frames (0.1 s) at a time, each batch once the engine's rows have reached it: a burst
    // would leave the scans behind (rows are scanned when a result slot is free), not the check.
    const send = async (from: number, to: number) => {
      for (let k = from; k < to; k += 10) {
        for (const f of wire.slice(k, Math.min(k + 10, to))) ws!.send(f);
        const end = Math.min(k + 10, to) * 480;
        await waitFor(() => rows.length > 0 && rows[rows.length - 1].sampleIndex >= end - 3 * 2400, 20_000, `rows up to sample ${end}`);
      }
    };
    await send(0, frames);
    const a = await answer;
    expect(a.status, JSON.stringify(a.body)).toBe(200);
    const texts: string[] = a.body.faults.map((f: { text: string }) => f.text);
    console.log('array check over REST:', texts.join('; '));
    expect(texts).toEqual(expect.arrayContaining(['channels 2 and 5 look swapped', 'channel 6 inverted']));
    expect(texts.find((t) => t.startsWith('channel 1 is'))).toMatch(/^channel 1 is 1\.9 cm off \(5[67] µs\), toward the source$/);
    expect(texts).toHaveLength(3);
    expect(a.body.seconds).toBe(1);
    expect(a.body.channels).toHaveLength(M);
    const cal = a.body.calibration;
    expect(cal.channelOrder).toEqual([0, 1, 5, 3, 4, 2, 6, 7]);
    expect(cal.polarity).toEqual([1, 1, 1, 1, 1, 1, -1, 1]);

    // Save: a bad body first (closed schema), then the proposal.
    r = await fetch(`${url}/api/array-check/calibration`, json('POST', { ...cal, channelOrder: [0, 0, 1, 2, 3, 4, 5, 6] }));
    expect(r.status).toBe(400);
    expect((await r.json()).error).toEqual({ code: 'ERR_HTTP_CALIBRATION_INVALID', message: 'calibration.channelOrder must list, per position, the input channel it reads: each of 0–7 exactly once', statusCode: 400 });
    r = await fetch(`${url}/api/array-check/calibration`, json('POST', { ...cal, gain: 1 }));
    expect((await r.json()).error.message).toMatch(/^calibration\.gain is not a calibration field/);
    r = await fetch(`${url}/api/array-check/calibration`, json('POST', cal));
    expect(r.status).toBe(200);
    expect(await r.json()).toEqual({ saved: true, file: 'ring-8.json', calibration: cal, applied: 'live', message: 'saved to ring-8.json and applied to the running processing' });

    // The file: the calibration written, the other fields as they were.
    const file = JSON.parse(readFileSync(arrayFile, 'utf8'));
    expect(file).toEqual({ name: 'check ring', positions: RING, site: 'test bench', calibration: cal });
    // Applied to the running engine, journaled, shown in the check's state.
    expect(svc.engine.opts.geometry.calibration).toEqual(cal);
    // Live: the rows of the uncalibrated input (the last before the save) against those 2 s (4 τ)
    // after it; the engine's own row sample indices, not wall-clock time.
    const before = rows.filter((row) => row.sampleIndex < frames * 480).at(-1)!.at30;
    await send(frames, wire.length);
    const settled = (frames + 200) * 480;
    const after = rows.filter((row) => row.sampleIndex >= settled).at(-1)!.at30;
    console.log(`array check, live MVDR at the 30° source: ${before.toFixed(2)} dB uncalibrated, ${after.toFixed(2)} dB with the saved calibration`);
    expect(after - before).toBeGreaterThan(10);
    liveWs.terminate();
    const journal = await (await fetch(`${url}/api/journal`)).json();
    const entry = journal.entries.find((e: { kind: string }) => e.kind === 'calibration');
    expect(entry.after).toEqual(cal);
    expect(entry.summary).toMatch(/^calibration saved to ring-8\.json: gains up to 2\.\d\d dB; delays up to 5\d\.\d µs; polarity inverted at 6; positions 2, 5 read other channels$/);
    const state = await (await fetch(`${url}/api/array-check`)).json();
    expect(state).toMatchObject({ running: false, checks: 1, calibration: cal, applies: 'live' });
  });

  it('answers 503 when no input arrives', async () => {
    svc = await startTestService({});
    // square-4 fixture; nothing is sent. The capture waits its length plus CAPTURE_GRACE_S (10 s).
    const r = await fetch(`${svc.url}/api/array-check`, json('POST', { seconds: 0.5 }));
    expect(r.status).toBe(503);
    expect(await r.json()).toEqual({ error: { code: 'ERR_HTTP_CHECK_NO_INPUT', message: 'the array check got 0 of 24000 samples per channel in 10.5 s: no samples arrived; is a source sending?', statusCode: 503 } });
  }, 30_000);
});
