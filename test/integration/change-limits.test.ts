/**
 * A parameter change whose plan cannot be built must be answered, not hang the server: the default
 * configuration (built-in scene, ring-24) asked for FFT 4096 and a 0.02° azimuth grid (17 951
 * directions) passes the field checks but needs far more steering-table memory than a worker may
 * take. Refused 4xx naming the limit; the plan in force keeps running; later changes, resets and
 * beams work.
 */
import { mkdtempSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterEach, describe, expect, it } from 'vitest';
import { loadConfig } from '../../server/config/load.ts';
import { startService, type Service } from '../../server/service.ts';
import { waitFor } from '../helpers/service.ts';

let svc: Service | null = null;
afterEach(async () => {
  await svc?.close();
  svc = null;
});

async function start(layer: Record<string, unknown> = {}): Promise<Service> {
  const loaded = await loadConfig({
    env: {},
    layers: [{ server: { httpPort: 0 }, engine: { workers: 2 }, data: { dir: mkdtempSync(join(tmpdir(), 'nullsteer-data-')) } }, layer],
  });
  return startService(loaded);
}

const HUGE = { fftSize: 4096, grid: { azimuthDeg: { startDeg: 0, stopDeg: 359, stepDeg: 0.02 } } };

/** A REST call that gives up after `ms` instead of hanging the test with the server. */
async function call(s: Service, method: string, path: string, body?: unknown, ms = 40_000): Promise<{ status: number; json: any }> {
  const res = await fetch(`${s.url}${path}`, {
    method,
    headers: method === 'GET' ? {} : { 'content-type': 'application/json' },
    body: body === undefined ? undefined : JSON.stringify(body),
    signal: AbortSignal.timeout(ms),
  });
  const text = await res.text();
  return { status: res.status, json: text ? JSON.parse(text) : null };
}

describe('changes the engine cannot plan', () => {
  it('an oversized grid is refused 422 naming the limit; the old plan keeps running; later changes and beams work', async () => {
    svc = await start();
    const s = svc;
    await waitFor(() => s.engine.rows >= 5, 20_000, 'rows before');
    const before = (await call(s, 'GET', '/api/processing')).json;

    const t0 = performance.now();
    const refused = await call(s, 'PATCH', '/api/processing', HUGE);
    console.log(`oversized change (17 951 directions, FFT 4096) answered ${refused.status} in ${(performance.now() - t0).toFixed(1)} ms`);
    expect(refused.status).toBe(422);
    expect(refused.json.error.code).toBe('ERR_HTTP_PLAN_TOO_LARGE');
    // 4096-point FFT at 48 kHz: bins 26–512 of the 300–6000 Hz band (487), 17 951 directions,
    // 24 sensors, 16 bytes per complex steering value, three tables per worker (plain, and one per
    // fast kernel): about 9.4 GiB. The message names the need and the configured limit.
    expect(refused.json.error.message).toMatch(/^grid, fftSize: 17951 directions × 487 bins × 24 sensors need \d+ MiB of plan memory \(steering tables and their fast-kernel copies, snapshot ring, results\) over 2 workers; at most 1024 MiB in all \(engine\.maxPlanMiB\)$/);
    expect(refused.json.error.statusCode).toBe(422);
    // At least the three tables: 3 × 487 × 17 951 × 24 × 16 B = 9 604 MiB.
    expect(Number(/need (\d+) MiB/.exec(refused.json.error.message)![1])).toBeGreaterThanOrEqual(Math.floor((3 * 487 * 17951 * 24 * 16) / 2 ** 20));

    // Nothing changed; rows go on with the old grid.
    expect((await call(s, 'GET', '/api/processing')).json).toEqual(before);
    const rows = s.engine.rows;
    await waitFor(() => s.engine.rows >= rows + 5, 20_000, 'rows after the refusal');
    expect(s.engine.grid.count).toBe(360);

    // The queue is free: a change, a reset and a beam are answered at once.
    const tau = await call(s, 'PATCH', '/api/processing', { tauS: 0.3 });
    expect(tau.status).toBe(200);
    expect(tau.json.derived.tauS).toBeCloseTo(0.3, 9);
    expect((await call(s, 'POST', '/api/processing/reset')).status).toBe(204);
    const beam = await call(s, 'POST', '/api/beams', { azimuthDeg: 35 });
    expect(beam.status).toBe(200);
    const rows2 = s.engine.rows;
    const samples = s.bus.status().samples;
    await waitFor(() => s.engine.rows >= rows2 + 10, 20_000, 'rows with a beam');
    const st = (await call(s, 'GET', '/api/status')).json;
    expect(st.timeline.samples).toBeGreaterThan(samples);
    expect(st.timeline.subscriberErrors).toBe(0);
    // A refused change is not a change: nothing journaled for it.
    const kinds = (await call(s, 'GET', '/api/journal')).json.entries.map((e: { kind: string }) => e.kind);
    expect(kinds).toEqual(['processing', 'reset', 'beam-add']);
  }, 90_000);

  it("a worker's refusal while building a plan is answered 422 with its reason; the old plan keeps running", async () => {
    svc = await start();
    const s = svc;
    await waitFor(() => s.engine.rows >= 5, 20_000, 'rows before');
    // What a worker says when it cannot build its part (e.g. memory it cannot get), injected.
    s.engine.faultNextPlan(1, 'refuse', 'RangeError: out of memory for the steering table');
    const refused = await call(s, 'PATCH', '/api/processing', { fftSize: 1024 });
    expect(refused.status).toBe(422);
    expect(refused.json).toEqual({ error: { code: 'ERR_HTTP_PLAN_REFUSED', message: 'fftSize: the bin workers could not build the plan: RangeError: out of memory for the steering table', statusCode: 422 } });
    expect(s.engine.params.fftSize).toBe(512);
    const rows = s.engine.rows;
    await waitFor(() => s.engine.rows >= rows + 5, 20_000, 'rows after the refusal');
    // The other worker built its part and dropped it: the next try builds a whole plan.
    expect((await call(s, 'PATCH', '/api/processing', { fftSize: 1024 })).status).toBe(200);
    const rows2 = s.engine.rows;
    await waitFor(() => s.engine.rows >= rows2 + 5, 20_000, 'rows after a good re-plan');
    expect(s.engine.params.fftSize).toBe(1024);
    expect(s.engine.hop).toBe(512);
    expect((s.status().engine as { workerRestarts: number }).workerRestarts).toBe(0);
  }, 90_000);
});
