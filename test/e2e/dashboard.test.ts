/**
 * The dashboard in a real browser (Debian's chromium driven by playwright-core, headless, loopback
 * only) against a real server fed by the simulator.
 */
import { mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { type Browser, type Page } from 'playwright-core';
import { afterAll, beforeAll, describe, expect, it, vi } from 'vitest';
import { browserAvailable, launchBrowser, openDashboard } from '../helpers/browser.ts';
import { loadConfig } from '../../server/config/load.ts';
import { startService, type Service } from '../../server/service.ts';

// A browser and a server on a loaded 2-core machine: waits are for conditions, with room to spare.
vi.setConfig({ testTimeout: 60_000 });

const RECORDINGS = mkdtempSync(join(tmpdir(), 'nullsteer-e2e-rec-'));

let svc: Service | null = null;
let port = 0;
let browser: Browser;
let page: Page;
const problems: string[] = [];

// The built-in ring with its microphones' sensitivity (channels nominal): levels also in dB SPL.
// 50 mV/Pa into a 1 V full scale: dB SPL = dBFS + 20·log10(1 / (0.05 · 20e-6)) = dBFS + 120.
const ARRAY = join(mkdtempSync(join(tmpdir(), 'nullsteer-e2e-array-')), 'ring-24-spl.json');
writeFileSync(ARRAY, JSON.stringify({ ...JSON.parse(readFileSync(new URL('../../config/arrays/ring-24.json', import.meta.url), 'utf8')), calibration: { sensitivityMvPerPa: 50, fullScaleVolts: 1 } }));

async function start(httpPort: number): Promise<Service> {
  const loaded = await loadConfig({ env: {}, layers: [{ server: { httpPort }, array: { file: ARRAY }, engine: { workers: 2 }, processing: { azimuthStepDeg: 1, bandLowHz: 1000 }, outputs: { dir: RECORDINGS } }] });
  return startService(loaded);
}

async function processing(): Promise<any> {
  return (await fetch(`http://127.0.0.1:${port}/api/processing`)).json();
}

async function historyHash(): Promise<string> {
  return page.evaluate(() => {
    const c = document.querySelector('[data-testid="history-canvas"]') as HTMLCanvasElement;
    return c.toDataURL().slice(-2000);
  });
}

describe.skipIf(!browserAvailable)('dashboard in a browser', () => {
  beforeAll(async () => {
    svc = await start(0);
    port = svc.httpPort;
    browser = await launchBrowser();
    page = await openDashboard(browser, `http://127.0.0.1:${port}`, problems, { width: 1280, height: 800 });
  }, 60_000);

  afterAll(async () => {
    await browser?.close();
    await svc?.close();
  });

  it('loads without console errors and shows the scene moving in the direction history', async () => {
    await page.getByTestId('connection').filter({ hasText: 'online' }).waitFor({ timeout: 10_000 });
    const a = await historyHash();
    await expect.poll(historyHash, { timeout: 10_000 }).not.toBe(a);
    // Rows drawn without missing any: the count grows by 36 more (however long a loaded machine
    // takes for that), and the client's own check of the rows' sequence numbers finds no gap.
    const drawn = async () => Number(await page.getByTestId('history-canvas').getAttribute('data-rows'));
    const r0 = await drawn();
    await expect.poll(drawn, { timeout: 20_000 }).toBeGreaterThanOrEqual(r0 + 36);
    expect((await page.getByTestId('rows-missed').textContent())?.trim()).toMatch(/^(missed )?0$/);
    expect(problems).toEqual([]);
  });

  it('shows the fixed sources as peaks within 2° of truth', async () => {
    // Tarnwick scene truth (server/ingest/scenario.ts): intake vent 35°, pump whine 285°.
    await page.waitForTimeout(1500);
    const az = (await page.getByTestId('peak').evaluateAll((els) => els.map((e) => Number((e as HTMLElement).dataset.az)))) as number[];
    for (const truth of [35, 285]) {
      const nearest = Math.min(...az.map((a) => Math.abs(((a - truth + 540) % 360) - 180)));
      expect(nearest, `peak near ${truth}°`).toBeLessThan(2);
    }
  });

  it('with the microphones\' sensitivity in the array file, levels are also shown in dB SPL (+120 dB here)', async () => {
    expect(await page.getByTestId('calibration').textContent()).toMatch(/channels nominal/);
    expect((await page.getByTestId('spl-offset').textContent())?.trim()).toBe('dB SPL = dBFS + 120.0 dB');
    expect(await page.getByTestId('levels-spl').textContent()).toMatch(/dB SPL \(dBFS \+ 120\.0 dB\)/);
    // Each peak's dB SPL is its dBFS level + 120 (to the table's 0.1 dB rounding).
    const peaks = await page.getByTestId('peak').evaluateAll((els) => els.map((e) => [Number((e as HTMLElement).dataset.level), Number(e.querySelector('[data-testid="peak-spl"]')?.textContent)]));
    expect(peaks.length).toBeGreaterThan(0);
    for (const [dbfs, spl] of peaks) expect(Math.abs(spl - (dbfs + 120))).toBeLessThanOrEqual(0.1001); // each rounded to 0.1 dB
  });

  it('τ typed in the panel changes the server λ; a bad value shows an error and changes nothing', async () => {
    const input = page.getByTestId('input-tauS');
    await input.fill('0.25');
    await input.press('Enter');
    await expect.poll(async () => (await processing()).params.lambda, { timeout: 10_000 }).toBeCloseTo(1 - 256 / (48000 * 0.25), 9);
    const before = (await processing()).params.lambda;
    await input.fill('-3');
    await input.press('Enter');
    await page.getByTestId('error-tauS').waitFor({ timeout: 10_000 });
    expect(await page.getByTestId('error-tauS').textContent()).toBe('time constant τ: -3 out of range; allowed 0.01–3600 s'); // the panel's words (shared/processing-fields.ts)
    expect((await processing()).params.lambda).toBe(before);
  });

  it('the FFT size chosen in the panel re-plans the server and keeps τ', async () => {
    const tauBefore = (await processing()).derived.tauS;
    await page.getByTestId('input-fft').selectOption('1024');
    await expect.poll(async () => (await processing()).params.fftSize, { timeout: 15_000 }).toBe(1024);
    const after = await processing();
    expect(after.derived.hopSamples).toBe(512);
    expect(after.derived.tauS).toBeCloseTo(tauBefore, 9);
    await page.getByTestId('input-fft').selectOption('512');
    await expect.poll(async () => (await processing()).params.fftSize, { timeout: 15_000 }).toBe(512);
  });

  it('clicking a direction in the history steers a beam there', async () => {
    const canvas = page.getByTestId('history-canvas');
    const box = (await canvas.boundingBox())!;
    // The history's x axis spans the grid 0…359° left to right.
    const target = 100;
    await canvas.click({ position: { x: ((target + 0.5) / 360) * box.width, y: box.height / 2 } });
    await expect
      .poll(async () => ((await (await fetch(`http://127.0.0.1:${port}/api/beams`)).json()) as any).beams.map((b: any) => b.azimuthDeg), { timeout: 10_000 })
      .toEqual(expect.arrayContaining([expect.closeTo(target, 0)]));
  });

  it('records from the panel: Record starts a recording on the server, Stop ends it', async () => {
    await page.getByTestId('record-toggle').click();
    await expect.poll(async () => ((await (await fetch(`http://127.0.0.1:${port}/api/recording`)).json()) as any).recording, { timeout: 10_000 }).toBe(true);
    await page.getByTestId('record-status').waitFor({ timeout: 10_000 });
    // Duration as h:mm:ss, free space of the recordings' disk, the folder's name.
    await expect.poll(async () => (await page.getByTestId('record-duration').textContent()) ?? '', { timeout: 10_000 }).toMatch(/^0:00:0\d$/);
    expect((await page.getByTestId('record-free').textContent()) ?? '').toMatch(/^\d+(\.\d)? (B|kB|MB|GB|TB)$/);
    expect((await page.getByTestId('record-where').textContent()) ?? '').toMatch(/folder \S+/);
    await page.waitForTimeout(600);
    await page.getByTestId('record-toggle').click();
    await expect.poll(async () => ((await (await fetch(`http://127.0.0.1:${port}/api/recording`)).json()) as any).recording, { timeout: 10_000 }).toBe(false);
    const st: any = await (await fetch(`http://127.0.0.1:${port}/api/recording`)).json();
    expect(st.files.length).toBeGreaterThanOrEqual(1);
    expect(st.frames).toBeGreaterThan(0);
  });

  it('reconnects by itself after a server restart, showing offline meanwhile', { timeout: 120_000 }, async () => {
    const t0 = performance.now();
    await svc!.close();
    expect(performance.now() - t0).toBeLessThan(5000); // shutdown does not wait on the browser's sockets
    await page.getByTestId('connection').filter({ hasText: 'offline' }).waitFor({ timeout: 15_000 });
    svc = await start(port);
    await page.getByTestId('connection').filter({ hasText: 'online' }).waitFor({ timeout: 10_000 });
    const a = await historyHash();
    await page.waitForTimeout(800);
    expect(await historyHash()).not.toBe(a);
    expect(problems.filter((p) => !/WebSocket|ERR_CONNECTION_REFUSED|Failed to load resource/.test(p))).toEqual([]);
  });
});
