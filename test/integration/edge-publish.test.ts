/**
 * Edge publishing on a real broker (test/helpers/nats-server.ts: Debian's nats-server with
 * JetStream): a service with the built-in simulated scene and an array file with a pose publishes
 * rows, peaks, status and journal under nullsteer.SITE.NODE.*; every message parses with the site's
 * own parsers (shared/site.ts). The broker is killed and restarted: the engine keeps producing rows
 * throughout (its own counter), status says reconnecting with entries pending, and afterwards the
 * site's JetStream stream holds every durable entry of the edge's sequence, with the journal
 * changes made while the broker was away. JetStream keeps what it acknowledged across a restart of
 * a file-store server (the NATS documentation's guarantee, from memory; checked in nats-broker.test.ts).
 */
import { readFileSync, writeFileSync, mkdtempSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { connect, type NatsConnection, type Subscription } from '@nats-io/transport-node';
import { jetstream, jetstreamManager } from '@nats-io/jetstream';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { tryDecodeRow } from '../../shared/messages.ts';
import { parseJournalMessage, parseNodeStatus, parsePeakMessage, parseSiteSubject, siteStreamName, wrap360, type JournalMessage, type NodeStatusMessage, type PeakMessage } from '../../shared/site.ts';
import { EDGE_RUN_HEADER, EDGE_SEQ_HEADER } from '../../server/cluster/edge-publisher.ts';
import type { Service } from '../../server/service.ts';
import { freePort, natsAvailable, startBroker, type TestBroker } from '../helpers/nats-server.ts';
import { getStatus, startTestService, waitFor } from '../helpers/service.ts';

const SITE = 'yard';
const NODE = 'mast-1';
const HEADING_DEG = 30;

/** A copy of the demo ring with a pose on the site plan. */
function arrayWithPose(): string {
  const a = JSON.parse(readFileSync(new URL('../../config/arrays/ring-24.json', import.meta.url), 'utf8'));
  a.pose = { positionM: [12, -4, 2], headingDeg: HEADING_DEG };
  const file = join(mkdtempSync(join(tmpdir(), 'nullsteer-edge-')), 'ring-24-posed.json');
  writeFileSync(file, JSON.stringify(a));
  return file;
}

const post = (svc: Service, path: string) => fetch(`${svc.url}${path}`, { method: 'POST', headers: { 'content-type': 'application/json' }, body: '{}' });

describe.skipIf(!natsAvailable)('edge publishing on a real broker', () => {
  let broker: TestBroker;
  let svc: Service;
  let nc: NatsConnection;
  let sub: Subscription;
  const got = { rows: [] as Uint8Array[], peaks: [] as PeakMessage[], status: [] as NodeStatusMessage[], journal: [] as JournalMessage[], events: [] as { v: number; site: string; node: string; change: string; event: { id: string; rule: string } }[], bad: [] as string[] };

  beforeAll(async () => {
    broker = await startBroker();
    nc = await connect({ servers: broker.url, maxReconnectAttempts: -1, reconnectTimeWait: 200 });
    sub = nc.subscribe(`nullsteer.${SITE}.${NODE}.>`);
    void (async () => {
      for await (const m of sub) {
        const s = parseSiteSubject(m.subject);
        try {
          if (s?.kind === 'rows') {
            const r = tryDecodeRow(m.data);
            if (r.ok) got.rows.push(m.data);
            else got.bad.push(`rows: ${r.reason}`);
          } else if (s?.kind === 'peaks') got.peaks.push(parsePeakMessage(m.data));
          else if (s?.kind === 'status') got.status.push(parseNodeStatus(m.data));
          else if (s?.kind === 'journal') got.journal.push(parseJournalMessage(m.data));
          else if (s?.kind === 'events') got.events.push(JSON.parse(new TextDecoder().decode(m.data)));
          else got.bad.push(m.subject);
        } catch (e) {
          got.bad.push(`${m.subject}: ${(e as Error).message}`);
        }
      }
    })();
    svc = await startTestService({ source: { kind: 'simulator' }, array: { file: arrayWithPose() }, engine: { workers: 1 }, cluster: { natsUrl: broker.url, site: SITE, node: NODE } });
  }, 30_000);

  afterAll(async () => {
    await svc?.close();
    await nc?.close();
    await broker?.close();
  });

  it('publishes rows, peaks, status and journal that the site parsers accept, with site azimuth = array azimuth + heading', async () => {
    await waitFor(() => got.rows.length >= 5 && got.peaks.length >= 5 && got.status.length >= 1, 20_000, 'rows, peaks and status');
    expect((await post(svc, '/api/processing/reset')).status).toBe(204);
    await waitFor(() => got.journal.length >= 1, 10_000, 'a journal message');
    expect(got.bad).toEqual([]);
    for (const p of got.peaks) {
      expect(p.site).toBe(SITE);
      expect(p.node).toBe(NODE);
      // Mean age of the estimate (N/2 + λ/(1−λ)·H)/fs with λ = 1 − H/(fs·τ): for N = 2H it is τ
      // itself, 0.5 s by default (config/default.json).
      expect(p.ageMs).toBeCloseTo(500, 6);
      for (const k of p.peaks) {
        expect(k.siteAzimuthDeg).toBeCloseTo(wrap360(k.azimuthDeg + HEADING_DEG), 9);
        expect(k.siteElevationDeg).toBe(k.elevationDeg);
        expect(k.widthDeg).toBeGreaterThan(0);
        expect(k.aboveFloorDb).toBeGreaterThanOrEqual(0);
      }
    }
    // Peak messages follow the rows' sample clock.
    for (let i = 1; i < got.peaks.length; i++) expect(got.peaks[i].sampleIndex).toBeGreaterThan(got.peaks[i - 1].sampleIndex);
    const st = got.status.at(-1)!;
    expect(st.pose).toEqual({ positionM: [12, -4, 2], headingDeg: HEADING_DEG });
    expect(st.channels).toBe(24);
    expect(st.dashboardUrl).toBe(`${svc.url}/`);
    expect(got.journal.at(-1)!.entry.kind).toBe('reset');
    const cl = (await getStatus(svc)).cluster;
    expect(cl).toMatchObject({ state: 'connected', url: broker.url, site: SITE, node: NODE, dropped: 0, lastError: null });
    expect(cl.published.rows).toBeGreaterThan(0);
  }, 40_000);

  it('publishes monitoring events on nullsteer.SITE.NODE.events, kept in the site\'s stream', async () => {
    const put = (path: string, body: unknown) => fetch(`${svc.url}${path}`, { method: 'PUT', headers: { 'content-type': 'application/json' }, body: JSON.stringify(body) });
    // The built-in scene's source at 35° (array frame) is on all the time: a threshold far under it starts an event.
    expect((await put('/api/sectors/gate', { azimuthDeg: [20, 50], method: 'mvdr', weighting: 'A' })).status).toBe(201);
    expect((await put('/api/rules/gate-loud', { sector: 'gate', threshold: { mode: 'absolute', db: -80 }, clip: { beam: false, raw: false, preS: 0, postS: 0 } })).status).toBe(201);
    await waitFor(() => got.events.some((e) => e.change === 'started'), 30_000, 'an event on the broker');
    const e = got.events.find((x) => x.change === 'started')!;
    expect(e).toMatchObject({ v: 1, site: SITE, node: NODE, event: { rule: 'gate-loud' } });
    const checker = await connect({ servers: broker.url });
    try {
      const info = await (await jetstreamManager(checker)).streams.info(siteStreamName(SITE));
      expect(info.config.subjects).toContain(`nullsteer.${SITE}.*.events`);
      await waitFor(async () => ((await getStatus(svc)).cluster.published.events ?? 0) >= 1, 10_000, 'the event acknowledged');
    } finally {
      await checker.close();
    }
    expect((await fetch(`${svc.url}/api/rules/gate-loud`, { method: 'DELETE', headers: { 'content-type': 'application/json' } })).status).toBe(200);
  });

  it('keeps processing while the broker is away, holds peaks and journal, and JetStream has every entry after the restart', async () => {
    const rowsAtKill = svc.engine.rows;
    await broker.kill();
    await waitFor(async () => (await getStatus(svc)).cluster.state === 'reconnecting', 20_000, 'state reconnecting');
    // Journal changes while the broker is away.
    for (let i = 0; i < 3; i++) expect((await post(svc, '/api/processing/reset')).status).toBe(204);
    let down: any = null;
    await waitFor(
      async () => {
        down = (await getStatus(svc)).cluster;
        return svc.engine.rows > rowsAtKill + 20 && down.pending > 3;
      },
      30_000,
      'rows and pending entries while the broker is away',
    );
    expect(down.state).toBe('reconnecting');
    expect(down.skipped.rows).toBeGreaterThan(0);
    const rowsAtRestart = svc.engine.rows;
    expect(rowsAtRestart).toBeGreaterThan(rowsAtKill);

    await broker.start();
    let up: any = null;
    await waitFor(
      async () => {
        up = (await getStatus(svc)).cluster;
        return up.state === 'connected' && up.pending === 0 && up.streamReady;
      },
      30_000,
      'reconnected and every pending entry acknowledged',
    );
    expect(up.reconnects).toBeGreaterThanOrEqual(1);
    expect(up.dropped).toBe(0);
    expect(svc.engine.rows).toBeGreaterThan(rowsAtRestart);

    // Everything the stream holds from this edge: its sequence 1…lastSeq without a gap or a repeat.
    const checker = await connect({ servers: broker.url });
    try {
      const name = siteStreamName(SITE);
      // The edge goes on publishing: take its last sequence first, then wait for the stream to hold
      // that many (the newest entries may still be on their way to the broker).
      const lastSeq = (await getStatus(svc)).cluster.lastSeq;
      const jsm = await jetstreamManager(checker);
      let info = await jsm.streams.info(name);
      await waitFor(async () => (info = await jsm.streams.info(name)).state.messages >= lastSeq, 10_000, 'the stream holding the last sequence');
      expect(info.state.messages).toBeGreaterThanOrEqual(lastSeq);
      const consumer = await jetstream(checker).consumers.get(name);
      const seqs: number[] = [];
      const runs = new Set<string>();
      const journal: JournalMessage[] = [];
      const msgs = await consumer.fetch({ max_messages: info.state.messages, expires: 10_000 });
      for await (const m of msgs) {
        seqs.push(Number(m.headers?.get(EDGE_SEQ_HEADER)));
        runs.add(m.headers?.get(EDGE_RUN_HEADER) ?? '');
        if (m.subject.endsWith('.journal')) journal.push(parseJournalMessage(m.data));
        else if (m.subject.endsWith('.events')) expect(JSON.parse(new TextDecoder().decode(m.data)).node).toBe(NODE);
        else parsePeakMessage(m.data);
        if (seqs.length === info.state.messages) break;
      }
      expect(runs.size).toBe(1);
      const sorted = [...seqs].sort((a, b) => a - b);
      expect(sorted.length).toBeGreaterThanOrEqual(lastSeq);
      expect(sorted.slice(0, lastSeq)).toEqual(Array.from({ length: lastSeq }, (_, i) => i + 1));
      // The resets made while the broker was away are there, after the first one.
      expect(journal.filter((m) => m.entry.kind === 'reset').length).toBeGreaterThanOrEqual(4);
    } finally {
      await checker.close();
    }
  }, 58_000);
});

describe.skipIf(!natsAvailable)('edge with an unreachable broker', () => {
  it('starts, processes normally and says reconnecting', async () => {
    const port = await freePort();
    const svc = await startTestService({ source: { kind: 'simulator' }, engine: { workers: 1 }, array: { file: arrayWithPose() }, cluster: { natsUrl: `nats://127.0.0.1:${port}`, site: SITE, node: 'lonely' } });
    try {
      await waitFor(() => svc.engine.rows > 10, 20_000, 'rows');
      await waitFor(async () => (await getStatus(svc)).cluster.pending > 0, 20_000, 'pending peaks');
      const cl = (await getStatus(svc)).cluster;
      expect(cl.state).toBe('reconnecting');
      expect(cl.published).toEqual({ rows: 0, peaks: 0, status: 0, journal: 0, events: 0 });
      expect(cl.skipped.rows).toBeGreaterThan(0);
    } finally {
      await svc.close();
    }
  }, 40_000);
});

describe.skipIf(!natsAvailable)('edge on a broker that asks for a token', () => {
  it('connects with cluster.token; with a wrong one it keeps processing, says reconnecting and names the refusal', async () => {
    const broker = await startBroker({ token: 's3cret-token' });
    const base = { source: { kind: 'simulator' }, engine: { workers: 1 }, array: { file: arrayWithPose() } };
    const good = await startTestService({ ...base, cluster: { natsUrl: broker.url, site: SITE, node: 'good', token: 's3cret-token' } });
    const bad = await startTestService({ ...base, cluster: { natsUrl: broker.url, site: SITE, node: 'bad', token: 'wrong-token' } });
    try {
      await waitFor(async () => (await getStatus(good)).cluster.state === 'connected', 20_000, 'connected with the token');
      await waitFor(async () => bad.engine.rows > 10 && (await getStatus(bad)).cluster.lastError !== null, 20_000, 'rows and an error with the wrong token');
      const cl = (await getStatus(bad)).cluster;
      expect(cl.state).toBe('reconnecting');
      expect(cl.lastError).toMatch(/auth/i);
      // Status never shows the token.
      expect(JSON.stringify(await getStatus(good))).not.toContain('s3cret');
    } finally {
      await good.close();
      await bad.close();
      await broker.close();
    }
  }, 40_000);
});
