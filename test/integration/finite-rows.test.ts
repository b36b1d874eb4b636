/**
 * Absurd or degenerate but possible input never blinds the spectra or stops a worker: a row never
 * carries a non-finite value. A silent array (all-zero samples: a muted converter, a zero-filled
 * gap after a covariance reset) has R = 0 in every bin, where MVDR is undefined (R + δI does not
 * factor for relative loading; the WNG search needs tr R > 0): those bins are flagged and read as
 * no power. A loading of 1.7e308 is refused; a covariance corrupted to NaN is left out of the row,
 * counted, and restarted.
 */
import { createSocket } from 'node:dgram';
import { afterEach, describe, expect, it } from 'vitest';
import WebSocket from 'ws';
import type { Service } from '../../server/service.ts';
import { encodeFrame } from '../../shared/frame.ts';
import { decodeRow, type SpectrumRow } from '../../shared/messages.ts';
import { startTestService, waitFor } from '../helpers/service.ts';

const N = 480;
let svc: Service | null = null;
const sockets: { close(): void }[] = [];
afterEach(async () => {
  for (const s of sockets.splice(0)) s.close();
  await svc?.close();
  svc = null;
});

function rows(s: Service): SpectrumRow[] {
  const got: SpectrumRow[] = [];
  const ws = new WebSocket(`${s.url.replace(/^http/, 'ws')}/api/live`);
  sockets.push(ws);
  ws.on('message', (d, bin) => {
    if (bin) got.push(decodeRow(new Uint8Array(d as Buffer)));
  });
  return got;
}

/** Send `frames` frames of 4 channels from `from` on; `fill(k, i, c)` gives the sample. */
async function send(s: Service, from: number, frames: number, fill: (k: number, i: number, c: number) => number): Promise<void> {
  const udp = createSocket('udp4');
  const x = new Float32Array(4 * N);
  for (let k = from; k < from + frames; k++) {
    for (let i = 0; i < N; i++) for (let c = 0; c < 4; c++) x[i * 4 + c] = fill(k, i, c);
    const f = encodeFrame({ streamId: 1, sequence: k, firstSample: k * N, sampleRateHz: 48000, channels: 4, samplesPerChannel: N, encoding: 'float32' }, x);
    await new Promise<void>((r) => udp.send(f, s.udpPort!, '127.0.0.1', () => r()));
    if (k % 20 === 19) await new Promise((r) => setTimeout(r, 5));
  }
  udp.close();
  await waitFor(() => s.bus.status().samples >= (from + frames) * N, 10_000, 'the frames');
}

const finite = (r: SpectrumRow) => [...(r.mvdrDb ?? []), ...(r.conventionalDb ?? [])].every(Number.isFinite);
const tone = (k: number, i: number, c: number) => 0.1 * Math.sin(2 * Math.PI * 1500 * ((k * N + i) / 48000) + 0.9 * c) + 0.001 * Math.sin(7.7 * (k * N + i) + c);

describe('rows stay finite', () => {
  it('a silent array (all-zero samples) is scanned in every loading mode, with a beam, without a worker failing', async () => {
    svc = await startTestService({ engine: { workers: 2 } });
    const s = svc;
    const got = rows(s);
    const beam = await fetch(`${s.url}/api/beams`, { method: 'POST', headers: { 'content-type': 'application/json' }, body: '{"azimuthDeg":30}' });
    expect(beam.status).toBe(200);
    let from = 0;
    for (const loading of [{ mode: 'relative', ratio: 0.01 }, { mode: 'wng', floorDb: 3 }, { mode: 'relative-db', db: -20 }]) {
      const r = await fetch(`${s.url}/api/processing`, { method: 'PATCH', headers: { 'content-type': 'application/json' }, body: JSON.stringify({ loading }) });
      expect(r.status).toBe(200);
      const before = s.engine.rows;
      await send(s, from, 100, () => 0);
      from += 100;
      await waitFor(() => s.engine.rows >= before + 5, 20_000, `rows of silence with ${loading.mode} loading`);
    }
    const st = s.status().engine as { workerRestarts: number; flaggedBins: { singular: number; nonFinite: number } };
    expect(st.workerRestarts).toBe(0);
    // Every scanned bin of every row was singular: R = 0 throughout.
    expect(st.flaggedBins.singular).toBeGreaterThan(0);
    expect(st.flaggedBins.nonFinite).toBe(0);
    expect(got.length).toBeGreaterThan(10);
    expect(got.every(finite)).toBe(true);
    // No power anywhere: the rows read the −300 dB floor, not a made-up level.
    expect(Math.max(...got.at(-1)!.mvdrDb!)).toBe(-300);
    // Sound after the silence is scanned as usual.
    const n = got.length;
    await send(s, from, 200, tone);
    await waitFor(() => got.length >= n + 10, 20_000, 'rows with sound');
    expect(Math.max(...got.at(-1)!.mvdrDb!)).toBeGreaterThan(-60);
    expect((s.status().engine as { workerRestarts: number }).workerRestarts).toBe(0);
  }, 90_000);

  it('a fixed loading that would overflow (1.7e308) is refused; the largest allowed keeps rows finite', async () => {
    svc = await startTestService();
    const s = svc;
    const patch = (body: unknown) => fetch(`${s.url}/api/processing`, { method: 'PATCH', headers: { 'content-type': 'application/json' }, body: JSON.stringify(body) });
    const refused = await patch({ loading: { mode: 'fixed', delta: 1.7e308 } });
    expect(refused.status).toBe(400);
    expect(await refused.json()).toEqual({ error: { code: 'ERR_HTTP_VALIDATION', message: 'loading: delta must be in 0…1000000000000, got 1.7e+308', statusCode: 400 } });
    expect((await patch({ loading: { mode: 'fixed', delta: 1e12 } })).status).toBe(200);
    const got = rows(s);
    await send(s, 0, 150, tone);
    await waitFor(() => got.length >= 5, 20_000, 'rows');
    expect(got.every(finite)).toBe(true);
    // With δ far above R, MVDR tends to δ/M per bin in every direction (R_L ≈ δI): a flat, finite row.
    const last = got.at(-1)!.mvdrDb!;
    expect(Math.max(...last) - Math.min(...last)).toBeLessThan(0.01);
  }, 90_000);

  it('a covariance corrupted to NaN is left out of the row, counted, and restarted', async () => {
    svc = await startTestService({ engine: { workers: 2 } });
    const s = svc;
    const got = rows(s);
    await send(s, 0, 100, tone);
    await waitFor(() => got.length >= 3, 20_000, 'rows before');
    s.engine.poisonWorker(0);
    const n = got.length;
    await send(s, 100, 200, tone);
    await waitFor(() => got.length >= n + 10, 20_000, 'rows after');
    const st = s.status().engine as { workerRestarts: number; flaggedBins: { nonFinite: number; covarianceRestarts: number; rowValuesNotFinite: number } };
    expect(st.flaggedBins.nonFinite).toBeGreaterThanOrEqual(1);
    expect(st.flaggedBins.covarianceRestarts).toBeGreaterThanOrEqual(1);
    expect(st.flaggedBins.rowValuesNotFinite).toBe(0);
    expect(st.workerRestarts).toBe(0);
    expect(got.every(finite)).toBe(true);
  }, 90_000);
});
