/** LiveHub over real sockets on 127.0.0.1, with plain `ws` clients. */
import { createServer, type Server } from 'node:http';
import type { AddressInfo } from 'node:net';
import type { Socket } from 'node:net';
import { afterEach, describe, expect, it } from 'vitest';
import WebSocket from 'ws';
import { HARD_LIMIT_FACTOR, LIVE_DEFAULTS, LIVE_ERRORS, LiveHub, type LiveHubOptions } from '../../server/http/hub.ts';
import { attachUpgrades } from '../../server/ingest/websocket.ts';
import { decodeRow, encodeRow, MESSAGES_VERSION, parseServerMessage, type SpectrumRow } from '../../shared/messages.ts';

const sleep = (ms: number) => new Promise<void>((r) => setTimeout(r, ms));

async function until(pred: () => boolean, ms = 5000, what = 'condition'): Promise<void> {
  const end = Date.now() + ms;
  while (!pred()) {
    if (Date.now() > end) throw new Error(`timed out waiting for ${what}`);
    await sleep(5);
  }
}

interface Peer {
  ws: WebSocket;
  binary: Buffer[];
  text: string[];
  closed: Promise<{ code: number; reason: string }>;
  /** Resolves with the next message (binary or text) after the call. */
  next(): Promise<void>;
}

const cleanups: (() => Promise<void> | void)[] = [];
afterEach(async () => {
  while (cleanups.length) await cleanups.pop()!();
});

async function setup(opts: LiveHubOptions = {}): Promise<{ hub: LiveHub; url: string; server: Server }> {
  const hub = new LiveHub(opts);
  const server = createServer((_req, res) => res.writeHead(404).end());
  attachUpgrades(server, [hub]);
  await new Promise<void>((r) => server.listen(0, '127.0.0.1', r));
  const url = `ws://127.0.0.1:${(server.address() as AddressInfo).port}${hub.path}`;
  cleanups.push(async () => {
    await hub.close();
    await new Promise<void>((r) => server.close(() => r()));
  });
  return { hub, url, server };
}

async function connect(url: string): Promise<Peer> {
  const ws = new WebSocket(url);
  const binary: Buffer[] = [];
  const text: string[] = [];
  let waiters: (() => void)[] = [];
  ws.on('message', (data, isBinary) => {
    if (isBinary) binary.push(data as Buffer);
    else text.push(String(data));
    const w = waiters;
    waiters = [];
    for (const f of w) f();
  });
  const closed = new Promise<{ code: number; reason: string }>((r) => ws.on('close', (code, reason) => r({ code, reason: String(reason) })));
  await new Promise<void>((resolve, reject) => {
    ws.once('open', () => resolve());
    ws.once('error', reject);
  });
  cleanups.push(() => ws.terminate());
  return { ws, binary, text, closed, next: () => new Promise<void>((r) => waiters.push(r)) };
}

/** Try to connect where the server refuses the upgrade; the HTTP status it answered. */
function refusedStatus(url: string): Promise<number> {
  const ws = new WebSocket(url);
  ws.on('error', () => undefined);
  return new Promise<number>((resolve) =>
    ws.on('unexpected-response', (req, res) => {
      resolve(res.statusCode ?? 0);
      res.resume();
      req.destroy();
    }),
  );
}

function row(seq: number, nAz = 181, nEl = 1): SpectrumRow {
  const d = nAz * nEl;
  const conv = new Float32Array(d).map((_, i) => -i / 10 - seq);
  const mvdr = new Float32Array(d).map((_, i) => -i / 5 - seq);
  return {
    seq,
    sampleIndex: 256 * (seq + 1) - 1,
    emittedAtMs: Date.now(),
    shedStep: 0,
    normalised: false,
    nAz,
    nEl,
    conventionalDb: conv,
    mvdrDb: mvdr,
    peaks: { conventional: [{ azimuthDeg: 10, elevationDeg: 0, levelDb: -1 }], mvdr: [] },
  };
}

