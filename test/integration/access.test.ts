/**
 * Access control of the REST API: the token (refusal to start without one off loopback, 401s,
 * closed reads with access.openStatus false), the per-IP rate limit on control calls (429), the
 * body limit (413), 400s on every mutating route, and no stack traces or paths in any answer.
 */
import { spawn } from 'node:child_process';
import { createSocket } from 'node:dgram';
import { mkdirSync, mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { buildApp } from '../../server/http/app.ts';
import { CLIENT_DIST, type Service } from '../../server/service.ts';
import { encodeFrame } from '../../shared/frame.ts';
import { getStatus, startTestService, tryUpgrade } from '../helpers/service.ts';

const BIN = fileURLToPath(new URL('../../bin/nullsteer.mjs', import.meta.url));
const ROOT = fileURLToPath(new URL('../../', import.meta.url));
const TOKEN = 'a-long-enough-token-123';
const AUTH = { authorization: `Bearer ${TOKEN}` };
const JSON_AUTH = { ...AUTH, 'content-type': 'application/json' };

/**
 * Every error answer (status ≥ 400) seen here; checked at the end for stack frames and file paths.
 * (Status names the array file without its folder; checked on its own below.)
 */
const seen: string[] = [];
function noLeaks(text: string): void {
  expect(text).not.toMatch(/^\s*at .+:\d+:\d+/m);
  expect(text).not.toMatch(/\(\/[^)]*:\d+:\d+\)/);
  expect(text).not.toContain('/work/');
  expect(text).not.toContain(ROOT);
}

async function call(svc: Service, method: string, path: string, opts: { headers?: Record<string, string>; body?: string } = {}): Promise<{ status: number; json: any; text: string; headers: Headers }> {
  const res = await fetch(`${svc.url}${path}`, { method, headers: opts.headers, body: opts.body });
  const text = await res.text();
  if (res.status >= 400) seen.push(text);
  let json: any = null;
  try {
    json = text ? JSON.parse(text) : null;
  } catch {
    json = null;
  }
  return { status: res.status, json, text, headers: res.headers };
}

const shape = (code: string, statusCode: number) => ({ error: { code, message: expect.any(String), statusCode } });

describe('refusal to start off loopback without a token', () => {
  it('serve --host 0.0.0.0 without a token exits 2 naming server.token', async () => {
    const proc = spawn(process.execPath, [BIN, 'serve', '--host', '0.0.0.0', '--http-port', '0'], {
      stdio: ['ignore', 'pipe', 'pipe'],
      env: { ...process.env, NULLSTEER_HTTP_PORT: '', NULLSTEER_CONFIG: '', NULLSTEER_TOKEN: '', NULLSTEER_HOST: '' },
    });
    let out = '';
    let err = '';
    proc.stdout!.on('data', (d) => (out += d));
    proc.stderr!.on('data', (d) => (err += d));
    const killer = setTimeout(() => proc.kill('SIGKILL'), 15000);
    const code = await new Promise<number | null>((r) => proc.once('exit', (c) => r(c)));
    clearTimeout(killer);
    expect(code).toBe(2);
    expect(err).toContain('server.token = null: required when server.host (0.0.0.0) is not loopback');
    expect(out).not.toMatch(/listening on/);
  });
});

