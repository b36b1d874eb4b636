/**
 * A web page the operator has open is a client of the server too. On the default configuration
 * (loopback, no token) no other site may drive it (cross-site POST, WebSocket upgrades) or read it
 * under a name of its own (DNS rebinding: a foreign Host header). The browser rules relied on:
 * browsers send `Origin` on every cross-origin request and on every WebSocket handshake, and may
 * send a cross-site POST without asking first only as a form or plain text, never as
 * application/json (the WHATWG Fetch standard's "CORS-safelisted request-header" rule, from memory).
 */
import { request } from 'node:http';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import type { Service } from '../../server/service.ts';
import { getStatus, startTestService, tryUpgrade } from '../helpers/service.ts';

/** One request with exactly these headers, Host included or left out (fetch will not send a foreign Host). */
function raw(svc: Service, method: string, path: string, headers: Record<string, string>, body?: string): Promise<{ status: number; json: any }> {
  return new Promise((resolve, reject) => {
    const req = request({ host: '127.0.0.1', port: svc.httpPort, method, path, setHost: false, headers: { ...headers, ...(body !== undefined ? { 'content-length': String(Buffer.byteLength(body)) } : {}) } }, (res) => {
      let text = '';
      res.setEncoding('utf8');
      res.on('data', (d) => (text += d));
      res.on('end', () => resolve({ status: res.statusCode ?? 0, json: text ? JSON.parse(text) : null }));
    });
    req.on('error', reject);
    req.end(body);
  });
}

/** Open a WebSocket with these headers: 'open', or the refused upgrade's status and JSON body. */
const upgrade = (svc: Service, path: string, headers: Record<string, string>) => tryUpgrade(`ws://127.0.0.1:${svc.httpPort}${path}`, headers);

const EVIL = 'http://evil.example';

describe('cross-site requests and foreign Host names (default configuration: loopback, no token)', () => {
  let svc: Service;
  let own: string;
  beforeAll(async () => {
    svc = await startTestService({ server: { allowedHosts: ['array-box.local'], allowedOrigins: ['http://console.site.test:8080'] } });
    own = `127.0.0.1:${svc.httpPort}`;
  });
  afterAll(async () => {
    await svc?.close();
  });

  it('a body-less cross-site POST /api/recording is refused 403 and records nothing', async () => {
    const r = await raw(svc, 'POST', '/api/recording', { host: own, origin: EVIL });
    expect(r).toEqual({ status: 403, json: { error: { code: 'ERR_HTTP_ORIGIN_REFUSED', message: 'requests from the web origin "http://evil.example" are refused; add it to server.allowedOrigins to allow it', statusCode: 403 } } });
    // As a form (what a page may post cross-site without asking): refused for its origin too.
    const form = await raw(svc, 'POST', '/api/recording', { host: own, origin: EVIL, 'content-type': 'application/x-www-form-urlencoded' }, 'raw=true');
    expect(form.status).toBe(403);
    // `Origin: null` (a sandboxed frame or a file) is not an origin of this server either.
    expect((await raw(svc, 'POST', '/api/processing/reset', { host: own, origin: 'null', 'content-type': 'application/json' })).status).toBe(403);
    expect((await getStatus(svc)).recording.recording).toBe(false);
  });

  it('a mutating request that is not application/json is refused 415, whatever its origin', async () => {
    const r = await raw(svc, 'POST', '/api/recording', { host: own, 'content-type': 'text/plain' }, '{}');
    expect(r).toEqual({ status: 415, json: { error: { code: 'ERR_HTTP_UNSUPPORTED_MEDIA_TYPE', message: 'POST /api/recording needs the header content-type: application/json', statusCode: 415 } } });
    expect((await raw(svc, 'DELETE', '/api/beams/0', { host: own })).status).toBe(415);
    expect((await getStatus(svc)).recording.recording).toBe(false);
  });

  it('cross-site WebSocket upgrades of beam audio, live rows and ingest are refused 403', async () => {
    for (const path of ['/api/beams/audio', '/api/live', '/api/live/compare', '/ingest']) {
      const r = await upgrade(svc, path, { origin: EVIL });
      expect(r, path).toEqual({ status: 403, json: { error: { code: 'ERR_HTTP_ORIGIN_REFUSED', message: 'requests from the web origin "http://evil.example" are refused; add it to server.allowedOrigins to allow it', statusCode: 403 } } });
    }
    // The server's own page, an allowed origin and a client without Origin (not a browser) connect.
    expect(await upgrade(svc, '/api/live', { origin: `http://${own}` })).toBe('open');
    expect(await upgrade(svc, '/api/live', { origin: 'http://console.site.test:8080' })).toBe('open');
    expect(await upgrade(svc, '/ingest', {})).toBe('open');
  });

  it('a foreign Host (DNS rebinding) is refused 403 on reads, changes and upgrades; loopback names, the bound address and allowed hosts are served', async () => {
    for (const host of ['evil.example', `evil.example:${svc.httpPort}`, 'localhost.evil.example']) {
      const r = await raw(svc, 'GET', '/api/status', { host });
      expect(r.status, host).toBe(403);
      expect(r.json.error.code).toBe('ERR_HTTP_HOST_REFUSED');
    }
    expect((await raw(svc, 'GET', '/', { host: 'evil.example' })).status).toBe(403);
    // Same origin as far as the page can tell: the rebinding page's own name in Host and Origin.
    const change = await raw(svc, 'PATCH', '/api/processing', { host: 'evil.example:8750', origin: 'http://evil.example:8750', 'content-type': 'application/json' }, '{"tauS":0.2}');
    expect(change.json).toEqual({ error: { code: 'ERR_HTTP_HOST_REFUSED', message: 'Host "evil.example:8750" is not a name of this server; add it to server.allowedHosts to allow it', statusCode: 403 } });
    expect(await upgrade(svc, '/api/live', { host: 'evil.example' })).toMatchObject({ status: 403, json: { error: { code: 'ERR_HTTP_HOST_REFUSED' } } });
    for (const host of [own, `localhost:${svc.httpPort}`, '127.0.0.1', 'array-box.local:80', `[::1]:${svc.httpPort}`]) {
      expect((await raw(svc, 'GET', '/api/status', { host })).status, host).toBe(200);
    }
    // No Host at all: an HTTP/1.1 request must carry one (RFC 9112 §3.2); Node's server answers 400.
    expect((await raw(svc, 'GET', '/api/status', {})).status).toBe(400);
  });

  it("the server's own page works: same-origin changes with the JSON content type, with and without a body", async () => {
    const headers = { host: own, origin: `http://${own}`, 'content-type': 'application/json' };
    expect((await raw(svc, 'PATCH', '/api/processing', headers, '{"tauS":0.25}')).status).toBe(200);
    expect((await raw(svc, 'POST', '/api/processing/reset', headers)).status).toBe(204);
    const beam = await raw(svc, 'POST', '/api/beams', headers, '{"azimuthDeg":10}');
    expect(beam.status).toBe(200);
    expect((await raw(svc, 'DELETE', `/api/beams/${beam.json.id}`, headers)).status).toBe(204);
  });

  it('status counts every refusal by reason', async () => {
    const st = await getStatus(svc);
    expect(st.access.refused).toMatchObject({ origin: 7, contentType: 2, host: 6 });
    expect(st.access.last).toMatchObject({ reason: 'host', method: 'GET', path: '/api/live' });
    expect(st.upgradesRefused).toEqual({ '/api/beams/audio': 1, '/api/live': 2, '/api/live/compare': 1, '/ingest': 1 });
  });
});