describe('LiveHub', () => {
  it('has a close-code catalogue in one shape, and the documented defaults', () => {
    for (const [code, e] of Object.entries(LIVE_ERRORS)) {
      expect(code).toMatch(/^ERR_LIVE_[A-Z_]+$/);
      expect(typeof e.reason).toBe('string');
      expect(Buffer.byteLength(e.reason)).toBeLessThanOrEqual(123); // a close reason's limit
      const status = 'closeCode' in e ? e.closeCode : e.httpStatus;
      expect(status).toBeGreaterThanOrEqual('closeCode' in e ? 1000 : 400);
    }
    expect(LIVE_ERRORS.ERR_LIVE_SLOW_CLIENT.closeCode).toBe(1013);
    const hub = new LiveHub();
    cleanups.push(() => hub.close());
    expect([hub.path, hub.maxClients, hub.maxBufferedBytes, hub.hardBufferedBytes, hub.queueRows, hub.slowClientTimeoutMs]).toEqual(['/api/live', 32, 1 << 20, (1 << 20) * HARD_LIMIT_FACTOR, 64, 5000]);
    expect(LIVE_DEFAULTS.path).toBe('/api/live');
    expect(() => new LiveHub({ maxClients: 0 })).toThrow(RangeError);
  });

  it('greets each new client through onConnect and sends every client the same row bytes', async () => {
    const { hub, url } = await setup();
    hub.onConnect = (c) =>
      c.sendJson({
        type: 'hello',
        version: MESSAGES_VERSION,
        grid: { nAz: 181, nEl: 1, azimuthDeg: Array.from({ length: 181 }, (_, i) => i), elevationDeg: [0] },
        params: {
          lambda: 0.99,
          loading: { mode: 'relative', ratio: 0.01 },
          bandHz: [300, 6000],
          grid: { azimuthDeg: { startDeg: 0, stopDeg: 180, stepDeg: 1 } },
          methods: ['conventional', 'mvdr'],
          spectrumRateHz: 20,
          normalise: false, fftSize: 512,
        },
        array: { name: `client ${c.id}`, positions: [[0, 0, 0]] },
      });
    const a = await connect(url);
    const b = await connect(url);
    await until(() => a.text.length === 1 && b.text.length === 1, 5000, 'hello');
    const ha = parseServerMessage(a.text[0]);
    expect(ha.type).toBe('hello');
    expect(ha.type === 'hello' && ha.array.name).toBe('client 1');
    expect(hub.stats().clients).toBe(2);

    const rows = [row(0), row(1, 72, 19), row(2)];
    for (const r of rows) hub.broadcastRow(r);
    hub.broadcastJson({ type: 'status', emittedAtMs: 1, status: { ok: true } });
    await until(() => a.binary.length === 3 && b.binary.length === 3 && a.text.length === 2 && b.text.length === 2, 5000, 'rows');
    for (let i = 0; i < rows.length; i++) {
      const expected = Buffer.from(encodeRow(rows[i]));
      expect(a.binary[i].equals(expected)).toBe(true);
      expect(b.binary[i].equals(expected)).toBe(true);
      const d = decodeRow(new Uint8Array(a.binary[i].buffer, a.binary[i].byteOffset, a.binary[i].byteLength));
      expect(d.seq).toBe(i);
      expect([d.nAz, d.nEl]).toEqual([rows[i].nAz, rows[i].nEl]);
      expect(Array.from(d.mvdrDb!)).toEqual(Array.from(rows[i].mvdrDb!));
    }
    expect(parseServerMessage(b.text[1])).toEqual({ type: 'status', emittedAtMs: 1, status: { ok: true } });
    const rowBytes = rows.reduce((s, r) => s + encodeRow(r).byteLength, 0);
    const s = hub.stats();
    expect(s).toMatchObject({ clients: 2, rowsBroadcast: 3, rowsSent: 6, rowsDropped: 0, messagesSent: 4 });
    expect(s.bytesSent).toBe(2 * rowBytes + Buffer.byteLength(a.text[0]) + Buffer.byteLength(b.text[0]) + 2 * Buffer.byteLength(a.text[1]));
  });

  it('drops rows for a client that stops reading, never for a fast one, and closes the stalled one with 1013', async () => {
    const { hub, url } = await setup({ maxBufferedBytes: 256 * 1024, queueRows: 4, slowClientTimeoutMs: 300 });
    const fast = await connect(url);
    const slow = await connect(url);
    await until(() => hub.stats().clients === 2);
    const [fastId, slowId] = hub.clientStats().map((c) => c.id);
    ((slow.ws as unknown as { _socket: Socket })._socket).pause();

    // 10 000 × 2 directions, both methods: ~160 kB a row. The kernel's socket buffers take a few MB
    // before the server's bufferedAmount grows at all, so keep going until the slow one drops rows.
    let sent = 0;
    let slowDropped = 0;
    while (slowDropped < 5) {
      if (sent > 400) throw new Error('the paused client never had rows dropped');
      const got = fast.next();
      hub.broadcastRow(row(sent++, 10000, 2));
      await got;
      const s = hub.clientStats().find((c) => c.id === slowId);
      if (!s) break; // closed already (a slow machine): its drops are in the totals
      slowDropped = s.rowsDropped;
    }
    expect(fast.binary.length).toBe(sent);
    expect(fast.binary.map((b) => b.readUInt32LE(8))).toEqual(Array.from({ length: sent }, (_, i) => i));
    const fastStats = hub.clientStats().find((c) => c.id === fastId)!;
    expect(fastStats).toMatchObject({ rowsSent: sent, rowsDropped: 0 });
    const total = hub.stats();
    expect(total.rowsDropped).toBeGreaterThanOrEqual(5);
    // Every row offered to the slow one was sent, is waiting in its queue, or was dropped from it.
    const slowNow = hub.clientStats().find((c) => c.id === slowId);
    if (slowNow) {
      expect(slowNow.queued).toBe(4); // queueRows, full: each further row pushes out the oldest
      expect(total.rowsSent + total.rowsDropped + slowNow.queued).toBe(2 * sent);
    }

    // Paused for longer than slowClientTimeoutMs: closed. The close frame is queued behind the
    // buffered rows, so the client sees it once it reads again.
    await until(() => hub.stats().closedSlow === 1, 5000, 'the slow client to be closed');
    expect(hub.stats().clients).toBe(1);
    ((slow.ws as unknown as { _socket: Socket })._socket).resume();
    expect(await slow.closed).toEqual({ code: 1013, reason: LIVE_ERRORS.ERR_LIVE_SLOW_CLIENT.reason });
    expect(slow.binary.length).toBe(total.rowsSent - sent); // every row it was sent arrived, in order
    expect(slow.binary.map((b) => b.readUInt32LE(8))).toEqual(Array.from({ length: slow.binary.length }, (_, i) => i));

    // The fast client carries on.
    const got = fast.next();
    hub.broadcastRow(row(sent, 10, 1));
    await got;
    expect(fast.binary.length).toBe(sent + 1);
    expect(fast.ws.readyState).toBe(WebSocket.OPEN);
  });

  it('a backlogged client that catches up gets the newest rows in order: the oldest queued were dropped, JSON kept in place', async () => {
    const { hub, url } = await setup({ maxBufferedBytes: 64 * 1024, queueRows: 3, slowClientTimeoutMs: 4000 });
    const fast = await connect(url);
    const slow = await connect(url);
    await until(() => hub.stats().clients === 2);
    const slowId = hub.clientStats()[1].id;
    const sock = (slow.ws as unknown as { _socket: Socket })._socket;
    sock.pause();
    let sent = 0;
    const queued = () => hub.clientStats().find((c) => c.id === slowId)!.queued;
    while (queued() === 0) {
      if (sent > 400) throw new Error('the paused client never queued');
      const got = fast.next();
      hub.broadcastRow(row(sent++, 10000, 2));
      await got;
    }
    const direct = sent - 1; // rows 0 … direct-1 went to its socket; row `direct` is the first queued
    for (let k = 0; k < 3; k++) hub.broadcastRow(row(sent++, 10000, 2));
    hub.broadcastJson({ type: 'status', emittedAtMs: 7, status: { marker: true } });
    for (let k = 0; k < 4; k++) hub.broadcastRow(row(sent++, 10000, 2));
    const st = hub.clientStats().find((c) => c.id === slowId)!;
    expect(st.queued).toBe(4); // 3 rows (the newest) and the JSON message
    expect(st.rowsDropped).toBe(5); // 8 rows queued, 3 kept
    sock.resume();
    await until(() => slow.binary.length === direct + 3, 5000, 'the queue to be flushed');
    const seqs = slow.binary.map((b) => b.readUInt32LE(8));
    expect(seqs).toEqual([...Array.from({ length: direct }, (_, i) => i), sent - 3, sent - 2, sent - 1]);
    expect(slow.text.map((t) => JSON.parse(t).emittedAtMs)).toEqual([7]);
    expect(fast.binary.length).toBe(sent);
    expect(hub.clientStats().find((c) => c.id === slowId)).toMatchObject({ queued: 0, rowsDropped: 5 });
    expect(hub.stats()).toMatchObject({ rowsDropped: 5, closedSlow: 0 });
  });

  it('answers an upgrade beyond maxClients with HTTP 503, and admits again once one leaves', async () => {
    const { hub, url } = await setup({ maxClients: 2 });
    const a = await connect(url);
    await connect(url);
    const status = await refusedStatus(url);
    expect(status).toBe(503);
    expect(hub.stats()).toMatchObject({ clients: 2, refusedFull: 1 });
    a.ws.close();
    await a.closed;
    await until(() => hub.stats().clients === 1);
    await connect(url);
    expect(hub.stats().clients).toBe(2);
  });

  it('refuses other paths (404 through attachUpgrades)', async () => {
    const { url } = await setup();
    const status = await refusedStatus(url.replace('/api/live', '/api/other'));
    expect(status).toBe(404);
  });

  it('ignores text from clients (counted), closes on binary with 1003 and on oversize with 1009', async () => {
    const { hub, url } = await setup({ maxIncomingBytes: 1024 });
    const a = await connect(url);
    a.ws.send('hello server');
    a.ws.send('{"type":"subscribe"}');
    await until(() => hub.stats().messagesIgnored === 2);
    expect(a.ws.readyState).toBe(WebSocket.OPEN);

    const b = await connect(url);
    b.ws.send(Buffer.from([1, 2, 3]));
    expect(await b.closed).toEqual({ code: 1003, reason: LIVE_ERRORS.ERR_LIVE_BINARY.reason });

    const c = await connect(url);
    c.ws.send('x'.repeat(2048));
    expect((await c.closed).code).toBe(1009);
    await until(() => hub.stats().closedProtocol === 2);
    expect(hub.stats().clients).toBe(1);
  });

  it('close() says 1001 to every client and refuses new ones', async () => {
    const { hub, url } = await setup();
    const a = await connect(url);
    const b = await connect(url);
    await hub.close();
    expect((await a.closed).code).toBe(1001);
    expect((await b.closed).code).toBe(1001);
    const status = await refusedStatus(url);
    expect(status).toBe(503);
    await hub.close(); // idempotent
  });

  it('a throwing onConnect closes that client with 1011 and leaves the hub running', async () => {
    const { hub, url } = await setup({
      onConnect: () => {
        throw new Error('boom');
      },
    });
    const a = await connect(url);
    expect((await a.closed).code).toBe(1011);
    hub.onConnect = null;
    const b = await connect(url);
    hub.broadcastRow(row(0));
    await until(() => b.binary.length === 1);
  });
});
