/**
 * Session tools through the running server: every change journaled with who made it and the sample
 * index, presets saved and applied over REST, both surviving a restart; a corrupt preset file gives
 * a clear error and leaves the others usable; a recording carries the journal of its span.
 */
import { createSocket } from 'node:dgram';
import { mkdtempSync, readdirSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterEach, describe, expect, it } from 'vitest';
import type { Service } from '../../server/service.ts';
import { encodeFrame } from '../../shared/frame.ts';
import { sleep, startTestService, waitFor } from '../helpers/service.ts';

let svc: Service | null = null;
afterEach(async () => {
  await svc?.close();
  svc = null;
});

const UA = { 'user-agent': 'session-test/1.0' };
async function call(method: string, path: string, body?: unknown): Promise<{ status: number; json: any }> {
  const r = await fetch(`${svc!.url}${path}`, { method, headers: { ...UA, ...(method !== 'GET' ? { 'content-type': 'application/json' } : {}) }, body: body === undefined ? undefined : JSON.stringify(body) });
  const text = await r.text();
  return { status: r.status, json: text ? JSON.parse(text) : null };
}

async function feed(frames: number, from = 0, N = 480): Promise<void> {
  const udp = createSocket('udp4');
  const x = new Float32Array(4 * N).map((_, i) => 0.1 * Math.sin(i));
  for (let k = from; k < from + frames; k++) {
    const f = encodeFrame({ streamId: 1, sequence: k, firstSample: k * N, sampleRateHz: 48000, channels: 4, samplesPerChannel: N, encoding: 'float32' }, x);
    await new Promise<void>((r) => udp.send(f, svc!.udpPort!, '127.0.0.1', () => r()));
  }
  udp.close();
  await waitFor(() => svc!.bus.status().samples >= (from + frames) * N, 5000, 'the frames');
}

