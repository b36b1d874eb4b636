/**
 * The Levels and Events panels (issue 16), in a real browser (Debian's chromium via playwright-core,
 * headless, loopback only) against the built-in scene: its source at 35° (server/ingest/scenario.ts)
 * inside a sector 20–50°, and a rule with an absolute threshold far below its level (−80 dBFS), so
 * an event starts within a second or two (as in test/integration/monitor-rules.test.ts). The Events
 * panel lists it; selecting it pauses the direction history on its span with the event's mark on
 * the time line, and offers its beam clip after the hearing caution (the file served by
 * GET /api/clips is a RIFF/WAVE file: Microsoft & IBM, Multimedia Programming Interface and Data
 * Specifications 1.0, 1991). The Levels panel draws the sector's and omni's series, says "indicative"
 * and the unit, and fills its table from the newest 1-s values and then the first 1-min interval.
 * Assertions are on DOM contents and counts; waits are for conditions.
 */
import { copyFileSync, mkdtempSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { type Browser, type Page } from 'playwright-core';
import { afterAll, beforeAll, describe, expect, it, vi } from 'vitest';
import { browserAvailable, launchBrowser, openDashboard } from '../helpers/browser.ts';
import { loadConfig } from '../../server/config/load.ts';
import { startService, type Service } from '../../server/service.ts';
import { getStatus, waitFor } from '../helpers/service.ts';

// A browser and a server on a loaded 2-core machine: waits are for conditions, with room to spare.
vi.setConfig({ testTimeout: 60_000 });

const dir = mkdtempSync(join(tmpdir(), 'nullsteer-e2e-monitor-'));
const ARRAY = join(dir, 'ring-24.json');
copyFileSync(new URL('../../config/arrays/ring-24.json', import.meta.url), ARRAY);
const JSON_HEADERS = { 'content-type': 'application/json' };

let svc: Service | null = null;
let browser: Browser;
let page: Page;
const problems: string[] = [];

describe.skipIf(!browserAvailable)('levels and events panels', () => {
  beforeAll(async () => {
    const loaded = await loadConfig({
      env: {},
      layers: [{ server: { httpPort: 0 }, array: { file: ARRAY }, engine: { workers: 1 }, processing: { azimuthStepDeg: 1, bandLowHz: 1000 }, outputs: { dir: join(dir, 'recordings') }, data: { dir: join(dir, 'data') } }],
    });
    svc = await startService(loaded);
    const put = await fetch(`${svc.url}/api/sectors/gate`, { method: 'PUT', headers: JSON_HEADERS, body: JSON.stringify({ azimuthDeg: [20, 50], method: 'mvdr', weighting: 'A' }) });
    expect(put.status).toBe(201);
    browser = await launchBrowser();
    page = await openDashboard(browser, svc.url, problems, { width: 1280, height: 1600 });
  }, 60_000);

  afterAll(async () => {
    await browser?.close();
    await svc?.close();
  });

  it('lists the event, marks it on the history, shows its span and offers its clip', async () => {
    const url = svc!.url;
    await page.getByTestId('connection').filter({ hasText: 'online' }).waitFor({ timeout: 15_000 });
    const panel = page.getByTestId('events-panel');
    await panel.getByTestId('events-empty').waitFor({ timeout: 15_000 });
    // Six seconds of stream first, so the pre-trigger ring holds the clip's 5 s before the event.
    await waitFor(async () => ((await getStatus(svc!)).engine.hops ?? 0) * 256 >= 6 * 48_000, 30_000, 'six seconds of stream');
    const rule = await fetch(`${url}/api/rules/gate-loud`, { method: 'PUT', headers: JSON_HEADERS, body: JSON.stringify({ sector: 'gate', threshold: { mode: 'absolute', db: -80 }, minDurationS: 0.5, releaseS: 1 }) });
    expect(rule.status).toBe(201);

    const row = panel.locator('[data-testid="event-row"][data-rule="gate-loud"]');
    await row.first().waitFor({ timeout: 30_000 });
    expect(await panel.getByTestId('event-row').count()).toBe(1);
    const cells = await row.first().locator('td').allTextContents();
    // rule, sector, start UTC, length, peak, direction, state
    expect(cells[0]).toBe('gate-loud');
    expect(cells[1]).toBe('gate');
    expect(cells[2]).toMatch(/^\d{2}:\d{2}:\d{2}$/);
    expect(cells[6]).toBe('active');
    const listed = (await (await fetch(`${url}/api/events`)).json()) as { events: { id: string; clips: string[] }[] };
    const id = await row.first().getAttribute('data-id');
    expect(listed.events.map((e) => e.id)).toEqual([id]);

    // The history marks the event's start with the rule's name.
    const history = page.getByTestId('direction-history').first();
    await expect.poll(() => history.locator('[data-testid="event-mark"][data-rule="gate-loud"]').count(), { timeout: 30_000 }).toBe(1);
    expect(await history.getByTestId('event-mark').first().textContent()).toBe('gate-loud');

    // Selecting it pauses the history on its span and offers the clip after the caution.
    await row.first().click();
    await expect.poll(() => panel.getByTestId('event-shown').textContent(), { timeout: 15_000 }).toContain('shown on the direction history');
    expect(await history.getByTestId('history-pause').getAttribute('aria-pressed')).toBe('true');
    expect(await history.getByTestId('event-span').count()).toBe(1);
    expect(await history.locator('[data-testid="event-mark"][data-rule="gate-loud"]').count()).toBe(1);
    // The clip is listed once finished: the event's end (the rule deleted) plus postS (5 s).
    expect(await panel.getByTestId('clip-none').textContent()).toContain('once it is finished');
    expect((await fetch(`${url}/api/rules/gate-loud`, { method: 'DELETE', headers: JSON_HEADERS })).status).toBe(200);
    await expect.poll(() => row.first().getAttribute('data-state'), { timeout: 30_000 }).toBe('ended');
    await panel.getByTestId('clip-caution').waitFor({ timeout: 30_000 });
    await panel.getByTestId('clip-acknowledge').click();
    const player = panel.getByTestId('clip-player');
    await player.waitFor({ timeout: 15_000 });
    const file = await player.getAttribute('data-file');
    expect(file).toBe(`${id}-beam.wav`);
    expect(await player.getAttribute('src')).toBe(`/api/clips/${id}-beam.wav`);
    const clip = await fetch(`${url}/api/clips/${file}`);
    expect(clip.status).toBe(200);
    expect(clip.headers.get('content-type')).toBe('audio/wav');
    const head = Buffer.from(await clip.arrayBuffer()).subarray(0, 12);
    expect(head.subarray(0, 4).toString('latin1')).toBe('RIFF');
    expect(head.subarray(8, 12).toString('latin1')).toBe('WAVE');
    expect(problems).toEqual([]);
  }, 120_000);

  it('draws Leq and L90 per series with the unit and "indicative", and the latest interval’s table', async () => {
    const panel = page.getByTestId('levels-panel');
    await expect.poll(() => panel.getByTestId('levels-indicative').textContent(), { timeout: 15_000 }).toContain('indicative');
    // 1-s values first: they come every second.
    await panel.getByTestId('levels-interval').selectOption('1s');
    for (const series of ['omni', 'gate']) {
      await expect.poll(() => panel.locator(`[data-testid="levels-line"][data-series="${series}"][data-stat="leq"]`).count(), { timeout: 30_000 }).toBe(1);
    }
    expect(await panel.getByTestId('levels-unit').textContent()).toBe('dBFS');
    const gateRow = panel.locator('[data-testid="levels-row"][data-series="gate"]');
    await expect.poll(async () => (await gateRow.locator('[data-stat="leq"]').textContent()) ?? '', { timeout: 15_000 }).toMatch(/^−?\d+\.\d$/);
    expect(await panel.getByTestId('levels-row').count()).toBe(2);

    // The first 1-min interval closes at the next minute boundary (server/monitor/level-stats.ts).
    await panel.getByTestId('levels-interval').selectOption('1min');
    await expect.poll(async () => (await gateRow.locator('[data-stat="l90"]').textContent()) ?? '', { timeout: 100_000, interval: 1000 }).toMatch(/^−?\d+\.\d$/);
    const stats = await gateRow.locator('td').allTextContents();
    // series, Leq, Lmax, Lmin, L10, L50, L90, L95: every statistic a number.
    expect(stats[0]).toBe('gate');
    for (const s of stats.slice(1)) expect(s).toMatch(/^−?\d+\.\d$/);
    const num = (s: string) => Number(s.replace('−', '-'));
    const [leq, lmax, lmin, l10, l50, l90, l95] = stats.slice(1).map(num);
    // Order of percentile levels (ISO 1996-1 definitions): Lmax ≥ L10 ≥ L50 ≥ L90 ≥ L95 ≥ Lmin; Leq within [Lmin, Lmax].
    expect(lmax).toBeGreaterThanOrEqual(l10);
    expect(l10).toBeGreaterThanOrEqual(l50);
    expect(l50).toBeGreaterThanOrEqual(l90);
    expect(l90).toBeGreaterThanOrEqual(l95);
    expect(l95).toBeGreaterThanOrEqual(lmin);
    expect(leq).toBeLessThanOrEqual(lmax);
    expect(leq).toBeGreaterThanOrEqual(lmin);
    for (const series of ['omni', 'gate']) {
      for (const stat of ['leq', 'l90']) expect(await panel.locator(`[data-testid="levels-line"][data-series="${series}"][data-stat="${stat}"]`).count()).toBe(1);
    }
    expect(problems).toEqual([]);
  }, 150_000);
});
