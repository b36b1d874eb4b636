/**
 * The Input panel and the status strip in a real browser (Debian's chromium driven by
 * playwright-core, headless, loopback only) against a real server with a network source and the
 * 4-channel square-4 array: nothing arriving, then frames the array cannot use, then a good sender,
 * then a second one chosen by hand. Frames go over the WebSocket ingest (a stream socket: nothing
 * lost on a loaded machine). Assertions are on the server's own counters and status and on the
 * page's text, with generous condition waits; never on how fast anything happened.
 *
 * With NULLSTEER_E2E_SCREENSHOTS set to a folder, the panel's picture is written there
 * (input-panel.png) for a person to look at.
 */
import { join } from 'node:path';
import { type Browser, type Page } from 'playwright-core';
import { afterAll, beforeAll, describe, expect, it, vi } from 'vitest';
import WebSocket from 'ws';
import { encodeFrame } from '../../shared/frame.ts';
import type { Service } from '../../server/service.ts';
import { browserAvailable, launchBrowser, openDashboard } from '../helpers/browser.ts';
import { getStatus, sleep, startTestService, waitFor } from '../helpers/service.ts';

vi.setConfig({ testTimeout: 90_000 });

const FS = 48000;
const N = 480; // 10 ms frames
/** The channel count of test/fixtures/arrays/square-4.json (startTestService's array). */
const M = 4;

function frame(streamId: number, seq: number, first: number, channels = M): Uint8Array {
  const x = new Float32Array(channels * N);
  for (let i = 0; i < x.length; i++) x[i] = 0.1 * Math.sin(0.01 * (first * channels + i));
  return encodeFrame({ streamId, sequence: seq, firstSample: first, sampleRateHz: FS, channels, samplesPerChannel: N, encoding: 'float32' }, x);
}

/** An ingest socket; `localAddress` is its own end as the server sees it ("127.0.0.1:PORT"). */
async function ingestSocket(url: string): Promise<{ ws: WebSocket; localAddress: string }> {
  const ws = new WebSocket(`${url.replace('http', 'ws')}/ingest`);
  let localAddress = '';
  ws.once('upgrade', (res) => (localAddress = `${res.socket.localAddress}:${res.socket.localPort}`));
  await new Promise<void>((resolve, reject) => ws.once('open', () => resolve()).once('error', reject));
  return { ws, localAddress };
}

/** A sender of good frames paced at about real time on its own socket until stopped. */
async function sender(url: string, streamId: number, first: number) {
  const { ws, localAddress } = await ingestSocket(url);
  let k = 0;
  let running = true;
  const done = (async () => {
    const t0 = Date.now();
    while (running) {
      ws.send(frame(streamId, k, first + k * N));
      k++;
      await sleep(Math.max(0, t0 + (k * N * 1000) / FS - Date.now()));
    }
    ws.close();
  })();
  return {
    localAddress,
    get frames() {
      return k;
    },
    async stop() {
      running = false;
      await done;
    },
  };
}

type Sender = Awaited<ReturnType<typeof sender>>;

let svc: Service | null = null;
let browser: Browser;
let page: Page;
const senders: Sender[] = [];
const problems: string[] = [];

const text = async (testId: string) => ((await page.getByTestId(testId).first().textContent()) ?? '').trim();