describe('a service with a token', () => {
  let svc: Service;
  beforeAll(async () => {
    svc = await startTestService({ server: { token: TOKEN } });
  });
  afterAll(async () => {
    await svc?.close();
  });

  it('mutating calls: 401 without or with a wrong token, 200 with it; reads stay open', async () => {
    const body = JSON.stringify({ spectrumRateHz: 10 });
    const none = await call(svc, 'PATCH', '/api/processing', { headers: { 'content-type': 'application/json' }, body });
    expect(none.status).toBe(401);
    expect(none.headers.get('www-authenticate')).toBe('Bearer realm="nullsteer"');
    expect(none.json).toEqual({ error: { code: 'ERR_HTTP_UNAUTHORIZED', message: 'PATCH /api/processing needs the header Authorization: Bearer <token>', statusCode: 401 } });
    for (const authorization of [`Bearer ${TOKEN}x`, 'Bearer wrong', TOKEN, `Basic ${TOKEN}`]) {
      const wrong = await call(svc, 'PATCH', '/api/processing', { headers: { authorization, 'content-type': 'application/json' }, body });
      expect(wrong.status, authorization).toBe(401);
      expect(wrong.json).toEqual(shape('ERR_HTTP_UNAUTHORIZED', 401));
    }
    const ok = await call(svc, 'PATCH', '/api/processing', { headers: JSON_AUTH, body });
    expect(ok.status).toBe(200);
    expect(ok.json.params.spectrumRateHz).toBe(10);
    const reset = await call(svc, 'POST', '/api/processing/reset', { headers: JSON_AUTH });
    expect(reset.status).toBe(204);
    // access.openStatus defaults to true: reads need no token.
    for (const path of ['/api/status', '/api/processing', '/api/beams', '/api/channels', '/api/recording']) {
      expect((await call(svc, 'GET', path)).status, path).toBe(200);
    }
  });

  it('a body over 64 KiB is refused with 413 in the one JSON shape', async () => {
    const big = JSON.stringify({ pad: 'x'.repeat(70 * 1024) });
    const r = await call(svc, 'PATCH', '/api/processing', { headers: JSON_AUTH, body: big });
    expect(r.status).toBe(413);
    expect(r.json).toEqual({ error: { code: 'ERR_HTTP_BODY_TOO_LARGE', message: 'request body exceeds 65536 bytes', statusCode: 413 } });
  });

  it('every mutating route refuses non-object bodies and wrong types with 400', async () => {
    const cases: [string, string, string][] = [
      ['PATCH', '/api/processing', '[1,2]'],
      ['PATCH', '/api/processing', '"text"'],
      ['PATCH', '/api/processing', '{"spectrumRateHz":"fast"}'],
      ['PUT', '/api/processing', '5'],
      ['PUT', '/api/processing', '{"lambda":0.9}'],
      ['POST', '/api/beams', '[]'],
      ['POST', '/api/beams', '"north"'],
      ['POST', '/api/beams', '{"azimuthDeg":"north"}'],
      ['POST', '/api/beams', '{"azimuthDeg":10,"limiter":"yes"}'],
      ['PATCH', '/api/beams/0', '[]'],
      ['PATCH', '/api/beams/0', '{"gainDb":"loud"}'],
      ['PUT', '/api/channels/mask', '[0]'],
      ['PUT', '/api/channels/mask', '{"masked":"0"}'],
      ['PUT', '/api/channels/mask', '{"masked":[0.5]}'],
      ['POST', '/api/recording', '[]'],
      ['POST', '/api/recording', '"now"'],
      ['POST', '/api/recording', '{"raw":"yes"}'],
      ['POST', '/api/recording', '{"encoding":"mp3"}'],
    ];
    for (const [method, path, body] of cases) {
      const r = await call(svc, method, path, { headers: JSON_AUTH, body });
      expect(r.status, `${method} ${path} ${body}`).toBe(400);
      expect(r.json, `${method} ${path} ${body}`).toEqual(shape('ERR_HTTP_VALIDATION', 400));
    }
    // Not JSON at all: 400 ERR_HTTP_BAD_BODY, on routes with and without a body of their own.
    const garbage: [string, string][] = [
      ['POST', '/api/processing/reset'],
      ['PATCH', '/api/processing'],
      ['POST', '/api/beams'],
      ['DELETE', '/api/beams/0'],
      ['PUT', '/api/channels/mask'],
      ['DELETE', '/api/recording'],
    ];
    for (const [method, path] of garbage) {
      const r = await call(svc, method, path, { headers: JSON_AUTH, body: '{not json' });
      expect(r.status, `${method} ${path}`).toBe(400);
      expect(r.json.error.code, `${method} ${path}`).toBe('ERR_HTTP_BAD_BODY');
      expect(r.json.error.message).toMatch(/^request body is not valid JSON: /);
    }
    // Nothing changed: no beam, no recording.
    expect((await call(svc, 'GET', '/api/beams')).json.beams).toEqual([]);
    expect((await call(svc, 'GET', '/api/status')).json.recording.recording).toBe(false);
  });

  it('no error answer so far carries a stack frame or a file path', () => {
    expect(seen.length).toBeGreaterThanOrEqual(30);
    for (const t of seen) noLeaks(t);
  });
});

