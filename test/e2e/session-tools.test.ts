/**
 * The dashboard's session tools in a real browser (Debian's chromium driven by playwright-core,
 * headless, loopback only) against a real server fed by the simulator: spectrum CSV and history PNG
 * downloads, the presets panel and the journal panel.
 */
import { mkdirSync, mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { type Browser, type Download, type Page } from 'playwright-core';
import { afterAll, beforeAll, describe, expect, it, vi } from 'vitest';
import { browserAvailable, launchBrowser, openDashboard } from '../helpers/browser.ts';
import { loadConfig } from '../../server/config/load.ts';
import { startService, type Service } from '../../server/service.ts';
import { COLORMAP_RGB, COLORMAP_SIZE, NO_DATA_RGB } from '../../shared/colormap.ts';
import { decodePng } from '../helpers/png-decode.ts';

// A browser and a server on a loaded 2-core machine: waits are for conditions, with room to spare.
vi.setConfig({ testTimeout: 60_000 });

const RECORDINGS = mkdtempSync(join(tmpdir(), 'nullsteer-e2e-rec-'));
const DATA = mkdtempSync(join(tmpdir(), 'nullsteer-e2e-data-'));

let svc: Service | null = null;
let port = 0;
let browser: Browser;
let page: Page;
const problems: string[] = [];

async function start(httpPort: number): Promise<Service> {
  const loaded = await loadConfig({
    env: {},
    layers: [{ server: { httpPort }, engine: { workers: 2 }, processing: { azimuthStepDeg: 1, bandLowHz: 1000 }, outputs: { dir: RECORDINGS }, data: { dir: DATA } }],
  });
  return startService(loaded);
}

const api = (path: string, init?: RequestInit) => fetch(`http://127.0.0.1:${port}${path}`, init);

async function processing(): Promise<any> {
  return (await api('/api/processing')).json();
}

async function downloadBytes(d: Download): Promise<Buffer> {
  const path = await d.path();
  return readFileSync(path);
}

describe.skipIf(!browserAvailable)('session tools in a browser', () => {
  beforeAll(async () => {
    svc = await start(0);
    port = svc.httpPort;
    browser = await launchBrowser();
    page = await openDashboard(browser, `http://127.0.0.1:${port}`, problems); // downloads are accepted by default
    await page.getByTestId('connection').filter({ hasText: 'online' }).waitFor({ timeout: 15_000 });
  }, 60_000);

  afterAll(async () => {
    await browser?.close();
    await svc?.close();
  });

  it('downloads the current spectrum as CSV: comments, header, one line per grid direction', async () => {
    const { params, derived } = await processing();
    const button = page.getByTestId('export-spectrum-csv');
    await expect.poll(() => button.isEnabled(), { timeout: 10_000 }).toBe(true);
    const [download] = await Promise.all([page.waitForEvent('download'), button.click()]);
    expect(download.suggestedFilename()).toMatch(/^nullsteer-spectrum-\d{8}T\d{6}Z\.csv$/);
    const lines = (await downloadBytes(download)).toString('utf8').split('\n');
    expect(lines.at(-1)).toBe(''); // ends in a newline
    const comments = lines.filter((l) => l.startsWith('#'));
    const body = lines.filter((l) => l !== '' && !l.startsWith('#'));
    expect(comments.some((l) => /^# sample_index: \d+$/.test(l))).toBe(true);
    const paramLine = comments.find((l) => l.startsWith('# params: '));
    expect(JSON.parse(paramLine!.slice('# params: '.length))).toEqual(params);
    expect(body[0]).toBe('time_s,stream_time_s,sample_index,azimuth_deg,elevation_deg,conventional_db,mvdr_db');
    const rows = body.slice(1);
    // The time fields, the same on every line: stream time = sample index / rate (to the µs); time
    // from the history's start, when the history keeps its rows' sample indices, not above it.
    const sampleIndex = Number(comments.find((l) => l.startsWith('# sample_index: '))!.slice('# sample_index: '.length));
    const [timeS, streamS, si] = rows[0].split(',');
    expect(Number(si)).toBe(sampleIndex);
    expect(streamS).toBe(String(Number((sampleIndex / derived.sampleRateHz).toFixed(6))));
    if (timeS !== '') expect(Number(timeS)).toBeLessThanOrEqual(Number(streamS));
    for (const r of rows) expect(r.split(',').slice(0, 3)).toEqual([timeS, streamS, si]);
    expect(derived.directions).toBe(360); // 1° full turn, azimuth only
    expect(rows.length).toBe(derived.directions);
    // Azimuth column: the grid's directions in order (0°, 1°, … 359°).
    const az = params.grid.azimuthDeg;
    rows.forEach((r, i) => {
      const f = r.split(',').slice(3);
      expect(f.length).toBe(4);
      expect(f[0]).toBe((az.startDeg + i * az.stepDeg).toFixed(3));
      expect(f[1]).toBe('0.000');
      for (const [j, m] of [
        [2, 'conventional'],
        [3, 'mvdr'],
      ] as const) {
        if (params.methods.includes(m)) expect(Number.isFinite(Number(f[j])), `${m} at ${f[0]}: ${f[j]}`).toBe(true);
        else expect(f[j]).toBe('');
      }
    });
  });

  it('downloads the direction history as a plain PNG image (shift-click: the canvas as drawn)', async () => {
    const button = page.getByTestId('export-history-png');
    await expect.poll(() => button.isEnabled(), { timeout: 10_000 }).toBe(true);
    const [download] = await Promise.all([page.waitForEvent('download'), button.click({ modifiers: ['Shift'] })]);
    expect(download.suggestedFilename()).toMatch(/^nullsteer-history-\d{8}T\d{6}Z-plain\.png$/);
    const bytes = await downloadBytes(download);
    // PNG signature (RFC 2083 §3.1 / ISO 15948): 89 50 4E 47 0D 0A 1A 0A, then the IHDR chunk.
    expect([...bytes.subarray(0, 8)]).toEqual([0x89, 0x50, 0x4e, 0x47, 0x0d, 0x0a, 0x1a, 0x0a]);
    expect(bytes.subarray(12, 16).toString('latin1')).toBe('IHDR');
    const canvasSize = await page.getByTestId('history-canvas').evaluate((c) => [(c as HTMLCanvasElement).width, (c as HTMLCanvasElement).height]);
    expect([bytes.readUInt32BE(16), bytes.readUInt32BE(20)]).toEqual(canvasSize);
    expect(problems).toEqual([]);
  });

  it('downloads the direction history as a report PNG: the history with axes, colour bar and caption', async () => {
    const button = page.getByTestId('export-history-png');
    await expect.poll(() => button.isEnabled(), { timeout: 10_000 }).toBe(true);
    const [download] = await Promise.all([page.waitForEvent('download'), button.click()]);
    expect(download.suggestedFilename()).toMatch(/^nullsteer-history-\d{8}T\d{6}Z\.png$/);
    const img = decodePng(await downloadBytes(download));
    const px = (x: number, y: number) => Array.from(img.rgba.subarray((y * img.width + x) * 4, (y * img.width + x) * 4 + 3));
    // The frame round the history (shared/report-image.ts draws it in grey 110,110,118): its top
    // line is the first image row holding a run of at least 362 frame pixels (360 azimuths + 2).
    const isFrame = (p: number[]) => p[0] === 110 && p[1] === 110 && p[2] === 118;
    let frameTop = -1;
    let frameLeft = -1;
    for (let y = 0; y < img.height && frameTop < 0; y++) {
      let run = 0;
      for (let x = 0; x < img.width; x++) {
        run = isFrame(px(x, y)) ? run + 1 : 0;
        if (run >= 362) {
          frameTop = y;
          frameLeft = x - run + 1;
          break;
        }
      }
    }
    expect(frameTop, 'frame found').toBeGreaterThan(0);
    const rasterX = frameLeft + 1;
    const rasterY = frameTop + 1;
    expect(isFrame(px(rasterX + 360, rasterY)), 'frame right of 360 azimuth columns').toBe(true);
    // History rows: down the left frame column to the first row of the frame's bottom line.
    let rows = 0;
    while (rasterY + rows < img.height && !isFrame(px(rasterX, rasterY + rows))) rows++;
    expect(rows).toBeGreaterThan(0);
    // Every pixel of the first history row is a colour of the dashboard's scale (or the no-data grey).
    const scale = new Set<string>([NO_DATA_RGB.join(',')]);
    for (let k = 0; k < COLORMAP_SIZE; k++) scale.add(`${COLORMAP_RGB[3 * k]},${COLORMAP_RGB[3 * k + 1]},${COLORMAP_RGB[3 * k + 2]}`);
    for (let x = 0; x < 360; x++) expect(scale.has(px(rasterX + x, rasterY).join(',')), `column ${x}`).toBe(true);
    // Larger than the bare history by the margins: time axis on the left, colour bar and its
    // labels on the right, titles above, azimuth axis and caption below.
    expect(rasterX).toBeGreaterThan(20);
    expect(img.width - (rasterX + 360)).toBeGreaterThan(40);
    expect(rasterY).toBeGreaterThan(10);
    expect(img.height - (rasterY + rows)).toBeGreaterThan(50);
    // The caption: dark ink in the band under the azimuth axis title (the last 30 % of the margin below).
    const below = img.height - (rasterY + rows);
    let ink = 0;
    for (let y = img.height - Math.floor(below * 0.3); y < img.height; y++) for (let x = 0; x < img.width; x++) if (px(x, y)[0] < 80) ink++;
    expect(ink).toBeGreaterThan(100);
    expect(problems).toEqual([]);
  });

  it('presets: save, list, load, ask before replacing (cancel, replace), delete, errors; the journal lists the changes newest first', { timeout: 90_000 }, async () => {
    expect((await api('/api/presets')).status).toBe(200);

    // Save the parameters in force as "e2e-base".
    const lambda0 = (await processing()).params.lambda;
    await page.getByTestId('preset-name').fill('e2e-base');
    await page.getByTestId('preset-save').click();
    const item = page.locator('[data-testid="preset-item"][data-name="e2e-base"]');
    await item.waitFor({ timeout: 10_000 });
    const listed: any = await (await api('/api/presets')).json();
    expect(listed.presets.map((p: any) => p.name)).toContain('e2e-base');

    // Change λ elsewhere, then Load brings the preset's λ back on the server and in the panel.
    const patched = await api('/api/processing', { method: 'PATCH', headers: { 'content-type': 'application/json' }, body: JSON.stringify({ lambda: 0.995 }) });
    expect(patched.status).toBe(200);
    await expect.poll(async () => Number(await page.getByTestId('input-lambda').inputValue()), { timeout: 10_000 }).toBeCloseTo(0.995, 6);
    await item.getByTestId('preset-load').click();
    await expect.poll(async () => (await processing()).params.lambda, { timeout: 10_000 }).toBe(lambda0);
    await expect.poll(async () => Number(await page.getByTestId('input-lambda').inputValue()), { timeout: 10_000 }).toBeCloseTo(lambda0, 6);

    // Saving under a name in use asks inline ("Replace preset …?"); Cancel leaves the old preset as it was.
    const savedAt0 = ((await (await api('/api/presets/e2e-base')).json()) as any).savedAt;
    const confirm = page.getByTestId('preset-confirm');
    await page.getByTestId('preset-name').fill('e2e-base');
    await page.getByTestId('preset-save').click();
    await confirm.waitFor({ timeout: 10_000 });
    expect(await confirm.textContent()).toContain('Replace preset “e2e-base”?');
    expect(await confirm.getAttribute('data-name')).toBe('e2e-base');
    expect(await page.getByTestId('preset-save').isDisabled()).toBe(true); // one question at a time
    await page.getByTestId('preset-cancel').click();
    await confirm.waitFor({ state: 'detached', timeout: 10_000 });
    const kept: any = await (await api('/api/presets/e2e-base')).json();
    expect([kept.savedAt, kept.params.lambda]).toEqual([savedAt0, lambda0]);
    expect(await page.getByTestId('preset-name').inputValue()).toBe('e2e-base'); // the name stays, to edit or ask again

    // Ask again with λ changed on the server; Replace saves with overwrite=true: the new λ, a new savedAt.
    const patched2 = await api('/api/processing', { method: 'PATCH', headers: { 'content-type': 'application/json' }, body: JSON.stringify({ lambda: 0.996 }) });
    expect(patched2.status).toBe(200);
    await page.getByTestId('preset-save').click();
    await confirm.waitFor({ timeout: 10_000 });
    await page.getByTestId('preset-replace').click();
    await confirm.waitFor({ state: 'detached', timeout: 10_000 });
    await expect.poll(async () => ((await (await api('/api/presets/e2e-base')).json()) as any).params.lambda, { timeout: 10_000 }).toBe(0.996);
    expect(((await (await api('/api/presets/e2e-base')).json()) as any).savedAt).not.toBe(savedAt0);
    expect(await page.getByTestId('presets-note').textContent()).toBe('replaced “e2e-base”');
    const replacedEntry: any = ((await (await api('/api/journal?limit=50')).json()) as any).entries.filter((e: any) => e.kind === 'preset-save').at(-1);
    expect(replacedEntry).toMatchObject({ summary: 'preset e2e-base replaced', before: { name: 'e2e-base', savedAt: savedAt0 } });
    // λ back to its first value for what follows.
    await api('/api/processing', { method: 'PATCH', headers: { 'content-type': 'application/json' }, body: JSON.stringify({ lambda: lambda0 }) });

    // A name the server refuses: its message is shown, nothing is saved.
    await page.getByTestId('preset-name').fill('-bad name');
    await page.getByTestId('preset-save').click();
    await page.getByTestId('presets-error').waitFor({ timeout: 10_000 });
    expect(await page.getByTestId('presets-error').textContent()).toMatch(/preset name "-bad name" not allowed/);

    // A preset file that does not validate is listed with its reason and cannot be loaded.
    mkdirSync(join(DATA, 'presets'), { recursive: true });
    writeFileSync(join(DATA, 'presets', 'broken.json'), '{ not json');
    const broken = page.locator('[data-testid="preset-item"][data-name="broken"]');
    await broken.waitFor({ timeout: 20_000 }); // the list is re-read every 5 s
    expect(await broken.getAttribute('data-valid')).toBe('false');
    expect(await broken.getByTestId('preset-error').textContent()).toMatch(/not valid JSON/);
    expect(await broken.getByTestId('preset-load').count()).toBe(0);

    // Delete removes it on the server and from the list.
    await item.getByTestId('preset-delete').click();
    await item.waitFor({ state: 'detached', timeout: 10_000 });
    const after: any = await (await api('/api/presets')).json();
    expect(after.presets.map((p: any) => p.name)).not.toContain('e2e-base');

    // The journal shows these changes newest first, with their kinds.
    const kinds = async () => (await page.getByTestId('journal-list').getByTestId('journal-entry').evaluateAll((els) => els.map((e) => (e as HTMLElement).dataset.kind))) as string[];
    await expect.poll(kinds, { timeout: 20_000 }).toEqual(expect.arrayContaining(['preset-save', 'processing', 'preset-apply', 'preset-delete']));
    const shown = await kinds();
    expect(shown[0]).toBe('preset-delete');
    expect(shown.indexOf('preset-save')).toBeLessThan(shown.indexOf('preset-apply')); // the replacement, newer than the load
    expect(shown.indexOf('preset-apply')).toBeLessThan(shown.lastIndexOf('preset-save')); // the first save, older
    const seqs = (await page.getByTestId('journal-entry').evaluateAll((els) => els.map((e) => Number((e as HTMLElement).dataset.seq)))) as number[];
    expect(seqs).toEqual([...seqs].sort((a, b) => b - a));
    const journal: any = await (await api('/api/journal?limit=50')).json();
    expect(seqs[0]).toBe(journal.entries.at(-1).seq);

    // The refused save (400) is a shown message; the browser logs a failed resource load for it.
    expect(problems.filter((p) => !/Failed to load resource: the server responded with a status of 400/.test(p))).toEqual([]);
  });

  it('a server without the session endpoints (404) shows them as not available, asks once and logs nothing of its own', { timeout: 90_000 }, async () => {
    const other = await browser.newPage({ viewport: { width: 1280, height: 900 } });
    const logged: string[] = [];
    other.on('console', (m) => {
      if (m.type() === 'error' || m.type() === 'warning') logged.push(m.text());
    });
    other.on('pageerror', (e) => logged.push(`page: ${e.message}`));
    const asked = { journal: 0, presets: 0 };
    const notFound = JSON.stringify({ error: { code: 'ERR_HTTP_NOT_FOUND', message: 'not found', statusCode: 404 } });
    await other.route(/\/api\/journal(\?|$)/, (r) => {
      asked.journal++;
      return r.fulfill({ status: 404, contentType: 'application/json', body: notFound });
    });
    await other.route(/\/api\/presets(\/|\?|$)/, (r) => {
      asked.presets++;
      return r.fulfill({ status: 404, contentType: 'application/json', body: notFound });
    });
    try {
      await other.goto(`http://127.0.0.1:${port}/`);
      await other.getByTestId('journal-unavailable').waitFor({ timeout: 15_000 });
      await other.getByTestId('presets-unavailable').waitFor({ timeout: 15_000 });
      expect(await other.getByTestId('journal-unavailable').textContent()).toBe('journal not available');
      await other.waitForTimeout(5500); // longer than the 5 s poll
      expect(asked.journal).toBeLessThanOrEqual(2); // the first answer stops the polling (a params message may race it)
      expect(asked.presets).toBe(1);
      // Chromium itself reports each 404 resource load; the dashboard adds nothing.
      expect(logged.filter((t) => !/Failed to load resource: the server responded with a status of 404/.test(t))).toEqual([]);
    } finally {
      await other.close();
    }
  });
});
