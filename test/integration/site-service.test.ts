/**
 * The site service against a real NATS broker (test/helpers/nats-server.ts): a test publisher sends
 * status and peak messages for four nodes (three with a pose, one without), the service lists them,
 * locates with an injected test locator, counts malformed and foreign messages, marks a silent node
 * offline, and recovers when the broker is killed and restarted. Assertions are on states, counters
 * and window indices, with generous waits. Position check: arrays at (0,0) and (100,0) m with site
 * bearings 45° and 135° meet at (50, 50) m (CHECKS.md, "two bearings").
 */
import { request } from 'node:http';
import WebSocket from 'ws';
import { afterAll, beforeAll, describe, expect, it, vi } from 'vitest';
import { siteSubject } from '../../shared/site.ts';
import { createSiteService, type SiteService } from '../../server/site/site-service.ts';
import { natsAvailable, startBroker, type TestBroker } from '../helpers/nats-server.ts';
import { intersectFirstTwo, simpleTracker, startSitePublisher, testBearings, type SitePublisher } from '../helpers/site-publisher.ts';
import { waitFor } from '../helpers/service.ts';

vi.setConfig({ testTimeout: 60_000, hookTimeout: 60_000 });

const SITE = 'yard';
const NODES = [
  { node: 'north', pose: { positionM: [50, 100, 0] as [number, number, number], headingDeg: 90 }, siteAzimuthDeg: 270 },
  { node: 'west', pose: { positionM: [0, 0, 0] as [number, number, number], headingDeg: 0 }, siteAzimuthDeg: 45 },
  { node: 'east', pose: { positionM: [100, 0, 0] as [number, number, number], headingDeg: 180 }, siteAzimuthDeg: 135 },
  { node: 'loose', pose: null, siteAzimuthDeg: 10 },
];

