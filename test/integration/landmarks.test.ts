/**
 * Landmarks over REST against a real service on 127.0.0.1: GET and PUT /api/landmarks save into a
 * temporary copy of an array file (never the committed ones), the saved file loads and validates
 * again, the change is journaled and reaches the live socket as a new hello; bad bodies are 400
 * with the whole error object.
 */
import { copyFileSync, mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import WebSocket from 'ws';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { FIXTURES, startTestService, waitFor } from '../helpers/service.ts';
import { loadGeometry } from '../../server/config/array-file.ts';
import { parseServerMessage, type HelloMessage } from '../../shared/messages.ts';
import type { Service } from '../../server/service.ts';

let svc: Service;
let arrayFile: string;
let hellos: HelloMessage[] = [];
let ws: WebSocket;

const put = (body: unknown, raw?: string) =>
  fetch(`${svc.url}/api/landmarks`, { method: 'PUT', headers: { 'content-type': 'application/json' }, body: raw ?? JSON.stringify(body) });

describe('landmarks REST', () => {
  beforeAll(async () => {
    const dir = mkdtempSync(join(tmpdir(), 'nullsteer-landmarks-'));
    arrayFile = join(dir, 'square-4.json');
    copyFileSync(`${FIXTURES}arrays/square-4.json`, arrayFile);
    svc = await startTestService({ array: { file: arrayFile } });
    ws = new WebSocket(`${svc.url.replace('http', 'ws')}/api/live`);
    ws.on('message', (data, isBinary) => {
      if (isBinary) return;
      const m = parseServerMessage(data.toString());
      if (m.type === 'hello') hellos.push(m);
    });
    await waitFor(() => hellos.length > 0, 15_000, 'the first hello');
  });

  afterAll(async () => {
    ws?.close();
    await svc?.close();
  });

  it('starts from the file (none) and saves a list into the array file', async () => {
    const first = await (await fetch(`${svc.url}/api/landmarks`)).json();
    expect(first).toEqual({ landmarks: [], toleranceDeg: 10, file: 'square-4.json' });
    expect(hellos[0].array.landmarks).toEqual([]);

    const res = await put({ landmarks: [{ name: 'gate', azimuthDeg: 35 }, { name: 'road bend', azimuthDeg: -90 }, { name: 'tower', azimuthDeg: 360 }] });
    expect(res.status).toBe(200);
    // −90° and 360° normalised into [0, 360) as documented in shared/landmarks.ts
    const saved = [
      { name: 'gate', azimuthDeg: 35 },
      { name: 'road bend', azimuthDeg: 270 },
      { name: 'tower', azimuthDeg: 0 },
    ];
    expect(await res.json()).toEqual({ landmarks: saved, toleranceDeg: 10, file: 'square-4.json' });
    expect((await (await fetch(`${svc.url}/api/landmarks`)).json()).landmarks).toEqual(saved);

    // The file holds the list, keeps the rest, and validates again as a file loaded at start-up.
    const onDisk = JSON.parse(readFileSync(arrayFile, 'utf8'));
    expect(onDisk.landmarks).toEqual(saved);
    expect(onDisk.positions).toEqual(JSON.parse(readFileSync(`${FIXTURES}arrays/square-4.json`, 'utf8')).positions);
    expect((await loadGeometry(arrayFile)).landmarks).toEqual(saved);

    // Journaled, and the dashboards are told with a new hello.
    const journal = await (await fetch(`${svc.url}/api/journal`)).json();
    const entry = journal.entries.at(-1);
    expect(entry.kind).toBe('landmarks');
    expect(entry.summary).toBe('landmarks: + gate 35°, + road bend 270°, + tower 0°');
    expect(entry.after).toEqual(saved);
    await waitFor(() => hellos.some((h) => (h.array.landmarks ?? []).length === 3), 15_000, 'a hello with the landmarks');
  });

  it('an empty list removes the field from the file', async () => {
    const res = await put({ landmarks: [] });
    expect(res.status).toBe(200);
    expect((await res.json()).landmarks).toEqual([]);
    expect('landmarks' in JSON.parse(readFileSync(arrayFile, 'utf8'))).toBe(false);
  });

  it('refuses bad bodies with 400 naming every problem, and leaves the file as it was', async () => {
    await put({ landmarks: [{ name: 'gate', azimuthDeg: 35 }] });
    const before = readFileSync(arrayFile, 'utf8');
    const cases: [unknown, string][] = [
      [{}, 'landmarks: missing; give the whole list ([] for none)'],
      [{ landmarks: [], extra: 1 }, 'extra: unknown field; known: landmarks'],
      [[], '(body): must be a JSON object { "landmarks": [{ "name", "azimuthDeg" }, ...] }'],
      [{ landmarks: 'gate' }, 'landmarks must be a list of at most 64 { "name", "azimuthDeg" } objects'],
      [{ landmarks: Array.from({ length: 65 }, (_, i) => ({ name: `l${i}`, azimuthDeg: i })) }, 'landmarks must be a list of at most 64 { "name", "azimuthDeg" } objects'],
      [{ landmarks: [{ name: 'a', azimuthDeg: 400 }] }, 'landmarks[0].azimuthDeg must be a number of degrees in -180–360 (counter-clockwise from +x)'],
      [{ landmarks: [{ name: 'a', azimuthDeg: -180.5 }] }, 'landmarks[0].azimuthDeg must be a number of degrees in -180–360 (counter-clockwise from +x)'],
      [{ landmarks: [{ name: 'a', azimuthDeg: '35' }] }, 'landmarks[0].azimuthDeg must be a number of degrees in -180–360 (counter-clockwise from +x)'],
      [{ landmarks: [{ name: '', azimuthDeg: 1 }] }, 'landmarks[0].name must be 1–40 printable characters, not only spaces'],
      [{ landmarks: [{ name: '   ', azimuthDeg: 1 }] }, 'landmarks[0].name must be 1–40 printable characters, not only spaces'],
      [{ landmarks: [{ name: 'x'.repeat(41), azimuthDeg: 1 }] }, 'landmarks[0].name must be 1–40 printable characters, not only spaces'],
      [{ landmarks: [{ name: 'bell\u0007', azimuthDeg: 1 }] }, 'landmarks[0].name must be 1–40 printable characters, not only spaces'],
      [{ landmarks: [{ name: 'a', azimuthDeg: 1, note: 'x' }] }, 'landmarks[0].note is not a landmark field (name, azimuthDeg)'],
      [{ landmarks: [{ name: 'a', azimuthDeg: 1 }, { name: 'a', azimuthDeg: 2 }] }, 'landmarks[1].name repeats the name of landmarks[0]: names must be unique'],
      [{ landmarks: [null] }, 'landmarks[0] must be an object { "name", "azimuthDeg" }'],
    ];
    for (const [body, detail] of cases) {
      const res = await put(body);
      expect(res.status, JSON.stringify(body).slice(0, 80)).toBe(400);
      expect(await res.json()).toEqual({ error: { code: 'ERR_HTTP_VALIDATION', message: detail, statusCode: 400 } });
    }
    // Two problems at once: both named.
    const two = await put({ landmarks: [{ name: '', azimuthDeg: 999 }] });
    expect((await two.json()).error.message).toBe('landmarks[0].name must be 1–40 printable characters, not only spaces; landmarks[0].azimuthDeg must be a number of degrees in -180–360 (counter-clockwise from +x)');
    // 40 characters of a non-Latin script count as 40, not as their UTF-16 length.
    expect((await put({ landmarks: [{ name: '門'.repeat(40), azimuthDeg: 1 }] })).status).toBe(200);
    await put({ landmarks: [{ name: 'gate', azimuthDeg: 35 }] });
    expect(readFileSync(arrayFile, 'utf8')).toBe(before);
  });

  it('answers 500 and keeps its list when the file on disk no longer validates (edited meanwhile)', async () => {
    const good = readFileSync(arrayFile, 'utf8');
    writeFileSync(arrayFile, JSON.stringify({ name: 'broken', positions: [[0, 0]] }));
    const res = await put({ landmarks: [{ name: 'door', azimuthDeg: 10 }] });
    expect(res.status).toBe(500);
    const body = await res.json();
    expect(body.error.code).toBe('ERR_HTTP_ARRAY_FILE_FAILED');
    // The reason names the file without its folder, and the field.
    expect(body.error.message).toBe('the array file could not be updated (it is unchanged): square-4.json: positions[0] must be [x, y, z], three finite numbers in metres');
    expect((await (await fetch(`${svc.url}/api/landmarks`)).json()).landmarks).toEqual([{ name: 'gate', azimuthDeg: 35 }]);
    writeFileSync(arrayFile, good);
  });
});
