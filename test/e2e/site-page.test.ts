/**
 * The site page in a real browser (Debian's chromium via playwright-core, headless, loopback only):
 * a site service on a real broker (test/helpers/nats-server.ts) with a test publisher for five
 * nodes — three arrays with a pose, one without, one that goes silent — and the test locator that
 * intersects the first two bearings (arrays at (0,0) and (100,0) m, bearings 45° and 135° → (50, 50) m,
 * CHECKS.md). The page shows the plan with its image, the three arrays, their rays, the source with
 * its ellipse, and the node list with the offline node, the "no pose" note and the dashboard links.
 */
import { mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { type Browser, type Page } from 'playwright-core';
import { afterAll, beforeAll, describe, expect, it, vi } from 'vitest';
import { browserAvailable, launchBrowser } from '../helpers/browser.ts';
import { natsAvailable, startBroker, type TestBroker } from '../helpers/nats-server.ts';
import { intersectFirstTwo, simpleTracker, startSitePublisher, testBearings, type SitePublisher } from '../helpers/site-publisher.ts';
import { waitFor } from '../helpers/service.ts';
import { createSiteService, type SiteService } from '../../server/site/site-service.ts';
import { CLIENT_DIST } from '../../server/service.ts';
import { loadPlan } from '../../server/site/plan-file.ts';

vi.setConfig({ testTimeout: 60_000, hookTimeout: 60_000 });

const SITE = 'yard';
const P = (x: number, y: number): [number, number, number] => [x, y, 0];
const NODES = [
  { node: 'west', pose: { positionM: P(0, 0), headingDeg: 0 }, siteAzimuthDeg: 45 },
  { node: 'east', pose: { positionM: P(100, 0), headingDeg: 180 }, siteAzimuthDeg: 135 },
  { node: 'north', pose: { positionM: P(50, 100), headingDeg: 90 }, siteAzimuthDeg: 270 },
  { node: 'loose', pose: null, siteAzimuthDeg: 0 },
  { node: 'gone', pose: null, siteAzimuthDeg: 0 },
];

describe.skipIf(!browserAvailable || !natsAvailable)('site page', () => {
  let broker: TestBroker;
  let svc: SiteService;
  let pub: SitePublisher;
  let browser: Browser;
  let page: Page;
  const problems: string[] = [];

  beforeAll(async () => {
    const dir = mkdtempSync(join(tmpdir(), 'nullsteer-e2e-site-'));
    writeFileSync(join(dir, 'yard.svg'), '<svg xmlns="http://www.w3.org/2000/svg" width="140" height="140"><rect width="140" height="140" fill="#203040"/></svg>');
    writeFileSync(join(dir, 'plan.json'), JSON.stringify({ name: 'test yard', widthM: 140, heightM: 140, originM: [-20, -20], image: { file: 'yard.svg', metresPerPixel: 1 } }));
    const { plan, dir: planDir } = loadPlan(join(dir, 'plan.json'));
    broker = await startBroker();
    svc = await createSiteService({ natsUrl: broker.url, site: SITE, httpPort: 0, offlineAfterS: 3, plan, planDir, staticDir: CLIENT_DIST, locate: intersectFirstTwo, tracker: simpleTracker(), toBearings: testBearings });
    await waitFor(() => svc.brokerState() === 'connected', 20_000, 'site service connected');
    pub = await startSitePublisher(broker.url, SITE, NODES);
    await waitFor(() => svc.core.registry.size === 5, 20_000, 'five nodes');
    pub.stop('gone');
    await waitFor(() => svc.core.registry.state('gone') === 'offline', 20_000, 'gone offline');
    browser = await launchBrowser();
    page = await browser.newPage({ viewport: { width: 1280, height: 800 } });
    page.on('console', (m) => {
      if (m.type() === 'error') problems.push(`console: ${m.text()}`);
    });
    page.on('pageerror', (e) => problems.push(`page: ${e.message}`));
    await page.goto(svc.url);
  });
  afterAll(async () => {
    await browser?.close();
    await pub?.close();
    await svc?.close();
    await broker?.close();
  });

  it('draws the plan with its image, the three arrays and their rays', async () => {
    await page.getByTestId('site-plan').waitFor();
    await expect.poll(() => page.getByTestId('plan-image').count(), { timeout: 20_000 }).toBe(1);
    for (const n of ['west', 'east', 'north']) await page.getByTestId(`array-${n}`).waitFor();
    expect(await page.locator('[data-testid^="array-"]').count()).toBe(3);
    await expect.poll(() => page.getByTestId('ray').count(), { timeout: 20_000 }).toBe(3);
    expect(await page.getByTestId('site-connection').textContent()).toBe('live');
  });

  it('shows the located source at (50, 50) m with its ellipse', async () => {
    const src = page.getByTestId('source-s1');
    await src.waitFor({ timeout: 20_000 });
    const el = src.getByTestId('ellipse');
    expect(Number(await el.getAttribute('cx'))).toBeCloseTo(50, 6);
    expect(Number(await el.getAttribute('cy'))).toBeCloseTo(-50, 6); // y drawn negated (north up)
    expect(Number(await el.getAttribute('rx'))).toBe(3);
    expect(Number(await el.getAttribute('ry'))).toBe(1.5);
    await expect.poll(() => page.getByTestId('track').count(), { timeout: 20_000 }).toBe(1);
    expect(await page.getByTestId('source-list').textContent()).toContain('50.0, 50.0');
  });

  it('lists the nodes: states, the offline node, the "no pose" note, and each dashboard link', async () => {
    await page.getByTestId('node-list').waitFor();
    await expect.poll(() => page.getByTestId('node-gone').getAttribute('data-state'), { timeout: 20_000 }).toBe('offline');
    expect(await page.getByTestId('node-west').getAttribute('data-state')).toBe('online');
    expect(await page.getByTestId('node-loose').getByTestId('why').textContent()).toBe('no pose: listed, not used for positions');
    expect(await page.getByTestId('node-west').getByTestId('dashboard-link').getAttribute('href')).toBe('http://127.0.0.1:1/west/');
    expect(await page.getByTestId('node-west').textContent()).toMatch(/clock [+-]\d+\.\d ms/);
    const shot = await page.screenshot();
    expect(shot.byteLength).toBeGreaterThan(1000);
    if (process.env.NULLSTEER_SITE_SHOT) writeFileSync(process.env.NULLSTEER_SITE_SHOT, shot); // to look at the page
    expect(problems).toEqual([]);
  });
});