describe.skipIf(!natsAvailable)('site service with a real broker', () => {
  let broker: TestBroker;
  let svc: SiteService;
  let pub: SitePublisher;
  const get = async (path: string) => (await fetch(new URL(path, svc.url))).json() as Promise<any>;

  beforeAll(async () => {
    broker = await startBroker();
    svc = await createSiteService({ natsUrl: broker.url, site: SITE, httpPort: 0, windowS: 0.5, offlineAfterS: 3, locate: intersectFirstTwo, tracker: simpleTracker(), toBearings: testBearings, reconnectWaitMs: 200 });
    await waitFor(() => svc.brokerState() === 'connected', 20_000, 'site service connected');
    pub = await startSitePublisher(broker.url, SITE, NODES);
  });
  afterAll(async () => {
    await pub?.close();
    await svc?.close();
    await broker?.close();
  });

  it('lists the nodes with pose, health and clock offset; the node without a pose is not used', async () => {
    await waitFor(async () => (await get('/api/site')).nodes.length === 4, 20_000, 'four nodes listed');
    const site = await get('/api/site');
    expect(site).toMatchObject({ site: SITE, broker: { state: 'connected', url: broker.url }, windowS: 0.5 });
    const byName = Object.fromEntries(site.nodes.map((n: any) => [n.node, n]));
    expect(byName.west).toMatchObject({ state: 'online', usedForPositions: true, pose: { positionM: [0, 0, 0], headingDeg: 0 }, rowsPerS: 20, load: 0.25, input: 'flowing', dashboardUrl: 'http://127.0.0.1:1/west/' });
    expect(byName.loose).toMatchObject({ state: 'online', pose: null, usedForPositions: false, why: 'no pose: listed, not used for positions' });
    // Same machine, same clock: the offset is the least delivery delay seen, which falls under the flag
    // bound as status messages accumulate (the first few may be slow on a loaded machine).
    await waitFor(async () => {
      const west = (await get('/api/site')).nodes.find((n: any) => n.node === 'west');
      return Math.abs(west.clockOffsetMs) < 50 && west.clockFlag === undefined;
    }, 20_000, 'west clock offset under 50 ms');
  });

  it('gives the injected locator\'s source in /api/site/sources, with the rays per node', async () => {
    // One answer with a source and all three rays (a window on a loaded machine may miss a node's messages).
    let s: any = null;
    await waitFor(async () => {
      const r = await get('/api/site/sources');
      if (r.sources.length > 0 && r.bearings.length === 3) s = r;
      return s !== null;
    }, 20_000, 'a located source with three rays');
    expect(typeof s.windowUtc).toBe('string');
    expect(Date.parse(s.windowUtc) % 500).toBe(0); // windows aligned on UTC
    const src = s.sources[0];
    expect(src.id).toBe('s1');
    expect(src.xM).toBeCloseTo(50, 6);
    expect(src.yM).toBeCloseTo(50, 6);
    expect(src).toMatchObject({ ellipse: { majorM: 3, minorM: 1.5, angleDeg: 30 }, uncertaintyM: 2.1, levelDb: 70, zM: null });
    expect(s.bearings.map((b: any) => b.node).sort()).toEqual(['east', 'north', 'west']);
  });

  it('counts a malformed and a foreign message and ignores them', async () => {
    const before = (await get('/api/site')).counters;
    pub.publishRaw(siteSubject(SITE, 'west', 'peaks'), '{"v":1,"site":"yard"'); // cut short
    pub.publishRaw(siteSubject(SITE, 'west', 'status'), JSON.stringify({ v: 1, site: SITE, node: 'east', sentUtcMs: Date.now(), uptimeS: 1, arrayName: 'x', channels: 8, pose: null, sampleRateHz: 48000, sampleIndex: null, sampleUtcMs: null, rowsPerS: 0, load: 0, input: 'waiting', dashboardUrl: null, pending: 0, dropped: 0 }));
    await waitFor(async () => {
      const c = (await get('/api/site')).counters;
      return c.malformed === before.malformed + 1 && c.foreign === before.foreign + 1;
    }, 20_000, 'malformed and foreign counted');
    const c = (await get('/api/site')).counters;
    expect(c.byReason.badPeaks).toBeGreaterThanOrEqual(1);
    expect(c.byReason.statusNodeMismatch).toBeGreaterThanOrEqual(1);
    // East's pose is untouched by the foreign message.
    const east = (await get('/api/site')).nodes.find((n: any) => n.node === 'east');
    expect(east.pose).not.toBeNull();
  });

  it('marks a node that stops sending offline, and counts the change once', async () => {
    const wentOffline = svc.core.registry.counters.wentOffline;
    pub.stop('north');
    await waitFor(() => svc.core.registry.state('north') === 'offline', 20_000, 'north offline');
    expect(svc.core.registry.counters.wentOffline).toBe(wentOffline + 1);
    const north = (await get('/api/site')).nodes.find((n: any) => n.node === 'north');
    expect(north).toMatchObject({ state: 'offline', usedForPositions: false });
    expect(svc.core.registry.state('west')).toBe('online');
  });

  it('reconnects after the broker is killed and restarted, and windows with bearings resume', async () => {
    const withBearings = () => svc.core.results.filter((r) => r.bearingCount > 0).map((r) => r.index);
    await waitFor(() => withBearings().length > 0, 20_000, 'windows with bearings');
    await broker.kill();
    await waitFor(() => svc.brokerState() === 'reconnecting', 20_000, 'service sees the broker gone');
    const lastBefore = Math.max(...withBearings(), svc.core.windows.lastClosedIndex ?? 0);
    await broker.start();
    await waitFor(() => svc.reconnects() >= 1 && svc.brokerState() === 'connected', 30_000, 'service reconnected');
    await waitFor(() => withBearings().some((k) => k > lastBefore), 30_000, 'a window with bearings after the restart');
    expect((await get('/api/site')).broker).toMatchObject({ state: 'connected', reconnects: svc.reconnects() });
  });

  it('pushes a hello, then windows with sources and nodes, on the live socket', async () => {
    const ws = new WebSocket(svc.url.replace('http', 'ws') + 'api/site/live');
    const got: any[] = [];
    ws.on('message', (d) => got.push(JSON.parse(String(d))));
    await waitFor(() => got.some((m) => m.type === 'window' && m.sources.length > 0), 20_000, 'a window on the live socket');
    ws.close();
    expect(got[0]).toMatchObject({ type: 'hello', site: { site: SITE }, plan: { name: 'site' } });
    const w = got.find((m) => m.type === 'window' && m.sources.length > 0);
    expect(w.nodes.length).toBe(4);
    expect(typeof w.windowIndex).toBe('number');
  });

  it('answers a foreign Host with 403 and an unknown route with the catalogue\'s 404', async () => {
    // fetch cannot set Host: a raw request with setHost false (like cross-site.test.ts).
    const port = Number(new URL(svc.url).port);
    const r = await new Promise<{ status: number; body: string }>((resolve, reject) => {
      const req = request({ host: '127.0.0.1', port, path: '/api/site', setHost: false, headers: { host: 'evil.example' } }, (res) => {
        let body = '';
        res.on('data', (d) => (body += d));
        res.on('end', () => resolve({ status: res.statusCode ?? 0, body }));
      });
      req.on('error', reject);
      req.end();
    });
    expect(r.status).toBe(403);
    expect(JSON.parse(r.body).error.code).toBe('ERR_HTTP_HOST_REFUSED');
    const n = await fetch(new URL('/api/site/nothing', svc.url));
    expect(await n.json()).toEqual({ error: { code: 'ERR_HTTP_NOT_FOUND', message: 'no route for GET /api/site/nothing', statusCode: 404 } });
  });
});

describe.skipIf(!natsAvailable)('site service and a broker that is not there yet', () => {
  it('answers while the broker is down, connects when it comes up (with its token), and closes cleanly while still waiting', async () => {
    const broker = await startBroker({ token: 'site-test-token' });
    await broker.kill();
    const svc = await createSiteService({ natsUrl: broker.url, site: SITE, httpPort: 0, token: 'site-test-token', reconnectWaitMs: 200 });
    const wrong = await createSiteService({ natsUrl: broker.url, site: SITE, httpPort: 0, token: 'not-the-token', reconnectWaitMs: 200 });
    try {
      const site = (await (await fetch(new URL('/api/site', svc.url))).json()) as any;
      expect(site.broker.state).toBe('connecting');
      expect(site.nodes).toEqual([]);
      await broker.start();
      await waitFor(() => svc.brokerState() === 'connected', 30_000, 'connected once the broker is up');
      // The wrong token never connects: its state stays "connecting" and the error says why.
      await waitFor(async () => ((await (await fetch(new URL('/api/site', wrong.url))).json()) as any).broker.lastError !== null, 30_000, 'an error for the wrong token');
      expect(wrong.brokerState()).toBe('connecting');
    } finally {
      await wrong.close();
      await svc.close();
      await broker.close();
    }
    expect(svc.brokerState()).toBe('closed');
  });
});
