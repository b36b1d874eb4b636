/**
 * The processed stream over real sockets (input.select latest-active, the defaults: eligible after
 * 100 ms of consecutive frames, switch after 2 s of silence), and PUT /api/input/stream. Frames go
 * over the WebSocket ingest (a stream socket: nothing lost on a loaded machine). Timing is read
 * from the hub's own stamps (lastFrameAtS, lastSwitch.atS), never from the test's clock.
 */
import { afterEach, describe, expect, it, vi } from 'vitest';
import WebSocket from 'ws';
import { encodeFrame } from '../../shared/frame.ts';
import type { Service } from '../../server/service.ts';
import { collectBlocks, getStatus, sleep, startTestService, waitFor } from '../helpers/service.ts';

vi.setConfig({ testTimeout: 60_000 });

const FS = 48000;
const M = 4;
const N = 480; // 10 ms frames

function frame(streamId: number, seq: number, first: number): Uint8Array {
  const x = new Float32Array(M * N);
  for (let i = 0; i < x.length; i++) x[i] = 0.1 * Math.sin(0.01 * (first * M + i));
  return encodeFrame({ streamId, sequence: seq, firstSample: first, sampleRateHz: FS, channels: M, samplesPerChannel: N, encoding: 'float32' }, x);
}

/** A sender paced at about real time on its own socket until stopped. */
function sender(url: string, streamId: number, first: number) {
  const ws = new WebSocket(`${url.replace('http', 'ws')}/ingest`);
  let k = 0;
  let running = true;
  const opened = new Promise<void>((r, j) => ws.once('open', () => r()).once('error', j));
  const done = (async () => {
    await opened;
    const t0 = Date.now();
    while (running) {
      ws.send(frame(streamId, k, first + k * N));
      k++;
      const due = t0 + (k * N * 1000) / FS;
      await sleep(Math.max(0, due - Date.now()));
    }
    ws.close();
  })();
  return {
    get frames() {
      return k;
    },
    async stop() {
      running = false;
      await done;
    },
  };
}

let svc: Service | null = null;
afterEach(async () => {
  await svc?.close();
  svc = null;
});

const put = (url: string, body: unknown, headers: Record<string, string> = { 'content-type': 'application/json' }) => fetch(url, { method: 'PUT', headers, body: JSON.stringify(body) });

describe('processed stream selection over real sockets', () => {
  it('a stray datagram from another id first does not stop processing; a sender restarting under a new id is processed within switchAfterS + 0.5 s', async () => {
    svc = await startTestService({ input: { eligibleAfterMs: 100, switchAfterS: 2 } });
    const blocks = collectBlocks(svc);
    // The stray: one frame of id 99, far from anything.
    const stray = new WebSocket(`${svc.url.replace('http', 'ws')}/ingest`);
    await new Promise((r) => stray.once('open', r));
    stray.send(frame(99, 0, 77_000_000));
    await waitFor(async () => (await getStatus(svc!)).streams.some((s: { streamId: number }) => s.streamId === 99), 10_000, 'the stray frame');
    stray.close();
    const a = sender(svc.url, 5, 0);
    await waitFor(async () => (await getStatus(svc!)).input.selectedStreamId === 5, 20_000, 'stream 5 processed');
    await waitFor(() => blocks.filter((b) => b.streamId === 5).reduce((n, b) => n + b.frames, 0) >= 0.3 * FS, 20_000, 'stream 5 blocks');
    expect(blocks.some((b) => b.streamId === 99)).toBe(false);
    // From its very first sample: the 100 ms it waited to become eligible were processed, not dropped.
    expect(blocks.find((b) => b.streamId === 5)!.sampleIndex).toBe(0);
    await a.stop();
    // The sender restarts under a new id (a fresh random id, as `nullsteer send` now picks).
    const b = sender(svc.url, 6, 0);
    await waitFor(async () => (await getStatus(svc!)).input.selectedStreamId === 6, 30_000, 'stream 6 processed');
    const st = await getStatus(svc);
    const last5 = st.streams.find((s: { streamId: number }) => s.streamId === 5).lastFrameAtS;
    expect(st.input.lastSwitch).toMatchObject({ from: 5, to: 6, reason: 'silent' });
    expect(st.input.lastSwitch.atS - last5).toBeGreaterThanOrEqual(2);
    expect(st.input.lastSwitch.atS - last5).toBeLessThanOrEqual(2.5);
    await waitFor(() => blocks.some((x) => x.streamId === 6), 10_000, 'stream 6 blocks');
    expect(blocks.find((x) => x.streamId === 6)!.discontinuity).toBe(true);
    await b.stop();
    // The switch is in the journal (the first choice is not a change, status shows it).
    const j = await (await fetch(`${svc.url}/api/journal`)).json();
    const sw = j.entries.filter((e: { kind: string }) => e.kind === 'input-stream');
    expect(sw).toMatchObject([{ before: { streamId: 5 }, after: { streamId: 6 }, summary: 'stream 5 silent for 2 s: processing stream 6' }]);
  });

  it('PUT /api/input/stream switches by hand (journaled); unknown ids 404, bad bodies 400, no JSON type 415', async () => {
    svc = await startTestService({ input: { eligibleAfterMs: 100, switchAfterS: 60 } });
    const a = sender(svc.url, 5, 0);
    const b = sender(svc.url, 6, 1_000_000);
    await waitFor(async () => (await getStatus(svc!)).input.selectedStreamId !== null && a.frames > 30 && b.frames > 30, 20_000, 'both streams');
    const first = (await getStatus(svc)).input.selectedStreamId;
    const other = first === 5 ? 6 : 5;
    const r = await put(`${svc.url}/api/input/stream`, { streamId: other });
    expect(r.status).toBe(200);
    expect((await r.json()).selectedStreamId).toBe(other);
    expect((await getStatus(svc)).input).toMatchObject({ selectedStreamId: other, lastSwitch: { from: first, to: other, reason: 'manual' } });
    const j = await (await fetch(`${svc.url}/api/journal`)).json();
    expect(j.entries.at(-1)).toMatchObject({ kind: 'input-stream', before: { streamId: first }, after: { streamId: other }, summary: `processed stream set to ${other}` });
    const unknown = await put(`${svc.url}/api/input/stream`, { streamId: 4242 });
    expect(unknown.status).toBe(404);
    expect((await unknown.json()).error.message).toMatch(/no stream 4242 has been received; streams seen: (5, 6|6, 5)/);
    expect((await put(`${svc.url}/api/input/stream`, { streamId: -1 })).status).toBe(400);
    expect((await put(`${svc.url}/api/input/stream`, { streamId: 5, extra: 1 })).status).toBe(400);
    expect((await put(`${svc.url}/api/input/stream`, { streamId: 5 }, { 'content-type': 'text/plain' })).status).toBe(415);
    const input = await (await fetch(`${svc.url}/api/input`)).json();
    expect(input).toMatchObject({ source: 'network', mode: 'latest-active', selectedStreamId: other, waiting: false });
    expect(input.streams.map((s: { streamId: number }) => s.streamId).sort()).toEqual([5, 6]);
    await a.stop();
    await b.stop();
  });

  it('a network source with nothing received says it is waiting', async () => {
    svc = await startTestService({ input: { eligibleAfterMs: 100 } });
    const input = await (await fetch(`${svc.url}/api/input`)).json();
    expect(input).toMatchObject({ waiting: true, selectedStreamId: null, streams: [] });
  });
});
