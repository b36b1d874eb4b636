/**
 * The direction history's axes in a real browser (Debian's chromium via playwright-core, headless,
 * loopback only) against a server fed by the simulator, with the comparison chain on so two
 * histories share the height: each is titled with its chain and τ, no two time labels overlap, and
 * the rows are placed by their sample indices (the canvas's data-row-times hook: each shown row's
 * sample index and the height of its top edge).
 */
import { mkdtempSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { type Browser, type Locator, type Page } from 'playwright-core';
import { afterAll, beforeAll, describe, expect, it, vi } from 'vitest';
import { browserAvailable, launchBrowser, openDashboard } from '../helpers/browser.ts';
import { loadConfig } from '../../server/config/load.ts';
import { startService, type Service } from '../../server/service.ts';
import { plainNumber, tidy } from '../../shared/numbers.ts';

// A browser and a server on a loaded 2-core machine: waits are for conditions, with room to spare.
vi.setConfig({ testTimeout: 60_000 });

let svc: Service | null = null;
let browser: Browser;
let page: Page;
const problems: string[] = [];
const api = async (path: string, init?: RequestInit): Promise<any> => (await fetch(`${svc!.url}${path}`, init)).json();

interface Box {
  x: number;
  y: number;
  width: number;
  height: number;
}
const overlap = (a: Box, b: Box) => a.x < b.x + b.width && b.x < a.x + a.width && a.y < b.y + b.height && b.y < a.y + a.height;

async function labelBoxes(history: Locator): Promise<Box[]> {
  const labels = history.getByTestId('time-label');
  const out: Box[] = [];
  for (let i = 0; i < (await labels.count()); i++) {
    const b = await labels.nth(i).boundingBox();
    if (b) out.push(b);
  }
  return out;
}

/** The rows' placement exposed by the canvas: [sampleIndex, yPx] newest first. */
async function rowTimes(canvas: Locator): Promise<{ rows: [number, number][]; spanS: number; fs: number; heightPx: number }> {
  const text = (await canvas.getAttribute('data-row-times')) ?? '';
  const rows = text
    .split(' ')
    .filter(Boolean)
    .map((p) => p.split(':').map(Number) as [number, number]);
  const box = await canvas.boundingBox();
  return { rows, spanS: Number(await canvas.getAttribute('data-span-s')), fs: Number(await canvas.getAttribute('data-sample-rate-hz')), heightPx: Math.round(box!.height) };
}

describe.skipIf(!browserAvailable)('direction history axes', () => {
  beforeAll(async () => {
    const loaded = await loadConfig({ env: {}, layers: [{ server: { httpPort: 0 }, engine: { workers: 1 }, processing: { azimuthStepDeg: 2, bandLowHz: 1000 }, outputs: { dir: mkdtempSync(join(tmpdir(), 'nullsteer-e2e-axes-rec-')) }, data: { dir: mkdtempSync(join(tmpdir(), 'nullsteer-e2e-axes-data-')) } }] });
    svc = await startService(loaded);
    browser = await launchBrowser();
    // A short window: the two histories get little height each, where labels used to collide.
    page = await openDashboard(browser, svc.url, problems, { width: 1280, height: 720 });
  }, 60_000);

  afterAll(async () => {
    await browser?.close();
    await svc?.close();
  });

  it('titles both histories with chain and τ, keeps time labels apart and places rows by sample index', async () => {
    await page.getByTestId('connection').filter({ hasText: 'online' }).waitFor({ timeout: 15_000 });
    const main = page.getByTestId('direction-history').first();
    const mainTau = (await api('/api/processing')).derived.tauS;
    await expect.poll(() => main.getByTestId('history-title').textContent(), { timeout: 15_000 }).toBe(`main · τ ${plainNumber(tidy(mainTau), 4)} s`);

    await page.getByTestId('compare-tauS').fill('0.15');
    await page.getByTestId('compare-apply').click();
    const compare = page.getByTestId('compare-history');
    await compare.waitFor({ timeout: 15_000 });
    await expect.poll(() => compare.getByTestId('history-title').textContent(), { timeout: 15_000 }).toBe('comparison · τ 0.15 s');
    const canvases = [main.getByTestId('history-canvas'), compare.getByTestId('history-canvas')];
    for (const c of canvases) await expect.poll(async () => Number(await c.getAttribute('data-rows')), { timeout: 30_000 }).toBeGreaterThanOrEqual(20);

    // The title follows τ: a new τ on the main chain shows without a reload.
    await api('/api/processing', { method: 'PATCH', headers: { 'content-type': 'application/json' }, body: JSON.stringify({ tauS: 2 }) });
    await expect.poll(() => main.getByTestId('history-title').textContent(), { timeout: 15_000 }).toBe('main · τ 2 s');

    for (const spanS of ['15', '30', '180']) {
      for (const h of [main, compare]) await h.getByTestId('history-span').selectOption(spanS);
      const boxes = [...(await labelBoxes(main)), ...(await labelBoxes(compare))];
      expect(boxes.length).toBeGreaterThanOrEqual(4);
      for (let i = 0; i < boxes.length; i++) for (let j = i + 1; j < boxes.length; j++) expect(overlap(boxes[i], boxes[j]), `labels ${i} and ${j} at span ${spanS} s overlap`).toBe(false);
    }

    // Row placement: each shown row's top edge lies (newest's sample index − its own) / fs seconds
    // below the top, on a scale of span seconds per image height (the rule of DESIGN.md §3).
    for (const c of canvases) {
      await expect.poll(async () => (await rowTimes(c)).rows.length, { timeout: 15_000 }).toBeGreaterThanOrEqual(8);
      const { rows, spanS, fs, heightPx } = await rowTimes(c);
      expect(spanS).toBe(180);
      expect(fs).toBe(48_000);
      const [newest] = rows[0];
      expect(rows[0][1]).toBe(0);
      for (const [si, y] of rows) expect(y).toBeCloseTo((((newest - si) / fs) / spanS) * heightPx, 1);
      // Sample indices strictly decrease down the image.
      for (let i = 1; i < rows.length; i++) expect(rows[i][0]).toBeLessThan(rows[i - 1][0]);
    }
    expect(problems).toEqual([]);
  }, 120_000);
});