describe('journal and presets', () => {
  it('journals every change with actor and sample index; journal and presets survive a restart; a corrupt preset is refused clearly', async () => {
    const data = mkdtempSync(join(tmpdir(), 'nullsteer-session-'));
    const outDir = mkdtempSync(join(tmpdir(), 'nullsteer-session-rec-'));
    const layer = { data: { dir: data }, outputs: { dir: outDir }, processing: { azimuthStepDeg: 5 } };
    svc = await startTestService(layer);
    await feed(100); // 48 000 samples: changes now carry a sample index

    expect((await call('PATCH', '/api/processing', { tauS: 0.25 })).status).toBe(200);
    expect((await call('POST', '/api/processing/reset')).status).toBe(204);
    expect((await call('POST', '/api/beams', { azimuthDeg: 40, method: 'delay-and-sum' })).status).toBe(200);
    expect((await call('PUT', '/api/channels/mask', { masked: [2] })).status).toBe(200);
    const saved = await call('PUT', '/api/presets/long memory', {});
    expect(saved.status).toBe(200);
    expect(saved.json.params.lambda).toBeCloseTo(1 - 256 / (48000 * 0.25), 12);
    expect((await call('PUT', '/api/presets/short', { params: { ...saved.json.params, lambda: 0.95 } })).status).toBe(200);
    expect((await call('PUT', '/api/presets/..%2Fescape', {})).status).toBe(400);
    expect((await call('PUT', '/api/presets/bad', { params: { ...saved.json.params, lambda: 2 } })).json.error.message).toMatch(/^preset "bad" cannot be used: lambda: /);
    const applied = await call('POST', '/api/presets/short/apply');
    expect(applied.status).toBe(200);
    expect(applied.json.params.lambda).toBe(0.95);

    const j = (await call('GET', '/api/journal')).json;
    expect(j.entries.map((e: any) => e.kind)).toEqual(['processing', 'reset', 'beam-add', 'mask', 'preset-save', 'preset-save', 'preset-apply']);
    for (const e of j.entries) {
      expect(e.actor).toEqual({ remote: '127.0.0.1', agent: 'session-test/1.0' });
      expect(e.sampleIndex).toBe(48000);
      expect(e.session).toBe(j.session.id);
      expect(Number.isNaN(Date.parse(e.at))).toBe(false);
    }
    expect(j.entries[0].before.lambda).toBeCloseTo(1 - 256 / (48000 * 0.5), 12); // the default τ = 0.5 s
    // In the panel's terms: τ in seconds (hop 256 at 48 kHz), λ beside it, no floating-point noise.
    expect(j.entries[0].summary).toBe('time constant τ 0.5 s → 0.25 s (λ 0.989333 → 0.978667)');
    expect(j.entries[6].summary).toBe('preset short: time constant τ 0.25 s → 0.1067 s (λ 0.978667 → 0.95)');
    expect((await call('GET', '/api/journal?limit=2')).json.entries.map((e: any) => e.seq)).toEqual([6, 7]);
    expect((await call('GET', '/api/journal?afterSeq=5')).json.entries.map((e: any) => e.seq)).toEqual([6, 7]);
    expect((await call('GET', '/api/journal?limit=0')).status).toBe(400);
    expect((await call('GET', '/api/journal?what=1')).status).toBe(400);

    // A recording carries the journal of its span.
    expect((await call('POST', '/api/recording', { encoding: 'int16', beams: false })).status).toBe(200);
    await feed(20, 100);
    await call('PATCH', '/api/processing', { spectrumRateHz: 10 });
    await feed(20, 120);
    await sleep(100);
    expect((await call('DELETE', '/api/recording')).status).toBe(200);
    const jf = readdirSync(outDir).find((f) => f.endsWith('-journal.json'))!;
    const exported = JSON.parse(readFileSync(join(outDir, jf), 'utf8'));
    expect(exported.entries.map((e: any) => e.kind)).toEqual(['recording-start', 'processing', 'recording-stop']);
    expect(exported.files[0]).toMatch(/-raw-0001\.wav$/);

    // Restart on the same data folder, with a corrupt preset file added meanwhile.
    await svc.close();
    writeFileSync(join(data, 'presets', 'broken.json'), '{"name": "broken", "savedAt": "2026-12-02T10:00:00Z", "params": {"lambda": ');
    svc = await startTestService(layer);
    const all = (await call('GET', '/api/journal?session=all')).json;
    expect(all.total).toBe(10);
    expect(all.entries).toHaveLength(10);
    expect(all.entries[0].session).not.toBe(all.session.id);
    expect((await call('GET', '/api/journal')).json.entries).toEqual([]); // the new session has none yet
    const list = (await call('GET', '/api/presets')).json.presets;
    expect(list.map((p: any) => [p.name, p.valid])).toEqual([
      ['broken', false],
      ['long memory', true],
      ['short', true],
    ]);
    expect(list[0].error).toMatch(/^not valid JSON/);
    const refused = await call('POST', '/api/presets/broken/apply');
    expect(refused.status).toBe(422);
    expect(refused.json.error).toEqual({ code: 'ERR_HTTP_PRESET_INVALID', message: expect.stringMatching(/^preset "broken" cannot be used: not valid JSON/), statusCode: 422 });
    expect((await call('POST', '/api/presets/nothing/apply')).json.error.code).toBe('ERR_HTTP_PRESET_NOT_FOUND');
    const back = await call('POST', '/api/presets/long memory/apply');
    expect(back.status).toBe(200);
    expect(back.json.params.lambda).toBeCloseTo(1 - 256 / (48000 * 0.25), 12);
    expect((await call('DELETE', '/api/presets/short')).status).toBe(204);
    expect((await call('GET', '/api/presets')).json.presets.map((p: any) => p.name)).toEqual(['broken', 'long memory']);
    const now = (await call('GET', '/api/journal')).json.entries;
    expect(now.map((e: any) => e.kind)).toEqual(['preset-apply', 'preset-delete']);
    expect(now[0].seq).toBe(11);
  });

  it('a save under a name in use is 409 unless ?overwrite=true; the query is closed; the journal says replaced', async () => {
    const data = mkdtempSync(join(tmpdir(), 'nullsteer-session-'));
    svc = await startTestService({ data: { dir: data } });
    const first = await call('PUT', '/api/presets/field day', {});
    expect(first.status).toBe(200);
    expect(first.json.params.lambda).not.toBe(0.95); // the default τ's λ, so the replacement is a change
    const file = join(data, 'presets', 'field day.json');
    const before = readFileSync(file, 'utf8');

    // Without overwrite (or with overwrite=false): 409 naming the preset and how to replace it; the file untouched.
    const refusal = { status: 409, json: { error: { code: 'ERR_HTTP_PRESET_EXISTS', message: 'a preset named "field day" exists; to replace it, save again with ?overwrite=true', statusCode: 409 } } };
    expect(await call('PUT', '/api/presets/field day', { params: { ...first.json.params, lambda: 0.95 } })).toEqual(refusal);
    expect(await call('PUT', '/api/presets/field day?overwrite=false', { params: { ...first.json.params, lambda: 0.95 } })).toEqual(refusal);
    expect(readFileSync(file, 'utf8')).toBe(before);

    // A query other than overwrite=true|false: 400, nothing saved.
    for (const [q, message] of [
      ['overwrite=yes', 'overwrite: "yes" not allowed; true or false'],
      ['overwrite=TRUE', 'overwrite: "TRUE" not allowed; true or false'],
      ['overwrite=', 'overwrite: "" not allowed; true or false'],
      ['overwrite=true&overwrite=true', 'overwrite: ["true","true"] not allowed; true or false'],
      ['force=true', 'force: unknown query parameter; known: overwrite'],
    ]) {
      expect(await call('PUT', `/api/presets/field day?${q}`, { params: { ...first.json.params, lambda: 0.95 } }), q).toEqual({ status: 400, json: { error: { code: 'ERR_HTTP_VALIDATION', message, statusCode: 400 } } });
    }
    expect((await call('PUT', '/api/presets/fresh?overwrite=maybe', {})).status).toBe(400);
    expect((await call('GET', '/api/presets')).json.presets.map((p: any) => p.name)).toEqual(['field day']);
    expect(readFileSync(file, 'utf8')).toBe(before);

    // With overwrite=true: 200, the new parameters stored; on a new name overwrite=true is a plain save.
    const replaced = await call('PUT', '/api/presets/field day?overwrite=true', { params: { ...first.json.params, lambda: 0.95 } });
    expect(replaced.status).toBe(200);
    expect(replaced.json.params.lambda).toBe(0.95);
    expect((await call('GET', '/api/presets/field day')).json.params.lambda).toBe(0.95);
    expect((await call('PUT', '/api/presets/fresh?overwrite=true', {})).status).toBe(200);

    // The journal: a first save, a replacement naming the version it replaced, a first save (refusals are not journaled).
    const entries = (await call('GET', '/api/journal')).json.entries;
    expect(entries.map((e: any) => [e.kind, e.summary, e.before, e.after])).toEqual([
      ['preset-save', 'preset field day saved', null, { name: 'field day' }],
      ['preset-save', 'preset field day replaced', { name: 'field day', savedAt: first.json.savedAt }, { name: 'field day', replaced: true }],
      ['preset-save', 'preset fresh saved', null, { name: 'fresh' }],
    ]);
  });

  it('a preset file with a field the format does not have is listed as invalid and refused with 422', async () => {
    const data = mkdtempSync(join(tmpdir(), 'nullsteer-session-'));
    svc = await startTestService({ data: { dir: data } });
    const saved = await call('PUT', '/api/presets/base', {});
    expect(saved.status).toBe(200);
    writeFileSync(join(data, 'presets', 'edited.json'), JSON.stringify({ ...saved.json, name: 'edited', comment: 'tuned by hand' }));
    const list = (await call('GET', '/api/presets')).json.presets;
    expect(list).toEqual([
      { name: 'base', savedAt: saved.json.savedAt, valid: true },
      { name: 'edited', valid: false, error: 'comment: unknown field; known: name, savedAt, params' },
    ]);
    expect(await call('POST', '/api/presets/edited/apply')).toEqual({
      status: 422,
      json: { error: { code: 'ERR_HTTP_PRESET_INVALID', message: 'preset "edited" cannot be used: comment: unknown field; known: name, savedAt, params', statusCode: 422 } },
    });
    expect((await call('GET', '/api/presets/edited')).status).toBe(422);
  });
});