describe.skipIf(!browserAvailable)('the Input panel against a network source', () => {
  beforeAll(async () => {
    svc = await startTestService({ input: { eligibleAfterMs: 100 } });
    browser = await launchBrowser();
    page = await openDashboard(browser, svc.url, problems, { width: 1280, height: 800 });
    await page.getByTestId('connection').filter({ hasText: 'online' }).waitFor({ timeout: 20_000 });
  }, 60_000);

  afterAll(async () => {
    for (const s of senders) await s.stop();
    await browser?.close();
    await svc?.close();
  });

  it('says "waiting for frames" in the panel and the strip while nothing has arrived', async () => {
    expect((await getStatus(svc!)).input).toMatchObject({ waiting: true, selectedStreamId: null });
    await page.getByTestId('input-waiting').waitFor({ timeout: 20_000 });
    expect(await text('input-waiting')).toBe('waiting for frames');
    expect(await text('strip-input-waiting')).toBe('waiting for frames');
    expect(await text('input-source')).toBe('network input');
    // No healthy-looking loss figures for a stream that is not there.
    expect(await page.getByTestId('frames-lost').count()).toBe(0);
    expect(await page.getByTestId('badge-input-refused').count()).toBe(0);
  });

  it('24-channel frames sent to the 4-channel array: counted by reason, the detail in plain words, "input refused" in the strip', async () => {
    const { ws } = await ingestSocket(svc!.url);
    const SENT = 12;
    for (let k = 0; k < SENT; k++) ws.send(frame(7, k, k * N, 24));
    await waitFor(async () => (await getStatus(svc!)).streams.find((s: { streamId: number }) => s.streamId === 7)?.rejected.channel_mismatch === SENT, 20_000, 'the server to count the refusals');
    const st = await getStatus(svc!);
    expect(st.ingest.lastRejected).toMatchObject({ reason: 'channel_mismatch', detail: '24-channel frames refused: the array has 4', streamId: 7 });
    expect(st.input.waiting).toBe(true);
    ws.close();

    const reason = page.locator('[data-testid="input-refused-reason"][data-reason="channel_mismatch"]');
    await expect.poll(() => reason.getAttribute('data-count'), { timeout: 20_000 }).toBe(String(SENT));
    expect(await reason.locator('span').allTextContents()).toEqual(['wrong channel count', String(SENT)]);
    expect(await text('input-refused-total')).toBe(String(SENT));
    expect(await text('input-last-refusal')).toBe('24-channel frames refused: the array has 4');
    // The strip: the red badge, still waiting, and no "lost 0 · gaps 0" as if all were well.
    await page.getByTestId('badge-input-refused').waitFor({ timeout: 20_000 });
    expect(await text('badge-input-refused')).toBe('input refused');
    expect(await page.getByTestId('badge-input-refused').evaluate((e) => getComputedStyle(e).backgroundColor)).toBe('rgb(224, 100, 93)'); // theme.ts bad #e0645d
    expect(await text('strip-input-waiting')).toBe('waiting for frames');
    expect(await page.getByTestId('frames-lost').count()).toBe(0);
    expect(await page.getByTestId('strip-stream-id').count()).toBe(0);
    const dir = process.env.NULLSTEER_E2E_SCREENSHOTS;
    if (dir) await page.screenshot({ path: join(dir, 'input-refused-page.png') });
    // The refused stream is listed with its count.
    expect(await page.locator('[data-testid="input-stream"][data-stream-id="7"]').textContent()).toMatch(/refused 12/);
  });

  it('a good sender: the panel shows the processed stream, transport websocket and its address; the refusal badge goes', async () => {
    const a = await sender(svc!.url, 5, 0);
    senders.push(a);
    await waitFor(async () => (await getStatus(svc!)).input.selectedStreamId === 5, 30_000, 'stream 5 processed');
    const st = await getStatus(svc!);
    expect(st.input.selected).toMatchObject({ streamId: 5, transport: 'websocket', remote: a.localAddress });
    await expect.poll(() => text('input-selected-id'), { timeout: 20_000 }).toBe('5');
    expect(await text('input-selected-transport')).toBe('websocket');
    // The sender's own end of its socket, as the operating system gave it.
    expect(await text('input-selected-remote')).toBe(a.localAddress);
    expect(await text('input-mode')).toBe('latest active (eligible after 100 ms, switch after 2 s silent)');
    await expect.poll(() => text('strip-stream-id'), { timeout: 20_000 }).toBe('5');
    await expect.poll(() => page.getByTestId('badge-input-refused').count(), { timeout: 20_000 }).toBe(0);
    expect(await page.getByTestId('input-waiting').count()).toBe(0);
    expect(await page.getByTestId('strip-input-waiting').count()).toBe(0);
    // The refusals stay counted in the panel.
    expect(await text('input-last-refusal')).toBe('24-channel frames refused: the array has 4');
  });

  it('a second sender chosen by hand in the panel: the server processes it', async () => {
    const b = await sender(svc!.url, 6, 1_000_000);
    senders.push(b);
    await waitFor(async () => (await getStatus(svc!)).streams.some((s: { streamId: number; framesAccepted: number }) => s.streamId === 6 && s.framesAccepted > 0), 20_000, 'stream 6 received');
    const choice = page.getByTestId('input-stream-choice');
    await expect.poll(() => choice.locator('option[value="6"]').count(), { timeout: 20_000 }).toBe(1);
    await choice.selectOption('6');
    await page.getByTestId('input-stream-switch').click();
    await waitFor(async () => (await getStatus(svc!)).input.selectedStreamId === 6, 20_000, 'stream 6 processed');
    expect((await getStatus(svc!)).input.lastSwitch).toMatchObject({ from: 5, to: 6, reason: 'manual' });
    await expect.poll(() => text('input-selected-id'), { timeout: 20_000 }).toBe('6');
    expect(await text('input-selected-remote')).toBe(b.localAddress);
    expect((await text('input-last-switch')).replace(/\s+/g, ' ')).toMatch(/^5 → 6 · chosen by hand · /);
    expect(await page.getByTestId('input-switch-error').count()).toBe(0);

    const dir = process.env.NULLSTEER_E2E_SCREENSHOTS;
    if (dir) await page.getByTestId('input-panel').screenshot({ path: join(dir, 'input-panel.png') });
    expect(problems).toEqual([]);
  });
});
