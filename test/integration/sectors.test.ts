/**
 * Sectors over REST against a real service on 127.0.0.1 (with a token, so the mutating routes'
 * access rules are exercised too): GET, PUT and DELETE /api/sectors/NAME save into a temporary
 * copy of an array file (never the committed ones), the saved file loads and validates again,
 * each change is journaled, reaches the live socket as a new hello and the exported controller's
 * listeners; bad bodies are 400 naming the field, with the whole error object.
 */
import { copyFileSync, mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import WebSocket from 'ws';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { FIXTURES, startTestService, waitFor } from '../helpers/service.ts';
import { loadGeometry } from '../../server/config/array-file.ts';
import { parseServerMessage, type HelloMessage } from '../../shared/messages.ts';
import type { Sector } from '../../shared/sectors.ts';
import type { Service } from '../../server/service.ts';

const TOKEN = 'sector-test-token-0123456789';
const JSON_AUTH = { 'content-type': 'application/json', authorization: `Bearer ${TOKEN}` };

let svc: Service;
let arrayFile: string;
const hellos: HelloMessage[] = [];
const heard: Sector[][] = [];
let ws: WebSocket;

async function call(method: string, path: string, body?: unknown, headers: Record<string, string> = JSON_AUTH): Promise<{ status: number; json: any }> {
  const res = await fetch(`${svc.url}${path}`, { method, headers, body: body === undefined ? undefined : typeof body === 'string' ? body : JSON.stringify(body) });
  const text = await res.text();
  return { status: res.status, json: text ? JSON.parse(text) : null };
}
const onDisk = () => JSON.parse(readFileSync(arrayFile, 'utf8'));

const gate = { azimuthDeg: [20, 50], method: 'mvdr', weighting: 'A' };
const north = { azimuthDeg: [350, 10], elevationDeg: [0, 30], bandHz: [500, 4000], method: 'conventional', weighting: 'C' };

describe('sectors REST', () => {
  beforeAll(async () => {
    const dir = mkdtempSync(join(tmpdir(), 'nullsteer-sectors-'));
    arrayFile = join(dir, 'square-4.json');
    copyFileSync(`${FIXTURES}arrays/square-4.json`, arrayFile);
    svc = await startTestService({ array: { file: arrayFile }, server: { token: TOKEN } });
    svc.sectors.onChange((after) => heard.push(after));
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

  it('starts empty, creates (201), replaces (200), reads one, and saves into the array file', async () => {
    expect(await call('GET', '/api/sectors')).toEqual({ status: 200, json: { sectors: [], maxSectors: 8, file: 'square-4.json' } });
    expect(hellos[0].array.sectors).toEqual([]);

    const created = await call('PUT', '/api/sectors/gate', gate);
    expect(created).toEqual({ status: 201, json: { sector: { name: 'gate', ...gate }, created: true } });
    const second = await call('PUT', '/api/sectors/north_fence', north);
    expect(second.status).toBe(201);
    const moved = await call('PUT', '/api/sectors/gate', { ...gate, azimuthDeg: [25, 55] });
    expect(moved).toEqual({ status: 200, json: { sector: { name: 'gate', ...gate, azimuthDeg: [25, 55] }, created: false } });

    const saved = [
      { name: 'gate', ...gate, azimuthDeg: [25, 55] },
      { name: 'north_fence', ...north },
    ];
    expect((await call('GET', '/api/sectors')).json.sectors).toEqual(saved);
    expect(await call('GET', '/api/sectors/north_fence')).toEqual({ status: 200, json: { sector: saved[1] } });
    expect(svc.sectors.get('gate')).toEqual(saved[0]);
    expect(svc.sectors.list()).toEqual(saved);

    // The file holds them, keeps the rest, and validates again as a file loaded at start-up.
    expect(onDisk().sectors).toEqual(saved);
    expect(onDisk().positions).toEqual(JSON.parse(readFileSync(`${FIXTURES}arrays/square-4.json`, 'utf8')).positions);
    expect((await loadGeometry(arrayFile)).sectors).toEqual(saved);

    // Journaled (one entry per change), heard by the controller's listeners, and told to the dashboards.
    const journal = (await call('GET', '/api/journal')).json;
    const entries = journal.entries.filter((e: { kind: string }) => e.kind === 'sectors');
    expect(entries.map((e: { summary: string }) => e.summary)).toEqual([
      'sectors: + gate 20°→50° mvdr A',
      'sectors: + north_fence 350°→10° el 0–30° 500–4000 Hz conventional C',
      'sectors: gate 20°→50° mvdr A → 25°→55° mvdr A',
    ]);
    expect(entries.at(-1).after).toEqual(saved);
    expect(heard.length).toBe(3);
    expect(heard.at(-1)).toEqual(saved);
    await waitFor(() => hellos.some((h) => JSON.stringify(h.array.sectors) === JSON.stringify(saved)), 15_000, 'a hello with the sectors');
  });

  it('deletes one (404 for an unknown name), and the last removes the field from the file', async () => {
    expect(await call('DELETE', '/api/sectors/nowhere')).toEqual({ status: 404, json: { error: { code: 'ERR_HTTP_SECTOR_NOT_FOUND', message: 'no sector named nowhere', statusCode: 404 } } });
    expect(await call('GET', '/api/sectors/nowhere')).toEqual({ status: 404, json: { error: { code: 'ERR_HTTP_SECTOR_NOT_FOUND', message: 'no sector named nowhere', statusCode: 404 } } });
    const del = await call('DELETE', '/api/sectors/gate');
    expect(del.status).toBe(200);
    expect(del.json.deleted.name).toBe('gate');
    expect(del.json.sectors.map((s: Sector) => s.name)).toEqual(['north_fence']);
    expect(onDisk().sectors.map((s: Sector) => s.name)).toEqual(['north_fence']);
    expect((await call('DELETE', '/api/sectors/north_fence')).status).toBe(200);
    expect('sectors' in onDisk()).toBe(false);
    const journal = (await call('GET', '/api/journal')).json;
    expect(journal.entries.at(-1).summary).toBe('sectors: − north_fence');
  });

  it('refuses bad bodies and names with 400 naming each field, and leaves the file as it was', async () => {
    await call('PUT', '/api/sectors/gate', gate);
    const before = readFileSync(arrayFile, 'utf8');
    // The test service runs at 48 kHz with the processing band 300–6000 Hz (config defaults).
    const proc = (await call('GET', '/api/processing')).json;
    const [lo, hi] = proc.params.bandHz;
    expect(proc.derived.sampleRateHz).toBe(48_000);
    const cases: [string, unknown, string][] = [
      ['gate', { ...gate, azimuthDeg: [0, 360] }, 'azimuthDeg: must be [from, to], degrees in [0, 360) (the sector runs counter-clockwise from "from" to "to" and may wrap through 0)'],
      ['gate', { ...gate, azimuthDeg: [90, 90] }, 'azimuthDeg: must have two different ends (from = to has no width)'],
      ['gate', { ...gate, elevationDeg: [40, 10] }, 'elevationDeg: must have lo < hi'],
      ['gate', { ...gate, elevationDeg: [0, 95] }, 'elevationDeg: must be [lo, hi], degrees in -90…90'],
      ['gate', { ...gate, bandHz: [100, 30000] }, 'bandHz: must be [lo, hi], Hz in 1…24000 Hz (half the sample rate)'],
      ['gate', { ...gate, bandHz: [lo - 100, hi] }, `bandHz: must lie inside the processing band ${lo}–${hi} Hz (only those frequencies are analysed)`],
      ['gate', { ...gate, method: 'capon' }, 'method: must be one of "mvdr", "conventional"'],
      ['gate', { ...gate, weighting: 'a' }, 'weighting: must be one of "A", "C", "Z" (IEC 61672-1 frequency weighting)'],
      ['gate', { ...gate, name: 'gate' }, 'name: comes from the path (/api/sectors/NAME), not the body'],
      ['gate', { ...gate, levelDb: 60 }, 'levelDb: is not a sector field (azimuthDeg, elevationDeg, bandHz, method, weighting)'],
      ['gate', [], '(body): must be an object { "azimuthDeg", "elevationDeg"?, "bandHz"?, "method", "weighting" }'],
      ['gate', { azimuthDeg: 'north', weighting: 'A' }, 'azimuthDeg: must be [from, to], degrees in [0, 360) (the sector runs counter-clockwise from "from" to "to" and may wrap through 0); method: must be one of "mvdr", "conventional"'],
      ['road%20bend', gate, 'name: must be 1–32 letters, digits, _ or - (the last part of /api/sectors/NAME)'],
      ['x'.repeat(33), gate, 'name: must be 1–32 letters, digits, _ or - (the last part of /api/sectors/NAME)'],
    ];
    for (const [name, body, detail] of cases) {
      const r = await call('PUT', `/api/sectors/${name}`, body);
      expect(r, `${name} ${JSON.stringify(body)}`).toEqual({ status: 400, json: { error: { code: 'ERR_HTTP_VALIDATION', message: detail, statusCode: 400 } } });
    }
    expect((await call('GET', '/api/sectors/road%20bend')).status).toBe(400);
    // Not JSON at all.
    expect((await call('PUT', '/api/sectors/gate', '{"azimuthDeg": [')).json.error.code).toBe('ERR_HTTP_BAD_BODY');
    expect(readFileSync(arrayFile, 'utf8')).toBe(before);
  });

  it('holds at most 8 sectors: a ninth is 409, replacing one of the 8 still works', async () => {
    for (let i = 1; i < 8; i++) expect((await call('PUT', `/api/sectors/s${i}`, { ...gate, azimuthDeg: [i * 40, i * 40 + 20] })).status).toBe(201);
    expect(onDisk().sectors).toHaveLength(8);
    const ninth = await call('PUT', '/api/sectors/s8', gate);
    expect(ninth.status).toBe(409);
    expect(ninth.json.error).toEqual({ code: 'ERR_HTTP_SECTORS_FULL', message: 'there are already 8 sectors (gate, s1, s2, s3, s4, s5, s6, s7); delete one first', statusCode: 409 });
    expect((await call('PUT', '/api/sectors/s7', { ...gate, weighting: 'Z' })).status).toBe(200);
    expect(onDisk().sectors).toHaveLength(8);
    for (let i = 1; i < 8; i++) expect((await call('DELETE', `/api/sectors/s${i}`)).status).toBe(200);
  });

  it('mutating calls follow the access rules: token, JSON content type, foreign origin; reads stay open', async () => {
    const noToken = await call('PUT', '/api/sectors/gate', gate, { 'content-type': 'application/json' });
    expect(noToken).toEqual({ status: 401, json: { error: { code: 'ERR_HTTP_UNAUTHORIZED', message: 'PUT /api/sectors/gate needs the header Authorization: Bearer <token>', statusCode: 401 } } });
    expect((await call('DELETE', '/api/sectors/gate', undefined, { 'content-type': 'application/json' })).status).toBe(401);
    const noType = await call('PUT', '/api/sectors/gate', gate, { authorization: `Bearer ${TOKEN}` });
    expect(noType.status).toBe(415);
    expect(noType.json.error.code).toBe('ERR_HTTP_UNSUPPORTED_MEDIA_TYPE');
    const foreign = await call('DELETE', '/api/sectors/gate', undefined, { ...JSON_AUTH, origin: 'http://elsewhere.example' });
    expect(foreign.status).toBe(403);
    expect(foreign.json.error.code).toBe('ERR_HTTP_ORIGIN_REFUSED');
    expect((await fetch(`${svc.url}/api/sectors`)).status).toBe(200);
    expect(onDisk().sectors.map((s: Sector) => s.name)).toEqual(['gate']);
  });

  it('answers 500 and keeps its list when the file on disk no longer validates (edited meanwhile)', async () => {
    const good = readFileSync(arrayFile, 'utf8');
    writeFileSync(arrayFile, JSON.stringify({ name: 'broken', positions: [[0, 0]] }));
    const r = await call('PUT', '/api/sectors/door', gate);
    expect(r.status).toBe(500);
    expect(r.json.error).toEqual({ code: 'ERR_HTTP_ARRAY_FILE_FAILED', message: 'the array file could not be updated (it is unchanged): square-4.json: positions[0] must be [x, y, z], three finite numbers in metres', statusCode: 500 });
    expect((await call('GET', '/api/sectors')).json.sectors.map((s: Sector) => s.name)).toEqual(['gate']);
    writeFileSync(arrayFile, good);
  });
});
