/**
 * Sectors in the dashboard, in a real browser (Debian's chromium via playwright-core, headless,
 * loopback only) against the built-in scene on a temporary copy of the ring array file: add sectors
 * in the editor (one wrapping through 0), see them as shaded bands with their names on the
 * direction history and the spectrum, at the columns of their azimuths, names never overlapping;
 * replace and delete; the array file holds the list.
 */
import { copyFileSync, mkdtempSync, readFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { type Browser, type Locator, type Page } from 'playwright-core';
import { afterAll, beforeAll, describe, expect, it, vi } from 'vitest';
import { browserAvailable, launchBrowser, openDashboard } from '../helpers/browser.ts';
import { loadConfig } from '../../server/config/load.ts';
import { startService, type Service } from '../../server/service.ts';

// A browser and a server on a loaded 2-core machine: waits are for conditions, with room to spare.
vi.setConfig({ testTimeout: 60_000 });

const dir = mkdtempSync(join(tmpdir(), 'nullsteer-e2e-sectors-'));
const ARRAY = join(dir, 'ring-24.json');
copyFileSync(new URL('../../config/arrays/ring-24.json', import.meta.url), ARRAY);

let svc: Service | null = null;
let browser: Browser;
let page: Page;
const problems: string[] = [];

interface Box {
  x: number;
  y: number;
  width: number;
  height: number;
}
const overlap = (a: Box, b: Box) => a.x < b.x + b.width && b.x < a.x + a.width && a.y < b.y + b.height && b.y < a.y + a.height;

async function boxes(l: Locator): Promise<Box[]> {
  const out: Box[] = [];
  for (let i = 0; i < (await l.count()); i++) {
    const b = await l.nth(i).boundingBox();
    if (b) out.push(b);
  }
  return out;
}

const row = (name: string) => page.locator(`[data-testid="sector-row"][data-name="${name}"]`);
const onDisk = () => JSON.parse(readFileSync(ARRAY, 'utf8')).sectors;

async function addSector(name: string, from: string, to: string, weighting = 'A'): Promise<void> {
  await page.getByTestId('sector-new-name').fill(name);
  await page.getByTestId('sector-new-from').fill(from);
  await page.getByTestId('sector-new-to').fill(to);
  await page.getByTestId('sector-new-weighting').selectOption(weighting);
  await page.getByTestId('sector-save').click();
  await row(name).waitFor({ timeout: 15_000 });
}

describe.skipIf(!browserAvailable)('sectors in the dashboard', () => {
  beforeAll(async () => {
    const loaded = await loadConfig({ env: {}, layers: [{ server: { httpPort: 0 }, array: { file: ARRAY }, engine: { workers: 1 }, processing: { azimuthStepDeg: 1, bandLowHz: 1000 }, outputs: { dir: mkdtempSync(join(tmpdir(), 'nullsteer-e2e-sec-rec-')) }, data: { dir: mkdtempSync(join(tmpdir(), 'nullsteer-e2e-sec-data-')) } }] });
    svc = await startService(loaded);
    browser = await launchBrowser();
    page = await openDashboard(browser, svc.url, problems, { width: 1280, height: 800 });
  }, 60_000);

  afterAll(async () => {
    await browser?.close();
    await svc?.close();
  });

  it('adds sectors, draws them on the history and the spectrum, replaces and deletes them', async () => {
    await page.getByTestId('connection').filter({ hasText: 'online' }).waitFor({ timeout: 15_000 });
    // The scene's intake vent is at 35° (server/ingest/scenario.ts): "gate" spans it.
    await addSector('gate', '20', '50');
    // Wraps through 0: two bands on the 0–359° axis, one at each end.
    await addSector('north', '350', '10', 'C');
    // A close neighbour whose name cannot share a line with gate's.
    await addSector('gate-post', '52', '58');
    expect(onDisk()).toEqual([
      { name: 'gate', azimuthDeg: [20, 50], method: 'mvdr', weighting: 'A' },
      { name: 'north', azimuthDeg: [350, 10], method: 'mvdr', weighting: 'C' },
      { name: 'gate-post', azimuthDeg: [52, 58], method: 'mvdr', weighting: 'A' },
    ]);

    const history = page.getByTestId('direction-history').first();
    const spectrum = page.getByTestId('spectrum-view');
    for (const view of [history, spectrum]) {
      await expect.poll(() => view.getByTestId('sector-band').count(), { timeout: 15_000 }).toBe(4);
      const plot = (await view.getByTestId('sector-bands').boundingBox())!;
      // gate covers columns 20…50 of 360: from 20/360 to 51/360 of the plot's width (column i spans [i, i+1]/360).
      const g = (await view.locator('[data-testid="sector-band"][data-name="gate"]').boundingBox())!;
      expect(Math.abs(g.x - plot.x - (20 / 360) * plot.width)).toBeLessThan(2);
      expect(Math.abs(g.width - (31 / 360) * plot.width)).toBeLessThan(2);
      expect(g.height).toBeGreaterThan(plot.height * 0.9);
      // north: one band from the left edge (columns 0…10), one to the right edge (350…359).
      const n = await boxes(view.locator('[data-testid="sector-band"][data-name="north"]'));
      n.sort((a, b) => a.x - b.x);
      expect(Math.abs(n[0].x - plot.x)).toBeLessThan(2);
      expect(Math.abs(n[0].width - (11 / 360) * plot.width)).toBeLessThan(2);
      expect(Math.abs(n[1].x - plot.x - (350 / 360) * plot.width)).toBeLessThan(2);
      expect(Math.abs(n[1].x + n[1].width - plot.x - plot.width)).toBeLessThan(2);
      // Names: each shown, none overlapping another.
      const names = view.getByTestId('sector-name');
      const texts = await names.allTextContents();
      expect(texts.sort()).toEqual(['gate', 'gate-post', 'north']);
      const b = await boxes(names);
      for (let i = 0; i < b.length; i++) for (let j = i + 1; j < b.length; j++) expect(overlap(b[i], b[j]), `${texts[i]} and ${texts[j]} overlap`).toBe(false);
    }

    // Edit: the form takes the sector's values; a new end replaces it under the same name.
    await row('gate').getByTestId('sector-edit').click();
    await expect.poll(() => page.getByTestId('sector-new-from').inputValue(), { timeout: 15_000 }).toBe('20');
    await expect.poll(() => page.getByTestId('sector-save').textContent(), { timeout: 15_000 }).toBe('Replace');
    await page.getByTestId('sector-new-to').fill('60');
    await page.getByTestId('sector-save').click();
    await expect.poll(() => onDisk()[0].azimuthDeg, { timeout: 15_000 }).toEqual([20, 60]);
    await expect
      .poll(async () => (await history.locator('[data-testid="sector-band"][data-name="gate"]').boundingBox())?.width ?? 0, { timeout: 15_000 })
      .toBeGreaterThan(((41 - 1) / 360) * (await history.getByTestId('sector-bands').boundingBox())!.width);

    // A refused sector shows the server's message naming the field; the list is unchanged.
    await page.getByTestId('sector-new-name').fill('bad');
    await page.getByTestId('sector-new-from').fill('10');
    await page.getByTestId('sector-new-to').fill('10');
    await page.getByTestId('sector-save').click();
    await expect.poll(() => page.getByTestId('sector-error').textContent(), { timeout: 15_000 }).toBe('azimuthDeg: must have two different ends (from = to has no width)');
    expect(onDisk()).toHaveLength(3);

    // Delete: the bands go from both views and the file.
    await row('north').getByTestId('sector-remove').click();
    await expect.poll(() => history.getByTestId('sector-band').count(), { timeout: 15_000 }).toBe(2);
    await expect.poll(() => spectrum.getByTestId('sector-band').count(), { timeout: 15_000 }).toBe(2);
    expect(onDisk().map((s: { name: string }) => s.name)).toEqual(['gate', 'gate-post']);
    expect(problems.filter((p) => !p.includes('400'))).toEqual([]);
  }, 120_000);
});