describe('rate limits: failed authentications and control calls', () => {
  it("an unauthenticated client is limited after 20 failures, and never takes one of the operator's authorised changes", async () => {
    // The default burst (20); a refill slow enough that the run's duration cannot matter.
    const svc = await startTestService({ server: { token: TOKEN }, access: { authFailureRatePerS: 0.001 } });
    try {
      // Same client address (127.0.0.1) for both: only the token tells them apart.
      const intruder: number[] = [];
      const operator: number[] = [];
      let limited: Awaited<ReturnType<typeof call>> | null = null;
      for (let k = 0; k < 64; k++) {
        const r = await call(svc, 'POST', '/api/processing/reset', { headers: { 'content-type': 'application/json', ...(k % 2 ? { authorization: 'Bearer guess-' + k } : {}) } });
        intruder.push(r.status);
        if (r.status === 429 && !limited) limited = r;
        if (k % 4 === 0) operator.push((await call(svc, 'PATCH', '/api/processing', { headers: JSON_AUTH, body: JSON.stringify({ spectrumRateHz: 10 + (k % 8) }) })).status);
      }
      expect(operator).toEqual(Array(16).fill(200));
      // access.authFailureBurst 20: the first 20 failures are 401, the rest 429.
      expect(intruder).toEqual([...Array(20).fill(401), ...Array(44).fill(429)]);
      // Retry-After: the time to earn one failure back at 0.001/s, whole seconds rounded up.
      expect(limited!.headers.get('retry-after')).toMatch(/^(99\d|1000)$/);
      expect(limited!.json).toEqual({ error: { code: 'ERR_HTTP_AUTH_LIMITED', message: `too many failed authentications from this client (limit 0.001/s, burst 20); retry after ${limited!.headers.get('retry-after')} s`, statusCode: 429 } });
      // Token guesses on upgrades count against the same limit: refused 429, not 401, now.
      expect(await upgrade(svc, '/ingest?token=guess')).toBe(429);
      const st = await getStatus(svc);
      expect(st.access.refused.unauthorized).toBe(20);
      expect(st.access.refused.authLimited).toBe(45);
      expect(st.access.refused.rateLimited).toBe(0);
    } finally {
      await svc.close();
    }
  });

  it('token guesses on reads (access.openStatus false) and on upgrades are limited too', async () => {
    const svc = await startTestService({ server: { token: TOKEN }, access: { openStatus: false, authFailureBurst: 5, authFailureRatePerS: 0.001 } });
    try {
      const got: (number | string)[] = [];
      for (let k = 0; k < 4; k++) got.push((await call(svc, 'GET', '/api/status', { headers: { authorization: `Bearer guess-${k}` } })).status);
      for (let k = 0; k < 4; k++) got.push(await upgrade(svc, `/api/live?token=guess-${k}`));
      expect(got).toEqual([401, 401, 401, 401, 401, 429, 429, 429]);
      // The right token still passes, on reads and upgrades.
      expect((await call(svc, 'GET', '/api/status', { headers: AUTH })).status).toBe(200);
      expect(await upgrade(svc, '/api/live', AUTH)).toBe('open');
    } finally {
      await svc.close();
    }
  });

  it('authorised control calls beyond the burst of 40 get 429 ERR_HTTP_RATE_LIMITED with Retry-After', async () => {
    const svc = await startTestService({ server: { token: TOKEN } });
    try {
      const statuses: number[] = [];
      let limited: Awaited<ReturnType<typeof call>> | null = null;
      for (let k = 0; k < 60; k++) {
        const r = await call(svc, 'POST', '/api/processing/reset', { headers: JSON_AUTH });
        statuses.push(r.status);
        if (r.status === 429 && !limited) limited = r;
      }
      expect(statuses.slice(0, 40).every((s) => s === 204)).toBe(true);
      expect(statuses.filter((s) => s === 429).length).toBeGreaterThan(0);
      expect(limited!.headers.get('retry-after')).toBe('1');
      expect(limited!.json).toEqual({ error: { code: 'ERR_HTTP_RATE_LIMITED', message: 'too many control requests from this client (limit 20/s, burst 40); retry after 1 s', statusCode: 429 } });
      // Reads are not limited.
      expect((await call(svc, 'GET', '/api/status')).status).toBe(200);
    } finally {
      await svc.close();
    }
  });

  it('token bucket: burst, refill at the rate, per client IP, reads exempt, null disables', async () => {
    let t = 0;
    const app = buildApp({ status: () => ({ ok: true }), rateLimit: { perS: 20, burst: 40, now: () => t } });
    const post = (remoteAddress = '127.0.0.1') => app.inject({ method: 'POST', url: '/api/x', remoteAddress });
    for (let k = 0; k < 40; k++) expect((await post()).statusCode).toBe(404);
    const over = await post();
    expect(over.statusCode).toBe(429);
    expect(over.headers['retry-after']).toBe('1');
    expect(over.json().error.code).toBe('ERR_HTTP_RATE_LIMITED');
    expect((await post('127.0.0.2')).statusCode).toBe(404); // another client has its own bucket
    expect((await app.inject({ method: 'GET', url: '/api/status' })).statusCode).toBe(200);
    t += 50; // one token back at 20/s
    expect((await post()).statusCode).toBe(404);
    expect((await post()).statusCode).toBe(429);
    t += 10_000; // refilled, but never beyond the burst
    for (let k = 0; k < 40; k++) expect((await post()).statusCode).toBe(404);
    expect((await post()).statusCode).toBe(429);
    await app.close();

    const open = buildApp({ status: () => ({}), rateLimit: null });
    for (let k = 0; k < 100; k++) expect((await open.inject({ method: 'POST', url: '/api/x' })).statusCode).toBe(404);
    await open.close();
    expect(() => buildApp({ status: () => ({}), rateLimit: { perS: 5, burst: 0 } })).toThrow(RangeError);
  });
});

