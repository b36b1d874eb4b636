/**
 * The status strip's broker item in a real browser (Debian's chromium through playwright-core,
 * loopback only) against a real server with the built-in scene and a real broker
 * (test/helpers/nats-server.ts): "connected" while the broker runs; killed, the item says
 * "reconnecting (n pending)"; restarted, "connected" again. A server without a broker shows no item.
 * Waits are on the page's text and the server's status, never on how fast anything happened.
 */
import { type Browser } from 'playwright-core';
import { afterAll, beforeAll, describe, expect, it, vi } from 'vitest';
import type { Service } from '../../server/service.ts';
import { browserAvailable, launchBrowser, openDashboard } from '../helpers/browser.ts';
import { natsAvailable, startBroker, type TestBroker } from '../helpers/nats-server.ts';
import { startTestService } from '../helpers/service.ts';

vi.setConfig({ testTimeout: 60_000 });

describe.skipIf(!browserAvailable || !natsAvailable)('broker item in the status strip', () => {
  let browser: Browser;
  let broker: TestBroker;
  let svc: Service;
  beforeAll(async () => {
    broker = await startBroker();
    svc = await startTestService({ source: { kind: 'simulator' }, engine: { workers: 1 }, cluster: { natsUrl: broker.url, site: 'yard', node: 'strip' } });
    browser = await launchBrowser();
  }, 60_000);
  afterAll(async () => {
    await browser?.close();
    await svc?.close();
    await broker?.close();
  });

  it('says connected, reconnecting with entries pending while the broker is away, and connected again', async () => {
    const problems: string[] = [];
    const page = await openDashboard(browser, svc.url, problems);
    const item = page.getByTestId('strip-broker');
    await expect.poll(() => item.textContent(), { timeout: 30_000 }).toMatch(/broker\s+connected/);
    await broker.kill();
    await expect.poll(() => item.textContent(), { timeout: 30_000 }).toMatch(/broker\s+reconnecting \([1-9][\d ,]* pending\)/);
    await broker.start();
    await expect.poll(() => item.textContent(), { timeout: 30_000 }).toMatch(/broker\s+connected/);
    // The strip's own requests never failed while the broker was away.
    expect(problems).toEqual([]);
    await page.close();
  });

  it('shows no broker item on a server without one', async () => {
    const alone = await startTestService({ source: { kind: 'simulator' }, engine: { workers: 1 } });
    try {
      const page = await openDashboard(browser, alone.url, []);
      await expect.poll(() => page.getByTestId('engine-load').count(), { timeout: 30_000 }).toBe(1);
      expect(await page.getByTestId('strip-broker').count()).toBe(0);
      await page.close();
    } finally {
      await alone.close();
    }
  });
});
