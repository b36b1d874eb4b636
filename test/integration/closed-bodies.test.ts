/**
 * Every REST body is a closed schema: a field the server does not know is refused 400 wherever it
 * sits (inside `loading`, inside a grid range), so nothing a client invents is kept, echoed or
 * journaled (a 60 KB note inside `loading` was journaled twice per change). A change that fails
 * writes no journal entry.
 */
import { mkdtempSync, readFileSync, statSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import type { Service } from '../../server/service.ts';
import { startTestService } from '../helpers/service.ts';

let svc: Service;
beforeAll(async () => {
  svc = await startTestService();
});
afterAll(async () => {
  await svc?.close();
});

async function call(method: string, path: string, body?: unknown): Promise<{ status: number; json: any }> {
  const r = await fetch(`${svc.url}${path}`, { method, headers: method === 'GET' ? {} : { 'content-type': 'application/json' }, body: body === undefined ? undefined : JSON.stringify(body) });
  const text = await r.text();
  return { status: r.status, json: text ? JSON.parse(text) : null };
}

const note = 'n'.repeat(60_000);

describe('closed request bodies', () => {
  it('unknown fields inside loading or a grid range are refused 400 and journal nothing', async () => {
    const cases: [string, string, unknown, string][] = [
      ['PATCH', '/api/processing', { loading: { mode: 'relative', ratio: 0.01, note } }, "loading: note: unknown field for mode 'relative'; known: mode, ratio"],
      ['PATCH', '/api/processing', { loading: { mode: 'fixed', delta: 1, ratio: 2 } }, "loading: ratio: unknown field for mode 'fixed'; known: mode, delta"],
      ['PATCH', '/api/processing', { grid: { azimuthDeg: { startDeg: 0, stopDeg: 350, stepDeg: 10, note } } }, 'grid.azimuthDeg.note: unknown field; known: startDeg, stopDeg, stepDeg'],
      ['PATCH', '/api/processing', { grid: { azimuthDeg: [0, 350, 10] } }, 'grid.azimuthDeg: must be an object { startDeg, stopDeg, stepDeg }'],
      ['PUT', '/api/compare', { loading: { mode: 'wng', floorDb: 3, note } }, "loading: note: unknown field for mode 'wng'; known: mode, floorDb, maxRatio"],
    ];
    for (const [method, path, body, message] of cases) {
      const r = await call(method, path, body);
      expect(r, `${method} ${path} ${message}`).toEqual({ status: 400, json: { error: { code: 'ERR_HTTP_VALIDATION', message, statusCode: 400 } } });
    }
    // A preset saved with such params is refused the same way.
    const preset = await call('PUT', '/api/presets/noted', { params: { ...(await call('GET', '/api/processing')).json.params, loading: { mode: 'relative', ratio: 0.01, note } } });
    expect(preset.status).toBe(422);
    expect(preset.json.error.message).toBe("preset \"noted\" cannot be used: loading: note: unknown field for mode 'relative'; known: mode, ratio");
    expect((await call('GET', '/api/journal')).json.entries).toEqual([]);
  });

  it('what is accepted is stored as the schema has it: nothing extra in the echo or the journal', async () => {
    const ok = await call('PATCH', '/api/processing', { loading: { mode: 'wng', floorDb: 6 } });
    expect(ok.status).toBe(200);
    expect(ok.json.params.loading).toEqual({ mode: 'wng', floorDb: 6 });
    const entries = (await call('GET', '/api/journal')).json.entries;
    expect(entries.map((e: { kind: string }) => e.kind)).toEqual(['processing']);
    expect(entries[0].after.loading).toEqual({ mode: 'wng', floorDb: 6 });
    // One change, one line of a few KiB at most.
    const line = JSON.stringify(entries[0]);
    expect(line.length).toBeLessThan(4096);
  });

  it('a change that fails journals nothing: PATCH /api/beams/NaN is 404 with no entry', async () => {
    const before = (await call('GET', '/api/journal')).json.total;
    for (const id of ['NaN', '999', '-1']) {
      const r = await call('PATCH', `/api/beams/${id}`, { gainDb: 1 });
      expect(r.status, id).toBe(404);
      expect(r.json.error.code).toBe('ERR_HTTP_NOT_FOUND');
    }
    expect((await call('DELETE', '/api/beams/NaN')).status).toBe(404);
    expect((await call('GET', '/api/journal')).json.total).toBe(before);
  });
});

describe('the journal on disk', () => {
  it('is bounded by data.journalMaxBytes: at most two files of that size', async () => {
    const dir = mkdtempSync(join(tmpdir(), 'nullsteer-journal-rest-'));
    const s = await startTestService({ data: { dir, journalMaxBytes: 65536 }, access: { controlRatePerS: 0 } });
    try {
      for (let k = 0; k < 120; k++) {
        const r = await fetch(`${s.url}/api/processing`, { method: 'PATCH', headers: { 'content-type': 'application/json' }, body: JSON.stringify({ spectrumRateHz: 10 + (k % 20) }) });
        expect(r.status).toBe(200);
      }
      const st = s.status().journal as { rotations: number; entries: number; writeErrors: number };
      expect(st.entries).toBe(120);
      expect(st.rotations).toBeGreaterThanOrEqual(1);
      expect(st.writeErrors).toBe(0);
      for (const f of ['journal.jsonl', 'journal.1.jsonl']) expect(statSync(join(dir, f)).size).toBeLessThanOrEqual(65536);
      expect(readFileSync(join(dir, 'journal.jsonl'), 'utf8').trim().split('\n').length).toBeGreaterThan(0);
    } finally {
      await s.close();
    }
  });
});
