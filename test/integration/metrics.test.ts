/**
 * `GET /metrics` on a running service (the built-in simulator): the answer is the Prometheus text
 * exposition format, version 0.0.4 (content type and syntax checked by the strict parser written
 * from the format's documentation, test/helpers/prom-text.ts), the metrics are there with
 * their types, the counters grow between two reads (counted rows, not time), and the route is
 * refused exactly where `GET /api/status` is (the cases of status's guard tests in
 * access.test.ts and cross-site.test.ts, run on both paths).
 */
import { request } from 'node:http';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { buildApp } from '../../server/http/app.ts';
import { OriginPolicy } from '../../server/http/origin-policy.ts';
import type { Service } from '../../server/service.ts';
import { parsePromText, sampleOf, type PromFamily } from '../helpers/prom-text.ts';
import { startTestService, waitFor } from '../helpers/service.ts';

const TOKEN = 'a-long-enough-token-123';

/** One request with exactly these headers (fetch will not send a foreign Host). */
function raw(port: number, method: string, path: string, headers: Record<string, string> = {}): Promise<{ status: number; type: string; text: string }> {
  return new Promise((resolve, reject) => {
    const req = request({ host: '127.0.0.1', port, method, path, setHost: false, headers: { host: `127.0.0.1:${port}`, ...headers } }, (res) => {
      let text = '';
      res.setEncoding('utf8');
      res.on('data', (d) => (text += d));
      res.on('end', () => resolve({ status: res.statusCode ?? 0, type: String(res.headers['content-type'] ?? ''), text }));
    });
    req.on('error', reject);
    req.end();
  });
}

async function scrape(svc: Service, headers: Record<string, string> = {}): Promise<Map<string, PromFamily>> {
  const r = await raw(svc.httpPort, 'GET', '/metrics', headers);
  expect(r.status).toBe(200);
  // The format's documentation: "text/plain; version=0.0.4"; UTF-8.
  expect(r.type).toBe('text/plain; version=0.0.4; charset=utf-8');
  return parsePromText(r.text);
}

const value = (f: Map<string, PromFamily>, name: string, labels: Record<string, string> = {}, family = name) => sampleOf(f, family, name, labels).value;

describe('GET /metrics on the simulator', () => {
  let svc: Service;
  beforeAll(async () => {
    svc = await startTestService({ source: { kind: 'simulator' }, engine: { workers: 1 }, processing: { azimuthStepDeg: 5 } });
  });
  afterAll(async () => {
    await svc?.close();
  });

  it('parses as the exposition format with the issue\'s metrics and their types', async () => {
    svc.metrics.setSectorLeq('gate', -32.5);
    svc.metrics.countEvent('gate-loud');
    const f = await scrape(svc);
    const types = Object.fromEntries([...f.values()].map((x) => [x.name, x.type]));
    expect(types).toMatchObject({
      nullsteer_ingest_frames_total: 'counter',
      nullsteer_ingest_rejects_total: 'counter',
      nullsteer_ingest_losses_total: 'counter',
      nullsteer_engine_load_ratio: 'gauge',
      nullsteer_engine_shed_step: 'gauge',
      nullsteer_engine_rows_total: 'counter',
      nullsteer_engine_row_latency_seconds: 'histogram',
      nullsteer_recording_active: 'gauge',
      nullsteer_sector_leq_1s_db: 'gauge',
      nullsteer_events_total: 'counter',
      nullsteer_webhook_failures_total: 'counter',
    });
    for (const fam of f.values()) {
      expect(fam.name).toMatch(/^nullsteer_/);
      expect(fam.help, fam.name).toBeTruthy();
    }
    expect(value(f, 'nullsteer_sector_leq_1s_db', { sector: 'gate' })).toBe(-32.5);
    expect(value(f, 'nullsteer_events_total', { rule: 'gate-loud' })).toBe(1);
    expect(value(f, 'nullsteer_recording_active')).toBe(0);
    // Every reject and loss reason is listed (closed lists), at 0 on the simulator.
    expect(value(f, 'nullsteer_ingest_rejects_total', { reason: 'bad_magic' })).toBe(0);
    expect(value(f, 'nullsteer_ingest_losses_total', { reason: 'lost' })).toBe(0);
  });

  it('counters rise between two reads; rows and the latency histogram count the same rows', async () => {
    let first: Map<string, PromFamily> | null = null;
    await waitFor(async () => value((first = await scrape(svc)), 'nullsteer_engine_rows_total') > 0, 30_000, 'a first row');
    const rows1 = value(first!, 'nullsteer_engine_rows_total');
    const frames1 = value(first!, 'nullsteer_ingest_frames_total');
    // One scrape reads one status snapshot, and each row is counted as it is observed: equal.
    expect(value(first!, 'nullsteer_engine_row_latency_seconds_count', {}, 'nullsteer_engine_row_latency_seconds')).toBe(rows1);
    let second: Map<string, PromFamily> | null = null;
    await waitFor(async () => value((second = await scrape(svc)), 'nullsteer_engine_rows_total') > rows1, 30_000, 'more rows');
    expect(value(second!, 'nullsteer_ingest_frames_total')).toBeGreaterThan(frames1);
    // The same figure as status, read after the scrape: never behind it.
    const st = (await (await fetch(`${svc.url}/api/status`)).json()) as { engine: { rows: number } };
    expect(st.engine.rows).toBeGreaterThanOrEqual(value(second!, 'nullsteer_engine_rows_total'));
  });
});

