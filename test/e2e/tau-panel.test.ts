/**
 * The processing panel's τ field in a real browser (Debian's chromium through playwright-core,
 * loopback only) against a real server fed by the built-in scene (ring-24, M = 24):
 * - refused values: the refusal names the field as the panel shows it ("time constant τ"), the
 *   field shows the server's value again and carries no error state; the input's range is the
 *   configuration's (shared/processing-fields.ts, server/config/schema.ts);
 * - the τ advisor: snapshot count, RMB SINR loss and the warning for a very short τ; "suggest"
 *   fills the τ field with a τ whose effective snapshot count (shared/tau-advisor.ts) is ≥ 2M, and
 *   applying it goes through the field's normal change path.
 */
import { type Browser, type Page } from 'playwright-core';
import { afterAll, beforeAll, describe, expect, it, vi } from 'vitest';
import { browserAvailable, launchBrowser, openDashboard } from '../helpers/browser.ts';
import { loadConfig } from '../../server/config/load.ts';
import { startService, type Service } from '../../server/service.ts';
import { schemaLeaves } from '../../server/config/schema.ts';
import { adviseTau } from '../../shared/tau-advisor.ts';

vi.setConfig({ testTimeout: 60_000 });

const M = 24;
let svc: Service | null = null;
let base = '';
let browser: Browser;
let page: Page;
const problems: string[] = [];

async function processing(): Promise<any> {
  return (await fetch(`${base}/api/processing`)).json();
}
async function patch(body: unknown): Promise<Response> {
  return fetch(`${base}/api/processing`, { method: 'PATCH', headers: { 'content-type': 'application/json' }, body: JSON.stringify(body) });
}
const field = () => page.getByTestId('input-tauS');
/** What the field shows for the server's τ (fmtSig with 5 digits, as the panel). */
const shownTau = async () => String(Number((await processing()).derived.tauS.toPrecision(5)));

