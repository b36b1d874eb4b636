/**
 * The site service's live socket and HTTP routes without a broker: the client limit (503 beyond
 * it), a broadcast serialised once reaching every client, a message too large closing with 1009
 * (RFC 6455 §7.4.1: 1009 "message too big"), the plan image served with its type, and the
 * catalogue's 404 when the plan has none.
 */
import { createServer, type Server } from 'node:http';
import { mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import WebSocket from 'ws';
import { afterAll, describe, expect, it } from 'vitest';
import { SiteLive } from '../../server/site/site-live.ts';
import { buildSiteApp } from '../../server/site/site-http.ts';
import { loadPlan, planImagePath } from '../../server/site/plan-file.ts';
import { waitFor } from '../helpers/service.ts';

describe('site live socket', () => {
  let server: Server;
  const live = new SiteLive({ hello: () => ({ type: 'hello' }), maxClients: 1 });
  afterAll(async () => {
    live.close();
    await new Promise((r) => server.close(r));
  });

  it('greets, broadcasts, refuses a client beyond the limit with 503, and closes 1009 on a large message', async () => {
    server = createServer();
    server.on('upgrade', (req, socket, head) => {
      if (!live.handleUpgrade(req, socket, head)) socket.destroy();
    });
    await new Promise<void>((r) => server.listen(0, '127.0.0.1', r));
    const port = (server.address() as { port: number }).port;
    const url = `ws://127.0.0.1:${port}/api/site/live`;
    const a = new WebSocket(url);
    const got: any[] = [];
    a.on('message', (d) => got.push(JSON.parse(String(d))));
    await waitFor(() => got.length === 1, 10_000, 'hello');
    expect(got[0]).toEqual({ type: 'hello' });

    const b = new WebSocket(url);
    const status = await new Promise<number>((resolve) => b.on('unexpected-response', (_req, res) => resolve(res.statusCode ?? 0)));
    expect(status).toBe(503);
    expect(live.stats.refusedFull).toBe(1);

    live.broadcast({ type: 'nodes', nodes: [] });
    await waitFor(() => got.length === 2, 10_000, 'broadcast');
    expect(got[1]).toEqual({ type: 'nodes', nodes: [] });

    const closed = new Promise<number>((resolve) => a.on('close', (code) => resolve(code)));
    a.send('x'.repeat(5000));
    expect(await closed).toBe(1009);
  });
});

describe('site HTTP routes', () => {
  it('serves the plan and its image with its type; 404 from the catalogue without an image', async () => {
    const dir = mkdtempSync(join(tmpdir(), 'site-http-'));
    writeFileSync(join(dir, 'yard.svg'), '<svg xmlns="http://www.w3.org/2000/svg" width="10" height="10"/>');
    writeFileSync(join(dir, 'plan.json'), JSON.stringify({ name: 'y', widthM: 10, heightM: 10, originM: [0, 0], image: { file: 'yard.svg', metresPerPixel: 1 } }));
    const { plan, dir: d } = loadPlan(join(dir, 'plan.json'));
    const view = { ...plan, image: { ...plan.image!, url: 'api/site/plan/image' } };
    const app = buildSiteApp({ site: () => ({}), sources: () => ({}), plan: view, planImage: planImagePath(d, plan) });
    const img = await app.inject({ url: '/api/site/plan/image' });
    expect(img.statusCode).toBe(200);
    expect(img.headers['content-type']).toBe('image/svg+xml');
    expect((await app.inject({ url: '/api/site/plan' })).json()).toEqual(view);
    const none = buildSiteApp({ site: () => ({}), sources: () => ({}), plan: { ...plan, image: null }, planImage: null });
    expect((await none.inject({ url: '/api/site/plan/image' })).json()).toEqual({ error: { code: 'ERR_HTTP_NOT_FOUND', message: 'no route for GET /api/site/plan/image', statusCode: 404 } });
    await app.close();
    await none.close();
  });
});