describe('bodies nested too deep', () => {
  it('are refused 400 on every mutating route, never 500', async () => {
    const svc = await startTestService();
    try {
      const deep = `${'['.repeat(20_000)}${']'.repeat(20_000)}`;
      const nestedField = `{"masked":${deep}}`;
      const cases: [string, string, string][] = [
        ['PATCH', '/api/processing', deep],
        ['PUT', '/api/processing', deep],
        ['PATCH', '/api/processing', `{"grid":${'{"a":'.repeat(5000)}1${'}'.repeat(5000)}}`],
        ['POST', '/api/beams', deep],
        ['PATCH', '/api/beams/0', deep],
        ['PUT', '/api/channels/mask', nestedField],
        ['POST', '/api/recording', deep],
        ['PUT', '/api/presets/deep', `{"params":${deep}}`],
        ['PUT', '/api/compare', deep],
        ['POST', '/api/compare/promote', deep],
      ];
      for (const [method, path, body] of cases) {
        const r = await raw(svc, method, path, { host: `127.0.0.1:${svc.httpPort}`, 'content-type': 'application/json' }, body);
        expect(r, `${method} ${path}`).toEqual({ status: 400, json: { error: { code: 'ERR_HTTP_BAD_BODY', message: 'request body is nested deeper than 32 levels', statusCode: 400 } } });
      }
      // 32 levels are fine as JSON (and then refused for what they say).
      const ok = await raw(svc, 'PUT', '/api/channels/mask', { host: `127.0.0.1:${svc.httpPort}`, 'content-type': 'application/json' }, `{"masked":${'['.repeat(31)}${']'.repeat(31)}}`);
      expect(ok.status).toBe(400);
      expect(ok.json.error.code).toBe('ERR_HTTP_VALIDATION');
    } finally {
      await svc.close();
    }
  });
});
