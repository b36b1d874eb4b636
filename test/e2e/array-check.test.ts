/**
 * The array-check panel in a real browser (Debian's chromium through playwright-core, headless,
 * loopback only) against a real server fed over the WebSocket ingest with the faulty ring of
 * test/helpers/faulty-ring.ts: the panel runs the check, shows the faults, and saves the proposed
 * calibration into a temporary array file only after its confirm.
 */
import { mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { type Browser, type Page } from 'playwright-core';
import { afterAll, beforeAll, describe, expect, it, vi } from 'vitest';
import WebSocket from 'ws';
import type { Service } from '../../server/service.ts';
import { browserAvailable, launchBrowser, openDashboard } from '../helpers/browser.ts';
import { faultyRing, RING, ringFrames } from '../helpers/faulty-ring.ts';
import { startTestService, waitFor } from '../helpers/service.ts';

vi.setConfig({ testTimeout: 60_000 });

let svc: Service | null = null;
let browser: Browser;
let page: Page;
let arrayFile = '';
const problems: string[] = [];

describe.skipIf(!browserAvailable)('array-check panel in a browser', () => {
  beforeAll(async () => {
    const dir = mkdtempSync(join(tmpdir(), 'nullsteer-e2e-check-'));
    arrayFile = join(dir, 'ring-8.json');
    writeFileSync(arrayFile, JSON.stringify({ name: 'e2e ring', positions: RING }, null, 2));
    svc = await startTestService({ array: { file: arrayFile }, engine: { workers: 1 }, processing: { bandLowHz: 300, bandHighHz: 6000 } });
    browser = await launchBrowser();
    page = await openDashboard(browser, svc.url, problems, { width: 1280, height: 1400 });
    await page.getByTestId('array-check-panel').waitFor({ timeout: 15_000 });
  }, 60_000);

  afterAll(async () => {
    await browser?.close();
    await svc?.close();
  });

  it('runs the check and shows the faults; saving asks to confirm, then writes the array file', async () => {
    const url = svc!.url;
    await page.getByTestId('array-check-azimuth').fill('30');
    await page.getByTestId('array-check-seconds').fill('1');
    await page.getByTestId('array-check-run').click();
    // The check listens to the next second of input: send it once the server says it listens.
    await waitFor(async () => (await (await fetch(`${url}/api/array-check`)).json()).running === true, 20_000, 'the check to start');
    const ws = new WebSocket(`${url.replace('http', 'ws')}/ingest`);
    await new Promise<void>((r) => ws.once('open', () => r()));
    for (const f of ringFrames(faultyRing(1 << 17), 150)) ws.send(f);
    const faults = page.getByTestId('array-check-fault');
    await expect.poll(() => faults.count(), { timeout: 30_000 }).toBe(3);
    ws.terminate();
    const texts = await faults.allTextContents();
    expect(texts.map((t) => t.trim()).sort()).toEqual(['channel 1 is 1.9 cm off (56 µs), toward the source', 'channel 6 inverted', 'channels 2 and 5 look swapped'].sort().map((t) => expect.stringMatching(new RegExp(`^${t.replace(/[().]/g, '\\$&').replace('56', '5[67]')}$`))) as unknown as string[]);
    expect(await page.getByTestId('array-check-row').count()).toBe(8);
    expect(await page.getByTestId('array-check-direction').textContent()).toContain('source at 30.0° (stated)');

    // Save asks first; Cancel leaves the file as it was.
    const before = readFileSync(arrayFile, 'utf8');
    await page.getByTestId('array-check-save').click();
    await expect.poll(() => page.getByTestId('array-check-confirm').textContent()).toContain('Save this calibration into the array file and apply it now?');
    await page.getByTestId('array-check-cancel').click();
    expect(await page.getByTestId('array-check-confirm').count()).toBe(0);
    expect(readFileSync(arrayFile, 'utf8')).toBe(before);
    await page.getByTestId('array-check-save').click();
    await page.getByTestId('array-check-confirm-save').click();
    await expect.poll(() => page.getByTestId('array-check-note').textContent(), { timeout: 10_000 }).toBe('saved to ring-8.json and applied to the running processing');
    const file = JSON.parse(readFileSync(arrayFile, 'utf8'));
    expect(file.calibration.channelOrder).toEqual([0, 1, 5, 3, 4, 2, 6, 7]);
    expect(file.calibration.polarity).toEqual([1, 1, 1, 1, 1, 1, -1, 1]);
    expect(problems).toEqual([]);
  });
});