describe('GET /metrics is guarded like GET /api/status', () => {
  it('access.openStatus false: the same refusals as status (access.test.ts cases)', async () => {
    const app = buildApp({ status: () => ({ ok: true }), metrics: async () => 'x 1\n', token: TOKEN, openStatus: false });
    const get = (url: string, headers: Record<string, string> = {}, method: 'GET' | 'HEAD' | 'POST' = 'GET') => app.inject({ method, url, headers });
    const refused = await get('/metrics');
    expect(refused.statusCode).toBe(401);
    expect(refused.json()).toEqual({ error: { code: 'ERR_HTTP_UNAUTHORIZED', message: 'GET /metrics needs the header Authorization: Bearer <token>', statusCode: 401 } });
    expect(refused.headers['www-authenticate']).toBe('Bearer realm="nullsteer"');
    const cases: [string, Record<string, string>, 'GET' | 'HEAD' | 'POST'][] = [
      ['', {}, 'GET'],
      ['', { authorization: 'Bearer wrong' }, 'GET'],
      ['', { authorization: `Bearer ${TOKEN}x` }, 'GET'],
      ['', { authorization: TOKEN }, 'GET'],
      ['', { authorization: `Basic ${TOKEN}` }, 'GET'],
      ['', { authorization: `Bearer ${TOKEN}` }, 'GET'],
      ['', {}, 'HEAD'],
      ['?x=1', {}, 'GET'],
      ['', {}, 'POST'],
    ];
    for (const [query, headers, method] of cases) {
      const status = (await get(`/api/status${query}`, headers, method)).statusCode;
      const metrics = (await get(`/metrics${query}`, headers, method)).statusCode;
      expect(metrics, `${method} ${query} ${JSON.stringify(headers)}`).toBe(status);
    }
    expect((await get('/metrics', { authorization: `Bearer ${TOKEN}` })).statusCode).toBe(200);
    expect((await get('/%6detrics')).statusCode).not.toBe(200); // encoded path: still closed
    await app.close();

    // Default (openStatus absent = true): reads open, writes closed, as status.
    const dflt = buildApp({ status: () => ({ ok: true }), metrics: async () => 'x 1\n', token: TOKEN });
    for (const url of ['/api/status', '/metrics']) {
      expect((await dflt.inject({ method: 'GET', url })).statusCode, url).toBe(200);
      expect((await dflt.inject({ method: 'POST', url })).statusCode, url).toBe(401);
    }
    await dflt.close();
  });

  it('a foreign Host is refused 403 on both; loopback names are served (cross-site.test.ts cases)', async () => {
    const app = buildApp({ status: () => ({ ok: true }), metrics: async () => 'x 1\n', originPolicy: new OriginPolicy({ host: '127.0.0.1', allowedHosts: ['array-box.local'], allowedOrigins: [] }) });
    for (const host of ['evil.example', 'evil.example:8750', 'localhost.evil.example', '127.0.0.1:8750', 'localhost:1', 'array-box.local:80']) {
      const s = await app.inject({ method: 'GET', url: '/api/status', headers: { host } });
      const m = await app.inject({ method: 'GET', url: '/metrics', headers: { host } });
      expect(m.statusCode, host).toBe(s.statusCode);
      if (s.statusCode === 403) expect(m.json().error.code).toBe('ERR_HTTP_HOST_REFUSED');
    }
    await app.close();
  });

  it('a running service with a token and access.openStatus false: 401 without it, the metrics with it; guesses share the limit', async () => {
    const svc = await startTestService({ server: { token: TOKEN }, access: { openStatus: false, authFailureBurst: 5, authFailureRatePerS: 0.001 } });
    try {
      const got: number[] = [];
      for (let k = 0; k < 4; k++) got.push((await raw(svc.httpPort, 'GET', '/api/status', { authorization: `Bearer guess-${k}` })).status);
      for (let k = 0; k < 4; k++) got.push((await raw(svc.httpPort, 'GET', '/metrics', { authorization: `Bearer guess-${k}` })).status);
      expect(got).toEqual([401, 401, 401, 401, 401, 429, 429, 429]);
      const f = await scrape(svc, { authorization: `Bearer ${TOKEN}` });
      expect(f.get('nullsteer_engine_rows_total')!.type).toBe('counter');
      expect((await raw(svc.httpPort, 'GET', '/metrics', { host: 'evil.example' })).status).toBe(403);
    } finally {
      await svc.close();
    }
  });
});