describe('access.openStatus false', () => {
  it('reads under /api need the token; the dashboard page and assets stay open', async () => {
    const app = buildApp({ status: () => ({ ok: true }), token: TOKEN, openStatus: false, staticDir: CLIENT_DIST });
    const get = (url: string, headers: Record<string, string> = {}, method: 'GET' | 'HEAD' = 'GET') => app.inject({ method, url, headers });
    const refused = await get('/api/status');
    expect(refused.statusCode).toBe(401);
    expect(refused.json()).toEqual({ error: { code: 'ERR_HTTP_UNAUTHORIZED', message: 'GET /api/status needs the header Authorization: Bearer <token>', statusCode: 401 } });
    expect((await get('/api/status', { authorization: 'Bearer wrong' })).statusCode).toBe(401);
    expect((await get('/api/status', { authorization: `Bearer ${TOKEN}` })).statusCode).toBe(200);
    expect((await get('/api/status', {}, 'HEAD')).statusCode).toBe(401);
    expect((await get('/api/status?x=1')).statusCode).toBe(401);
    expect((await get('/%61pi/status')).statusCode).not.toBe(200); // encoded path: still closed
    expect((await get('/api/nothing')).statusCode).toBe(401);
    expect([200, 503]).toContain((await get('/')).statusCode);
    expect((await get('/assets/no-such-file.js')).statusCode).toBe(404); // open: a 404, not a 401
    expect((await get('/favicon.ico')).statusCode).toBe(204);
    await app.close();

    // Default (openStatus absent = true): reads open, writes closed.
    const dflt = buildApp({ status: () => ({ ok: true }), token: TOKEN });
    expect((await dflt.inject({ method: 'GET', url: '/api/status' })).statusCode).toBe(200);
    expect((await dflt.inject({ method: 'POST', url: '/api/status' })).statusCode).toBe(401);
    await dflt.close();
  });
});

/** Open a WebSocket to `path`; resolves 'open' (then closes it) or the HTTP status of a refused upgrade. */
async function upgrade(svc: Service, path: string, headers: Record<string, string> = {}): Promise<number | 'open'> {
  const r = await tryUpgrade(`${svc.url.replace(/^http/, 'ws')}${path}`, headers);
  return r === 'open' ? r : r.status;
}

