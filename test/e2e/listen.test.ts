/**
 * Listening to a beam in the dashboard, in a real browser (Debian's chromium via playwright-core,
 * headless, loopback only) against a server fed by the built-in simulator: the hearing caution
 * comes first, then the beam plays through the AudioWorklet. The worklet's own record of the
 * samples it received and played (before the volume) must equal, float32 for float32, what the
 * server sent for the same sample indices (a direct WebSocket listener in this test keeps them),
 * and no output sample may exceed the limiter's ceiling even with the beam turned up 40 dB past
 * full scale and the volume at 0 dB.
 */
import { mkdtempSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { type Browser, type Page } from 'playwright-core';
import { afterAll, beforeAll, describe, expect, it, vi } from 'vitest';
import { browserAvailable, launchBrowser } from '../helpers/browser.ts';
import { BeamSubscriber } from '../helpers/beam-subscriber.ts';
import { waitFor } from '../helpers/service.ts';
import { loadConfig } from '../../server/config/load.ts';
import { startService, type Service } from '../../server/service.ts';
import { dbToGain, float32AtMost } from '../../client/src/lib/peak-limiter.ts';
import { LISTEN_CEILING_DBFS } from '../../client/src/lib/beam-player-constants.ts';

vi.setConfig({ testTimeout: 60_000 });

let svc: Service | null = null;
let browser: Browser;
let page: Page;
let sub: BeamSubscriber | null = null;
const problems: string[] = [];
const json = { 'content-type': 'application/json' };

describe.skipIf(!browserAvailable)('listening to a beam in the dashboard', () => {
  beforeAll(async () => {
    const loaded = await loadConfig({ env: {}, layers: [{ server: { httpPort: 0 }, engine: { workers: 1 }, processing: { azimuthStepDeg: 2 }, outputs: { dir: mkdtempSync(join(tmpdir(), 'nullsteer-e2e-listen-rec-')) }, data: { dir: mkdtempSync(join(tmpdir(), 'nullsteer-e2e-listen-data-')) } }] });
    svc = await startService(loaded);
    // The autoplay policy is relaxed for this browser only; the dashboard asks for a click anyway.
    browser = await launchBrowser(['--autoplay-policy=no-user-gesture-required']);
    page = await browser.newPage({ viewport: { width: 1280, height: 900 } });
    page.on('console', (m) => {
      if (m.type() === 'error') problems.push(`console: ${m.text()}`);
    });
    page.on('pageerror', (e) => problems.push(`page: ${e.message}`));
  }, 60_000);

  afterAll(async () => {
    sub?.close();
    await browser?.close();
    await svc?.close();
  });

  it('shows the caution first, then plays the beam: the worklet got and played the server’s samples, and the output stays under the ceiling', async () => {
    // One beam, turned up 40 dB with its own limiter off: its samples go well past full scale.
    const add = await fetch(`${svc!.url}/api/beams`, { method: 'POST', headers: json, body: JSON.stringify({ azimuthDeg: 60, gainDb: 40, limiter: false }) });
    expect(add.status).toBe(200);
    const beam = await add.json();
    sub = new BeamSubscriber(`${svc!.url.replace(/^http/, 'ws')}/api/beams/audio`, 0);
    await sub.opened();
    await waitFor(() => sub!.frames > 10, 20_000, 'beam frames to the direct listener');

    await page.goto(`${svc!.url}/`);
    await page.getByTestId('connection').filter({ hasText: 'online' }).waitFor({ timeout: 15_000 });
    await page.getByTestId('beam-listen').first().click();
    // First use: the caution, and no sound before it is acknowledged.
    await page.getByTestId('listen-caution').waitFor({ timeout: 10_000 });
    expect(await page.getByTestId('listen-caution').textContent()).toMatch(/can be loud.*start low.*regulated where you are.*follow local law/s);
    expect(await page.evaluate(() => (globalThis as any).__beamPlayer ?? null)).toBeNull();
    await page.getByTestId('listen-acknowledge').click();
    expect(await page.evaluate(() => localStorage.getItem('nullsteer.listenCautionAcknowledged'))).toBe('yes');
    // The volume starts low.
    expect(Number(await page.getByTestId('listen-volume').inputValue())).toBe(-24);
    await page.getByTestId('listen-volume').fill('0');

    await waitFor(async () => (await page.evaluate(() => (globalThis as any).__beamPlayer?.record != null)) === true, 30_000, 'the worklet record');
    const hook = await page.evaluate(() => {
      const h = (globalThis as any).__beamPlayer;
      return { beamId: h.beamId, sampleRateHz: h.sampleRateHz, receivedFirstSample: h.record.receivedFirstSample, received: Array.from(h.record.received as Float32Array), playedFirstSample: h.record.playedFirstSample, played: Array.from(h.record.played as Float32Array) };
    });
    expect(hook.beamId).toBe(beam.id);
    expect(hook.sampleRateHz).toBe(48000);
    expect(hook.received.length).toBe(4096);
    expect(hook.played.length).toBeGreaterThanOrEqual(128); // at least one render quantum before any underrun
    // What the server sent for the same indices. Where it sent nothing (a jump in the stream: on
    // a loaded machine the simulated input can fall behind and jump), the page must have zeros of
    // exactly that length (its gap fill), and have counted them as gap samples.
    const compare = async (first: number, got: number[], what: string) => {
      await waitFor(() => sub!.window(first, got.length) !== null, 20_000, `the direct listener to pass ${what}`);
      const w = sub!.window(first, got.length)!;
      const expected = Array.from(w.values, (v, i) => (w.sent[i] ? v : 0));
      expect(got, what).toEqual(expected);
      return w.sent.reduce((a, b) => a + (b ? 0 : 1), 0);
    };
    const unsent = await compare(hook.receivedFirstSample, hook.received, 'the samples the worklet received');
    await compare(hook.playedFirstSample, hook.played, 'the samples the worklet played');
    if (unsent > 0) expect(await page.evaluate(() => (globalThis as any).__beamPlayer.gapSamples)).toBeGreaterThanOrEqual(unsent);
    expect(unsent).toBeLessThan(hook.received.length); // most of it is the server's samples

    // Let it play a little at 0 dB, then read the worklet's stats.
    await waitFor(async () => (await page.evaluate(() => (globalThis as any).__beamPlayer?.stats?.playedSamples ?? 0)) > 48000 * 0.5, 30_000, 'half a second played');
    const stats = await page.evaluate(() => (globalThis as any).__beamPlayer.stats);
    const ceiling = float32AtMost(dbToGain(LISTEN_CEILING_DBFS));
    expect(stats.ceiling).toBe(ceiling);
    expect(stats.maxAbsOut).toBeLessThanOrEqual(ceiling);
    // The beam is hot: what the server sent goes past the ceiling, and the limiter had to act.
    let peakSent = 0;
    for (let i = 0; i < sub.samples.length; i++) if (sub.have[i]) peakSent = Math.max(peakSent, Math.abs(sub.samples[i]));
    expect(peakSent).toBeGreaterThan(ceiling);
    expect(stats.limitedSamples).toBeGreaterThan(0);
    expect((await page.getByTestId('listen-status').textContent())!.trim()).toMatch(/^buffered \d+ ms · underruns \d+ · dropped \d+ ms · gaps \d+ · limit −6 dBFS$/);

    expect(stats.bufferedSamples).toBeLessThanOrEqual(Math.round(0.3 * 48000)); // the jitter buffer's capacity, 300 ms
    expect(stats.pushedSamples - stats.playedSamples - stats.droppedSamples).toBe(stats.bufferedSamples);

    await page.getByTestId('listen-stop').click();
    await expect.poll(() => page.getByTestId('listen-panel').getAttribute('data-state'), { timeout: 10_000 }).toBe('stopped');
    // The caution was acknowledged once: the next listen plays at once.
    await page.getByTestId('beam-listen').first().click();
    await expect.poll(() => page.getByTestId('listen-panel').getAttribute('data-state'), { timeout: 10_000 }).toBe('playing');
    expect(await page.getByTestId('listen-caution').count()).toBe(0);
    await page.getByTestId('beam-listen-stop').click();
    await expect.poll(() => page.getByTestId('listen-panel').getAttribute('data-state'), { timeout: 10_000 }).toBe('stopped');
    expect(problems).toEqual([]);
  }, 90_000);
});
