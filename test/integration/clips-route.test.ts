/**
 * GET /api/clips/FILE (server/http/routes/clips.ts) on the fastify app with real files in a
 * temporary clips folder: the three endings served with their content types and exact bytes,
 * every other name 404 (path separators, dot segments, percent-escapes, other endings, names that
 * are not on disk), single byte ranges per RFC 9110 §14 (206 with Content-Range, 416 beyond the
 * end), and the read guard of a closed status (token needed) as for the other read-only GETs.
 */
import { mkdirSync, mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { buildApp } from '../../server/http/app.ts';
import { CLIP_FILE, parseByteRange } from '../../server/http/routes/clips.ts';

const root = mkdtempSync(join(tmpdir(), 'nullsteer-clips-route-'));
const dir = join(root, 'clips');
mkdirSync(dir);
const ID = 'gate-loud-20261204T015500Z-288000';
// 44-byte RIFF/WAVE header shape (Microsoft & IBM 1991) then 100 bytes; the route does not parse it.
const wav = Buffer.concat([Buffer.from('RIFF'), Buffer.alloc(4), Buffer.from('WAVEfmt '), Buffer.alloc(28), Buffer.from('data'), Buffer.alloc(4), Buffer.from(Array.from({ length: 100 }, (_, i) => i))]);
writeFileSync(join(dir, `${ID}-beam.wav`), wav);
writeFileSync(join(dir, `${ID}-raw.wav`), wav.subarray(0, 60));
writeFileSync(join(dir, `${ID}-beam.json`), '{"event":{"id":"x"}}\n');
writeFileSync(join(dir, `${ID}-beam.txt`), 'not served');
writeFileSync(join(root, 'secret-beam.wav'), 'outside the clips folder');
mkdirSync(join(dir, 'folder-beam.wav'));

const app = buildApp({ status: () => ({ ok: true }), clipsDir: dir });
const closed = buildApp({ status: () => ({ ok: true }), clipsDir: dir, token: 'a-token', openStatus: false });
afterAll(async () => {
  await app.close();
  await closed.close();
});

const notFound = (name: string) => ({ error: { code: 'ERR_HTTP_CLIP_NOT_FOUND', message: `no clip named ${JSON.stringify(name)}`, statusCode: 404 } });

describe('GET /api/clips/FILE', () => {
  it('serves the beam clip, the raw clip and the sidecar with their types and exact bytes', async () => {
    const b = await app.inject({ method: 'GET', url: `/api/clips/${ID}-beam.wav` });
    expect(b.statusCode).toBe(200);
    expect(b.headers['content-type']).toBe('audio/wav');
    expect(b.headers['accept-ranges']).toBe('bytes');
    expect(b.headers['content-length']).toBe(String(wav.length));
    expect(b.rawPayload.equals(wav)).toBe(true);
    const r = await app.inject({ method: 'GET', url: `/api/clips/${ID}-raw.wav` });
    expect(r.statusCode).toBe(200);
    expect(r.rawPayload.equals(wav.subarray(0, 60))).toBe(true);
    const j = await app.inject({ method: 'GET', url: `/api/clips/${ID}-beam.json` });
    expect(j.statusCode).toBe(200);
    expect(j.headers['content-type']).toBe('application/json; charset=utf-8');
    expect(j.json()).toEqual({ event: { id: 'x' } });
  });

  it('answers 404 with one JSON shape for names outside the pattern and for names not on disk', async () => {
    const cases: [string, string][] = [
      [`${ID}-beam.txt`, `${ID}-beam.txt`],
      ['..%2Fsecret-beam.wav', '../secret-beam.wav'],
      ['..%5Csecret-beam.wav', '..\\secret-beam.wav'],
      ['a.b-beam.wav', 'a.b-beam.wav'],
      ['-beam.wav', '-beam.wav'],
      [`${ID}-raw.json`, `${ID}-raw.json`],
      ['no-such-event-beam.wav', 'no-such-event-beam.wav'],
      ['folder-beam.wav', 'folder-beam.wav'],
    ];
    for (const [url, name] of cases) {
      const res = await app.inject({ method: 'GET', url: `/api/clips/${url}` });
      expect(res.statusCode, url).toBe(404);
      expect(res.json(), url).toEqual(notFound(name));
    }
    // A path with a separator does not match the route at all.
    expect((await app.inject({ method: 'GET', url: '/api/clips/x/secret-beam.wav' })).statusCode).toBe(404);
    expect(CLIP_FILE.test(`${'a'.repeat(161)}-beam.wav`)).toBe(false);
  });

  it('answers single byte ranges with 206 and Content-Range, 416 beyond the end (RFC 9110 §14)', async () => {
    const size = wav.length;
    const part = await app.inject({ method: 'GET', url: `/api/clips/${ID}-beam.wav`, headers: { range: 'bytes=44-53' } });
    expect(part.statusCode).toBe(206);
    expect(part.headers['content-range']).toBe(`bytes 44-53/${size}`);
    expect(part.rawPayload.equals(wav.subarray(44, 54))).toBe(true);
    const tail = await app.inject({ method: 'GET', url: `/api/clips/${ID}-beam.wav`, headers: { range: 'bytes=-4' } });
    expect(tail.statusCode).toBe(206);
    expect(tail.rawPayload.equals(wav.subarray(size - 4))).toBe(true);
    const open = await app.inject({ method: 'GET', url: `/api/clips/${ID}-beam.wav`, headers: { range: 'bytes=100-' } });
    expect(open.headers['content-range']).toBe(`bytes 100-${size - 1}/${size}`);
    expect(open.rawPayload.equals(wav.subarray(100))).toBe(true);
    const beyond = await app.inject({ method: 'GET', url: `/api/clips/${ID}-beam.wav`, headers: { range: `bytes=${size}-` } });
    expect(beyond.statusCode).toBe(416);
    expect(beyond.headers['content-range']).toBe(`bytes */${size}`);
    // Forms this route does not take (several ranges, other units) get the whole file (RFC 9110 allows ignoring Range).
    const multi = await app.inject({ method: 'GET', url: `/api/clips/${ID}-beam.wav`, headers: { range: 'bytes=0-1,4-5' } });
    expect(multi.statusCode).toBe(200);
    expect(multi.rawPayload.length).toBe(size);
    expect(parseByteRange('bytes=5-2', 10)).toBeNull();
    expect(parseByteRange('bytes=0-99', 10)).toEqual({ start: 0, end: 9 });
    expect(parseByteRange('bytes=-0', 10)).toBe('unsatisfiable');
  });

  it('needs the token when reads are closed, like the other read-only GETs', async () => {
    const refused = await closed.inject({ method: 'GET', url: `/api/clips/${ID}-beam.wav` });
    expect(refused.statusCode).toBe(401);
    const ok = await closed.inject({ method: 'GET', url: `/api/clips/${ID}-beam.wav`, headers: { authorization: 'Bearer a-token' } });
    expect(ok.statusCode).toBe(200);
    expect(ok.rawPayload.equals(wav)).toBe(true);
  });
});
