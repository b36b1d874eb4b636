/**
 * Remote bin workers and partial rows on the dashboard (issue 17), in a real browser (Debian's
 * chromium through playwright-core, headless, loopback only) against a real server with the
 * built-in scene. The server has no remote workers (the lead builds them in parallel), so the test
 * stands in for them at the page's edge:
 * - `page.route('**\/api/status')` answers the server's own status with `engine.remote` added in the
 *   shape issue 17 fixes;
 * - `page.routeWebSocket('**\/api/live')` passes the live socket through and sets bit 3 of the flags
 *   byte (partial, shared/messages.ts) on rows in blocks of four by sequence number, recording which
 *   sample indices it flagged.
 * It checks the Remote workers table's cells, the strip badge, and that the partial marks are drawn
 * beside exactly the flagged rows: the marks canvas's pixels at the height of each row the history
 * exposes (data-row-times: sample index and top edge) are the mark's colour for flagged rows and
 * empty for the others. Waits are on the page's state, never on how fast anything happened.
 */
import { type Browser, type Page } from 'playwright-core';
import { afterAll, beforeAll, describe, expect, it, vi } from 'vitest';
import type { Service } from '../../server/service.ts';
import { ROW_FLAG_PARTIAL, tryDecodeRow } from '../../shared/messages.ts';
import { PARTIAL_MARK_RGB } from '../../client/src/lib/partial-marks.ts';
import { browserAvailable, launchBrowser, openDashboard } from '../helpers/browser.ts';
import { startTestService } from '../helpers/service.ts';

vi.setConfig({ testTimeout: 60_000 });

/** engine.remote as issue 17 specifies it for GET /api/status (values made up). */
const REMOTE = {
  enabled: true,
  broker: 'connected',
  mode: 'remote',
  localThreads: 1,
  workers: [
    { name: 'rack-a', id: 'w-1f3a', bins: 64, firstBin: 10, throughputBinsPerS: 12_400, lastAnswerAgeMs: 38, bytesPerS: 1_250_000, state: 'active' },
    { name: 'rack-b', id: 'w-77c0', bins: 32, firstBin: 74, throughputBinsPerS: 850, lastAnswerAgeMs: null, bytesPerS: 0, state: 'joining' },
  ],
  partialRows: 12,
  lateParts: 5,
  oldEpochMessages: 2,
  dropped: { deadline: 4, malformed: 1 },
  replans: 3,
  lastReplan: { at: '2026-12-04T05:00:00.000Z', reason: 'worker rack-c lost' },
};

/** Rows in blocks of this many by sequence number, every other block flagged partial. */
const BLOCK_ROWS = 4;