describe('WebSocket upgrades with a token', () => {
  it('ingest and beam audio always need it; the live rows only when status is closed; header or ?token= both work', async () => {
    // Ingest changes what is processed and recorded; beam audio can carry speech: token always.
    const open = await startTestService({ server: { token: TOKEN } });
    try {
      for (const path of ['/ingest', '/api/beams/audio']) {
        expect(await upgrade(open, path), path).toBe(401);
        expect(await upgrade(open, `${path}?token=wrong`), path).toBe(401);
        expect(await upgrade(open, path, { authorization: 'Bearer wrong' }), path).toBe(401);
        expect(await upgrade(open, `${path}?token=${TOKEN}`), path).toBe('open');
        expect(await upgrade(open, path, AUTH), path).toBe('open');
      }
      expect(await upgrade(open, '/api/live')).toBe('open'); // openStatus (default true): like GET /api/status
      expect(await upgrade(open, '/elsewhere')).toBe(404);
      expect((await getStatus(open)).upgradesRefused).toEqual({ '/ingest': 3, '/api/beams/audio': 3 });
    } finally {
      await open.close();
    }
    const closed = await startTestService({ server: { token: TOKEN }, access: { openStatus: false } });
    try {
      expect(await upgrade(closed, '/api/live')).toBe(401);
      expect(await upgrade(closed, '/api/live?token=nope')).toBe(401);
      expect(await upgrade(closed, `/api/live?token=${encodeURIComponent(TOKEN)}`)).toBe('open'); // what the dashboard sends
      expect(await upgrade(closed, '/api/live', AUTH)).toBe('open');
    } finally {
      await closed.close();
    }
    // No token configured (loopback only): nothing is checked.
    const none = await startTestService();
    try {
      for (const path of ['/ingest', '/api/beams/audio', '/api/live']) expect(await upgrade(none, path), path).toBe('open');
    } finally {
      await none.close();
    }
  });

  it('status names the array file without its folder', async () => {
    const svc = await startTestService();
    try {
      const st = await getStatus(svc);
      expect(st.array.file).toBe('square-4.json');
      expect(JSON.stringify(st)).not.toContain(ROOT);
    } finally {
      await svc.close();
    }
  });
});

describe('internal errors', () => {
  it('status after a worker failure and a failed journal write carries no stack and no absolute path', async () => {
    const data = mkdtempSync(join(tmpdir(), 'nullsteer-leak-'));
    const svc = await startTestService({ data: { dir: data } });
    try {
      svc.engine.injectWorkerFault(0);
      // The fault fires at the worker's next hop: feed it some.
      const x = new Float32Array(4 * 480);
      const udp = createSocket('udp4');
      for (let k = 0; k < 200 && (svc.status().engine as { workerRestarts: number }).workerRestarts === 0; k++) {
        await new Promise<void>((r) => udp.send(encodeFrame({ streamId: 1, sequence: k, firstSample: k * 480, sampleRateHz: 48000, channels: 4, samplesPerChannel: 480, encoding: 'float32' }, x), svc.udpPort!, '127.0.0.1', () => r()));
        await new Promise((r) => setTimeout(r, 5));
      }
      udp.close();
      expect((svc.status().engine as { workerRestarts: number }).workerRestarts).toBe(1);
      // The journal file replaced by a folder: the next change cannot be appended (EISDIR, with the path).
      rmSync(join(data, 'journal.jsonl'), { force: true });
      mkdirSync(join(data, 'journal.jsonl'));
      expect((await call(svc, 'PATCH', '/api/processing', { headers: { 'content-type': 'application/json' }, body: '{"tauS":0.3}' })).status).toBe(200);
      const text = await (await fetch(`${svc.url}/api/status`)).text();
      const st = JSON.parse(text);
      expect(st.engine.lastWorkerError).toBe('Error: injected fault in worker 0');
      expect(st.journal.lastWriteError).toBe('illegal operation on a directory (EISDIR)');
      noLeaks(text);
      expect(text).not.toContain(data);
      expect(text).not.toContain(tmpdir());
    } finally {
      await svc.close();
    }
  });


  it('a route that throws answers 500 ERR_HTTP_INTERNAL with no stack or path', async () => {
    const app = buildApp({ status: () => ({}), token: TOKEN });
    app.get('/api/boom', async () => {
      throw new Error(`exploded reading ${ROOT}secret.ts`);
    });
    app.get('/api/boom-sync', () => {
      (null as unknown as { x: number }).x = 1;
    });
    await app.ready();
    for (const url of ['/api/boom', '/api/boom-sync']) {
      const res = await app.inject({ method: 'GET', url });
      expect(res.statusCode).toBe(500);
      expect(res.json()).toEqual({ error: { code: 'ERR_HTTP_INTERNAL', message: 'internal error; see the server log', statusCode: 500 } });
      noLeaks(res.body);
      expect(res.body).not.toContain('secret');
      expect(res.body).not.toContain('TypeError');
    }
    await app.close();
  });
});