describe.skipIf(!browserAvailable)('processing panel: refused values and the τ advisor', () => {
  beforeAll(async () => {
    const loaded = await loadConfig({ env: {}, layers: [{ server: { httpPort: 0 }, engine: { workers: 1 }, processing: { azimuthStepDeg: 2, bandLowHz: 500, bandHighHz: 4000 } }] });
    svc = await startService(loaded);
    base = `http://127.0.0.1:${svc.httpPort}`;
    browser = await launchBrowser();
    page = await openDashboard(browser, base, problems, { width: 1280, height: 900 });
    await page.getByTestId('connection').filter({ hasText: 'online' }).waitFor({ timeout: 20_000 });
    await field().waitFor({ timeout: 20_000 });
  }, 60_000);

  afterAll(async () => {
    await browser?.close();
    await svc?.close();
  });

  it('the τ input\'s range is the configuration\'s (processing.tauS)', async () => {
    const spec = schemaLeaves().find((l) => l.path === 'processing.tauS')!.spec as { min: number; max: number };
    expect(Number(await field().getAttribute('min'))).toBe(spec.min);
    expect(Number(await field().getAttribute('max'))).toBe(spec.max);
    expect(await field().getAttribute('step')).toBe('any');
  });

  it('a τ refused by the panel\'s own check: message in the panel\'s words, nothing sent, the server\'s value back', async () => {
    const before = (await processing()).params.lambda;
    await field().fill('5000');
    expect(await field().getAttribute('aria-invalid')).toBe('true'); // out of range while typing
    await field().press('Enter');
    await page.getByTestId('error-tauS').waitFor({ timeout: 10_000 });
    expect(await page.getByTestId('error-tauS').textContent()).toBe('time constant τ: 5000 out of range; allowed 0.01–3600 s');
    expect((await processing()).params.lambda).toBe(before);
    expect(await field().inputValue()).toBe(await shownTau());
    expect(await field().getAttribute('aria-invalid')).toBe('false');
  });

  it('a τ that passes the panel\'s check but the server refuses (shorter than one hop at N = 4096): named "time constant τ", the field back at the server\'s value, no error state left', async () => {
    expect((await patch({ fftSize: 4096 })).status).toBe(200);
    await expect.poll(async () => (await page.getByTestId('input-fft').inputValue()), { timeout: 20_000 }).toBe('4096');
    const before = (await processing()).params.lambda;
    await field().fill('0.02'); // inside 0.01–3600 s, but one hop is 2048/48000 = 0.0427 s
    expect(await field().getAttribute('aria-invalid')).toBe('false');
    const answered = page.waitForResponse((r) => r.url().endsWith('/api/processing') && r.request().method() === 'PATCH');
    await field().press('Enter');
    expect((await answered).status()).toBe(400); // the server refused it, not the panel
    await page.getByTestId('error-tauS').waitFor({ timeout: 10_000 });
    const text = (await page.getByTestId('error-tauS').textContent()) ?? '';
    expect(text).toBe('time constant τ: 0.02 out of range; allowed more than one hop (0.0426667 s at FFT size 4096) up to 3600 s');
    expect(text).not.toMatch(/tauS/);
    expect((await processing()).params.lambda).toBe(before);
    expect(await field().inputValue()).toBe(await shownTau());
    expect(await field().getAttribute('aria-invalid')).toBe('false');
    expect(await page.locator('.field.invalid').count()).toBe(0);
    // Once read, the message goes (typing in the field clears it at once).
    await field().focus();
    await field().press('End');
    await field().type('1');
    expect(await page.getByTestId('error-tauS').count()).toBe(0);
    await field().press('Escape');
    expect((await patch({ fftSize: 512 })).status).toBe(200);
    await expect.poll(async () => (await page.getByTestId('input-fft').inputValue()), { timeout: 20_000 }).toBe('512');
  });

  it('the advisor: a very short τ shows its snapshot count, the RMB loss and the 2M warning', async () => {
    expect((await patch({ tauS: 0.02 })).status).toBe(200);
    const shape = { fftSize: 512, hopSamples: 256, sampleRateHz: 48000 };
    const expected = adviseTau(0.02, M, shape)!;
    await expect.poll(async () => Number(await page.getByTestId('advisor-snapshots').getAttribute('data-snapshots')), { timeout: 20_000 }).toBeCloseTo(expected.snapshots, 6);
    expect(expected.snapshots).toBeLessThan(2 * M);
    expect(await page.getByTestId('advisor-snapshots').textContent()).toMatch(/≈ 5\.66 snapshots per bin \(2M = 48\)/);
    expect(await page.getByTestId('advisor-sinr').textContent()).toMatch(/MVDR SINR loss unbounded/); // K < M − 1
    await page.getByTestId('advisor-warning').waitFor({ timeout: 10_000 });
    expect(await page.getByTestId('advisor-warning').textContent()).toMatch(/fewer than 2M snapshots/);
    // A longer τ: a finite loss, no warning.
    expect((await patch({ tauS: 0.5 })).status).toBe(200);
    const half = adviseTau(0.5, M, shape)!;
    await expect.poll(async () => Number(await page.getByTestId('advisor-sinr').getAttribute('data-loss-db')), { timeout: 20_000 }).toBeCloseTo(half.sinrLossDb, 6);
    expect(half.sinrLossDb).toBeGreaterThan(0);
    expect(await page.getByTestId('advisor-warning').count()).toBe(0);
  });

  it('the advisor follows the moving cart: a bearing rate of a few degrees per second from the rows', async () => {
    // The scene's cart moves at up to 3.14°/s (server/ingest/scenario.ts); the fit needs 5 rows.
    await expect.poll(async () => Math.abs(Number((await page.getByTestId('advisor-bearing').getAttribute('data-rate')) || NaN)), { timeout: 30_000 }).toBeGreaterThan(0.5);
    expect(await page.getByTestId('advisor-bearing').textContent()).toMatch(/moving [+−]\d+\.\d\d°\/s → lag ≈ \d+\.\d°/);
  });

  it('"suggest" fills the τ field with a τ keeping ≥ 2M snapshots; applying it goes through the field\'s change path', async () => {
    expect((await patch({ tauS: 0.02 })).status).toBe(200);
    await page.getByTestId('advisor-warning').waitFor({ timeout: 20_000 });
    await page.getByTestId('button-suggest-tau').click();
    const filled = Number(await field().inputValue());
    const a = adviseTau(filled, M, { fftSize: 512, hopSamples: 256, sampleRateHz: 48000 })!;
    expect(a.snapshots).toBeGreaterThanOrEqual(2 * M);
    expect(Number(await page.getByTestId('advisor-suggestion').getAttribute('data-tau'))).toBe(filled);
    // Filled, not applied.
    expect((await processing()).derived.tauS).toBeCloseTo(0.02, 9);
    const answered = page.waitForResponse((r) => r.url().endsWith('/api/processing') && r.request().method() === 'PATCH');
    await page.getByTestId('button-apply-tau').click();
    expect((await answered).status()).toBe(200);
    await expect.poll(async () => (await processing()).derived.tauS, { timeout: 10_000 }).toBeCloseTo(filled, 9);
    await expect.poll(async () => page.getByTestId('advisor-warning').count(), { timeout: 10_000 }).toBe(0);
    expect(await field().inputValue()).toBe(await shownTau());
    // The deliberate refusal above logs its 400 in the console; nothing else may.
    expect(problems.filter((p) => !/status of 400/.test(p))).toEqual([]);
  });
});
