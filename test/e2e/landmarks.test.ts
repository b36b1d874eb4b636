/**
 * Landmarks in the dashboard, in a real browser (Debian's chromium via playwright-core, headless,
 * loopback only) against the built-in scene on a temporary copy of the ring array file: add
 * landmarks in the editor, see them on the history's and the spectrum's azimuth axes with names
 * that never overlap, and next to the scene's peak; rename and remove; the file holds the list.
 */
import { mkdtempSync, readFileSync, copyFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { type Browser, type Locator, type Page } from 'playwright-core';
import { afterAll, beforeAll, describe, expect, it, vi } from 'vitest';
import { browserAvailable, launchBrowser, openDashboard } from '../helpers/browser.ts';
import { loadConfig } from '../../server/config/load.ts';
import { startService, type Service } from '../../server/service.ts';

// A browser and a server on a loaded 2-core machine: waits are for conditions, with room to spare.
vi.setConfig({ testTimeout: 60_000 });

const dir = mkdtempSync(join(tmpdir(), 'nullsteer-e2e-landmarks-'));
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

const row = (name: string) => page.locator(`[data-testid="landmark-row"][data-name="${name}"]`);

async function addLandmark(name: string, az: string): Promise<void> {
  await page.getByTestId('landmark-new-name').fill(name);
  await page.getByTestId('landmark-new-az').fill(az);
  await page.getByTestId('landmark-add').click();
  await row(name).waitFor({ timeout: 15_000 });
}

describe.skipIf(!browserAvailable)('landmarks in the dashboard', () => {
  beforeAll(async () => {
    const loaded = await loadConfig({ env: {}, layers: [{ server: { httpPort: 0 }, array: { file: ARRAY }, engine: { workers: 1 }, processing: { azimuthStepDeg: 1, bandLowHz: 1000 }, outputs: { dir: mkdtempSync(join(tmpdir(), 'nullsteer-e2e-lm-rec-')) }, data: { dir: mkdtempSync(join(tmpdir(), 'nullsteer-e2e-lm-data-')) } }] });
    svc = await startService(loaded);
    browser = await launchBrowser();
    page = await openDashboard(browser, svc.url, problems, { width: 1280, height: 800 });
  }, 60_000);

  afterAll(async () => {
    await browser?.close();
    await svc?.close();
  });

  it('adds landmarks, draws them on both azimuth axes without overlapping names, and names the peak near one', async () => {
    await page.getByTestId('connection').filter({ hasText: 'online' }).waitFor({ timeout: 15_000 });
    // The scene's intake vent is at 35° (server/ingest/scenario.ts); "gate" marks it.
    await addLandmark('gate', '35');
    // Close neighbours whose names cannot share a line with it, and one far off.
    await addLandmark('gate post', '38');
    await addLandmark('old gatehouse', '40');
    await addLandmark('pump house', '-75');

    // Saved into the temporary array file (−75° kept as 285°).
    expect(JSON.parse(readFileSync(ARRAY, 'utf8')).landmarks).toEqual([
      { name: 'gate', azimuthDeg: 35 },
      { name: 'gate post', azimuthDeg: 38 },
      { name: 'old gatehouse', azimuthDeg: 40 },
      { name: 'pump house', azimuthDeg: 285 },
    ]);

    const history = page.getByTestId('direction-history').first();
    const spectrum = page.getByTestId('spectrum-view');
    for (const view of [history, spectrum]) {
      await expect.poll(() => view.getByTestId('landmark-tick').count(), { timeout: 15_000 }).toBe(4);
      const axis = view.getByTestId('landmark-axis');
      const axisBox = (await axis.boundingBox())!;
      // The gate's tick sits where 35° is on the 0–359° axis: column 35's centre, (35 + 0.5)/360 of the width.
      const tick = (await view.locator('[data-testid="landmark-tick"][data-name="gate"]').boundingBox())!;
      expect(Math.abs(tick.x - axisBox.x - ((35 + 0.5) / 360) * axisBox.width)).toBeLessThan(2);
      const names = view.getByTestId('landmark-name');
      const texts = await names.allTextContents();
      expect(texts).toContain('gate');
      expect(texts).toContain('pump house');
      const b = await boxes(names);
      for (let i = 0; i < b.length; i++) for (let j = i + 1; j < b.length; j++) expect(overlap(b[i], b[j]), `${texts[i]} and ${texts[j]} overlap`).toBe(false);
    }

    // The peak of the intake vent is listed with the landmark: "35.0° · gate" (within 2° of truth; gate is nearest).
    const gatePeak = page.locator('[data-testid="peak"][data-landmark="gate"]').first();
    await gatePeak.waitFor({ timeout: 20_000 });
    expect(await gatePeak.getByTestId('peak-az').textContent()).toMatch(/^3[4-6]\.\d° · gate$/);
    // The pump whine at 285° gets its landmark too.
    await page.locator('[data-testid="peak"][data-landmark="pump house"]').first().waitFor({ timeout: 20_000 });

    // Rename and remove in the editor; the axis follows.
    const oldName = row('old gatehouse').getByTestId('landmark-name-field');
    await oldName.fill('lodge');
    await oldName.press('Enter');
    await expect.poll(() => JSON.parse(readFileSync(ARRAY, 'utf8')).landmarks.map((l: { name: string }) => l.name), { timeout: 15_000 }).toEqual(['gate', 'gate post', 'lodge', 'pump house']);
    await row('gate post').getByTestId('landmark-remove').click();
    await expect.poll(() => history.getByTestId('landmark-tick').count(), { timeout: 15_000 }).toBe(3);

    // A refused edit shows the server's message and leaves the list as saved.
    await page.getByTestId('landmark-new-name').fill('gate');
    await page.getByTestId('landmark-new-az').fill('10');
    await page.getByTestId('landmark-add').click();
    await expect.poll(() => page.getByTestId('landmark-error').textContent(), { timeout: 15_000 }).toBe('landmarks[3].name repeats the name of landmarks[0]: names must be unique');
    expect(JSON.parse(readFileSync(ARRAY, 'utf8')).landmarks).toHaveLength(3);
    expect(problems.filter((p) => !p.includes('400'))).toEqual([]);
  }, 120_000);
});