describe.skipIf(!browserAvailable)('remote workers and partial rows on the dashboard', () => {
  let browser: Browser;
  let svc: Service;
  beforeAll(async () => {
    // 5 rows/s: at the 15 s span a row is several pixels tall, so each one's pixels can be read.
    svc = await startTestService({ source: { kind: 'simulator' }, engine: { workers: 1 }, processing: { spectrumRateHz: 5 } });
    browser = await launchBrowser();
  }, 60_000);
  afterAll(async () => {
    await browser?.close();
    await svc?.close();
  });

  /** What the routed status adds, and whether the routed socket flags rows; the test changes both. */
  let remote: unknown = REMOTE;
  let flagging = true;
  /** Sample indices of the rows passed through, and whether each was flagged. */
  const flagged = new Map<number, boolean>();
  let flaggedCount = 0;

  async function openRouted(problems: string[]): Promise<Page> {
    const page = await browser.newPage({ viewport: { width: 1280, height: 900 } });
    page.on('console', (m) => {
      if (m.type() === 'error') problems.push(`console: ${m.text()}`);
    });
    page.on('pageerror', (e) => problems.push(`page: ${e.message}`));
    await page.route('**/api/status', async (route) => {
      const res = await route.fetch();
      const json = (await res.json()) as { engine: Record<string, unknown> };
      json.engine.remote = remote;
      await route.fulfill({ response: res, json });
    });
    await page.routeWebSocket('**/api/live', (ws) => {
      const server = ws.connectToServer();
      server.onMessage((m) => {
        if (typeof m === 'string') {
          ws.send(m);
          return;
        }
        const bytes = new Uint8Array(m);
        const r = tryDecodeRow(bytes);
        if (r.ok) {
          const partial = flagging && Math.floor(r.row.seq / BLOCK_ROWS) % 2 === 0;
          if (partial) {
            bytes[5] |= ROW_FLAG_PARTIAL;
            flaggedCount++;
          }
          flagged.set(r.row.sampleIndex, partial);
        }
        ws.send(Buffer.from(bytes));
      });
    });
    await page.goto(`${svc.url}/`);
    return page;
  }

  it('shows the remote workers table, the badge, and marks exactly the partial rows beside the history', async () => {
    const problems: string[] = [];
    const page = await openRouted(problems);
    await page.getByTestId('connection').filter({ hasText: 'online' }).waitFor({ timeout: 30_000 });

    // The table: one line per worker, cells as the brief lists them.
    const group = page.getByTestId('remote-workers');
    await group.waitFor({ timeout: 30_000 });
    const lines = group.getByTestId('remote-worker');
    await expect.poll(() => lines.count(), { timeout: 15_000 }).toBe(2);
    const cells = async (i: number) => (await lines.nth(i).locator('td').allTextContents()).map((t) => t.trim());
    expect(await cells(0)).toEqual(['rack-a', '10–73', '12.4 k', '38 ms', '1.3 MB', 'active']);
    expect(await cells(1)).toEqual(['rack-b', '74–105', '850', 'never', '0 B', 'joining']);
    expect(await group.getByTestId('remote-broker').textContent()).toBe('broker connected');
    expect(await group.getByTestId('remote-mode').textContent()).toBe('remote + local');
    expect(await group.getByTestId('remote-partial-rows').textContent()).toBe('12');
    expect(await group.getByTestId('remote-late-parts').textContent()).toBe('5');
    expect(await group.getByTestId('remote-old-epoch').textContent()).toBe('2');
    expect(await group.getByTestId('remote-dropped').textContent()).toBe('5');
    expect(await group.getByTestId('remote-replans').textContent()).toBe('3');
    expect(await group.getByTestId('remote-last-replan').textContent()).toContain('worker rack-c lost');

    // Partial rows arrive: the badge says so and the legend counts them.
    const badge = page.getByTestId('badge-remote');
    await expect.poll(() => badge.textContent(), { timeout: 30_000 }).toBe('partial rows');
    const history = page.getByTestId('direction-history').first();
    const legend = history.getByTestId('partial-legend');
    await expect.poll(async () => Number(await legend.getAttribute('data-held')), { timeout: 15_000 }).toBeGreaterThanOrEqual(1);
    expect(await legend.textContent()).toBe('partial');
    expect(await legend.getAttribute('title')).toMatch(/^partial row: some bins missing — a remote worker did not answer in time/);

    // Enough rows for the exposed 16 to hold flagged and whole ones; then pause and read pixels.
    const canvas = history.getByTestId('history-canvas');
    await expect.poll(async () => Number(await canvas.getAttribute('data-rows')), { timeout: 30_000 }).toBeGreaterThanOrEqual(3 * BLOCK_ROWS * 2);
    await history.getByTestId('history-span').selectOption('15');
    await history.getByTestId('history-pause').click();
    // Both canvases are drawn in the same frame (DirectionHistory draw()), so one read sees one frame.
    const probe = await page.evaluate(() => {
      const img = document.querySelector('[data-testid="history-canvas"]') as HTMLCanvasElement;
      const marks = document.querySelector('[data-testid="history-partial-marks"]') as HTMLCanvasElement;
      const ctx = marks.getContext('2d')!;
      const dpr = marks.width / marks.getBoundingClientRect().width;
      const rows = (img.dataset.rowTimes ?? '')
        .split(' ')
        .filter(Boolean)
        .map((p) => p.split(':').map(Number));
      const out: { sampleIndex: number; yCss: number; rgba: number[] }[] = [];
      // Row i covers from its top edge down one row spacing (to the next older row's top edge,
      // unless a skipped row left a gap there): read half a spacing below its top edge.
      const gaps = rows.slice(1).map((r, i) => r[1] - rows[i][1]).sort((a, b) => a - b);
      const spacing = gaps[gaps.length >> 1];
      for (let i = 0; i + 1 < rows.length; i++) {
        const yCss = rows[i][1] + Math.min(rows[i + 1][1] - rows[i][1], spacing) / 2;
        const d = ctx.getImageData(Math.floor(marks.width / 2), Math.floor(yCss * dpr), 1, 1).data;
        out.push({ sampleIndex: rows[i][0], yCss, rgba: Array.from(d) });
      }
      return { out, spans: Number(marks.dataset.spans), widthCss: marks.getBoundingClientRect().width, imgRight: img.getBoundingClientRect().right, marksLeft: marks.getBoundingClientRect().left };
    });
    // The marks sit in the gutter right of the image, not over it.
    expect(probe.widthCss).toBe(5);
    expect(probe.marksLeft).toBeGreaterThanOrEqual(probe.imgRight);
    expect(probe.spans).toBeGreaterThanOrEqual(1);
    expect(probe.out.length).toBeGreaterThanOrEqual(12);
    let seenPartial = 0;
    let seenWhole = 0;
    for (const p of probe.out) {
      const wasFlagged = flagged.get(p.sampleIndex);
      expect(wasFlagged, `row at sample ${p.sampleIndex} passed the routed socket`).not.toBeUndefined();
      if (wasFlagged) {
        seenPartial++;
        expect(p.rgba, `partial row at sample ${p.sampleIndex}, y ${p.yCss.toFixed(1)} px`).toEqual([...PARTIAL_MARK_RGB, 255]);
      } else {
        seenWhole++;
        expect(p.rgba[3], `whole row at sample ${p.sampleIndex}, y ${p.yCss.toFixed(1)} px: no mark`).toBe(0);
      }
    }
    expect(seenPartial).toBeGreaterThanOrEqual(BLOCK_ROWS);
    expect(seenWhole).toBeGreaterThanOrEqual(BLOCK_ROWS);
    // The pointer over a partial row says so in the readout; over a whole row it does not.
    const box = (await canvas.boundingBox())!;
    const onePartial = probe.out.find((p) => flagged.get(p.sampleIndex))!;
    const oneWhole = probe.out.find((p) => !flagged.get(p.sampleIndex))!;
    await page.mouse.move(box.x + box.width / 2, box.y + onePartial.yCss);
    await expect.poll(() => history.getByTestId('hover-partial').count(), { timeout: 15_000 }).toBe(1);
    await page.mouse.move(box.x + box.width / 2, box.y + oneWhole.yCss);
    await expect.poll(() => history.getByTestId('hover-partial').count(), { timeout: 15_000 }).toBe(0);
    await page.mouse.move(0, 0);
    await history.getByTestId('history-pause').click();

    // Remote workers asked for but none in the plan: the badge adds "local fallback".
    remote = { ...REMOTE, mode: 'local-fallback', broker: 'reconnecting', workers: [] };
    await expect.poll(() => badge.textContent(), { timeout: 15_000 }).toBe('partial rows · local fallback');
    expect(await group.getByTestId('remote-mode').textContent()).toBe('local fallback');
    expect(await group.getByTestId('remote-none').count()).toBe(1);

    // No remote workers at all and whole rows again: table and badge go (the badge after 40 whole rows).
    remote = null;
    flagging = false;
    await expect.poll(() => page.getByTestId('remote-workers').count(), { timeout: 15_000 }).toBe(0);
    await expect.poll(() => badge.count(), { timeout: 30_000 }).toBe(0);
    expect(flaggedCount).toBeGreaterThan(0);
    expect(problems).toEqual([]);
    await page.close();
  }, 120_000);

  it('shows no remote workers group and no badge on the plain server', async () => {
    const problems: string[] = [];
    const page = await openDashboard(browser, svc.url, problems);
    await expect.poll(() => page.getByTestId('engine-load').count(), { timeout: 30_000 }).toBe(1);
    await expect.poll(async () => Number(await page.getByTestId('history-canvas').first().getAttribute('data-rows')), { timeout: 30_000 }).toBeGreaterThanOrEqual(5);
    expect(await page.getByTestId('processing-panel').count()).toBe(1);
    expect(await page.getByTestId('remote-workers').count()).toBe(0);
    expect(await page.getByTestId('badge-remote').count()).toBe(0);
    expect(await page.getByTestId('partial-legend').count()).toBe(0);
    expect(await page.getByTestId('history-partial-marks').first().getAttribute('data-spans')).toBe('0');
    expect(problems).toEqual([]);
    await page.close();
  });
});
