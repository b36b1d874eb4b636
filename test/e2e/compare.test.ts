/**
 * The comparison chain from the dashboard, in a real browser (Debian's chromium via playwright-core,
 * headless, loopback only) against a server fed by the simulator: start it with its own τ, see its
 * direction history fill, promote it, keep main.
 */
import { mkdtempSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { type Browser, type Page } from 'playwright-core';
import { afterAll, beforeAll, describe, expect, it, vi } from 'vitest';
import { browserAvailable, launchBrowser, openDashboard } from '../helpers/browser.ts';
import { loadConfig } from '../../server/config/load.ts';
import { startService, type Service } from '../../server/service.ts';

// A browser and a server on a loaded 2-core machine: waits are for conditions, with room to spare.
vi.setConfig({ testTimeout: 60_000 });


let svc: Service | null = null;
let browser: Browser;
let page: Page;
const problems: string[] = [];
const api = async (path: string): Promise<any> => (await fetch(`${svc!.url}${path}`)).json();

describe.skipIf(!browserAvailable)('comparison chain in the dashboard', () => {
  beforeAll(async () => {
    const loaded = await loadConfig({ env: {}, layers: [{ server: { httpPort: 0 }, engine: { workers: 1 }, processing: { azimuthStepDeg: 2, bandLowHz: 1000 }, outputs: { dir: mkdtempSync(join(tmpdir(), 'nullsteer-e2e-cmp-rec-')) }, data: { dir: mkdtempSync(join(tmpdir(), 'nullsteer-e2e-cmp-data-')) } }] });
    svc = await startService(loaded);
    browser = await launchBrowser();
    page = await openDashboard(browser, svc.url, problems, { width: 1280, height: 900 });
  }, 60_000);

  afterAll(async () => {
    await browser?.close();
    await svc?.close();
  });

  it('starts a comparison with its own τ, draws its history, promotes it and keeps main', async () => {
    await page.getByTestId('connection').filter({ hasText: 'online' }).waitFor({ timeout: 15_000 });
    expect(await page.getByTestId('compare-history').count()).toBe(0);
    await page.getByTestId('compare-tauS').fill('0.1');
    await page.getByTestId('compare-apply').click();
    await page.getByTestId('compare-history').waitFor({ timeout: 15_000 });
    const canvas = page.getByTestId('compare-history').getByTestId('history-canvas');
    await expect.poll(async () => Number(await canvas.getAttribute('data-rows')), { timeout: 20_000 }).toBeGreaterThanOrEqual(10);
    const st = await api('/api/compare');
    expect(st.enabled).toBe(true);
    expect(st.derived.tauS).toBeCloseTo(0.1, 9);
    await page.getByTestId('compare-cost').waitFor({ timeout: 15_000 });
    expect(await page.getByTestId('compare-cost').textContent()).toMatch(/^cost: STFT [\d.]+ ms\/hop · workers [\d.]+ ms\/hop · load \d+ %$/);
    const mainTau = (await api('/api/processing')).derived.tauS;

    await page.getByTestId('compare-promote').click();
    await expect.poll(async () => (await api('/api/processing')).derived.tauS, { timeout: 15_000 }).toBeCloseTo(0.1, 9);
    await expect.poll(async () => (await api('/api/compare')).derived?.tauS, { timeout: 15_000 }).toBeCloseTo(mainTau, 9);

    await page.getByTestId('compare-keep-main').click();
    await page.getByTestId('compare-history').waitFor({ state: 'detached', timeout: 15_000 });
    expect((await api('/api/compare')).enabled).toBe(false);
    expect(problems).toEqual([]);
  }, 90_000);
});
