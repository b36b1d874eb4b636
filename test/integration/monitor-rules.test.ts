/**
 * Rules and events on a running service (issue 16 items 3 and 5, wiring): a rule saved over REST
 * (closed body, data.dir/rules.json, journaled) makes events from its sector's level; each event
 * change goes out on the live WebSocket (`event`), to a webhook receiver on 127.0.0.1 (signed with
 * HMAC-SHA256 over the body, checked here with node:crypto), into GET /api/events and GET /metrics,
 * and into data.dir/events, and its clip is written to outputs.dir/clips. The built-in scene's source at 35° is on all the time, so a threshold far
 * below its level (−80 dBFS) starts an event once minDurationS has passed; deleting the rule stops it.
 */
import { createHmac } from 'node:crypto';
import { copyFileSync, existsSync, mkdtempSync, readFileSync, readdirSync } from 'node:fs';
import { createServer, type Server } from 'node:http';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import WebSocket from 'ws';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { getStatus, startTestService, waitFor } from '../helpers/service.ts';
import type { Service } from '../../server/service.ts';

const JSON_HEADERS = { 'content-type': 'application/json' };
const SECRET = 'a-test-secret-of-32-characters!!';
let svc: Service;
let hook: Server;
let dataDir: string;
let outputsDir: string;
const received: { body: string; signature: string; event: string }[] = [];
const liveEvents: { change: string; event: { id: string; rule: string } }[] = [];
let ws: WebSocket;

describe('rules and events on the service', () => {
  beforeAll(async () => {
    hook = createServer((req, res) => {
      let body = '';
      req.on('data', (c) => (body += c));
      req.on('end', () => {
        received.push({ body, signature: String(req.headers['x-nullsteer-signature']), event: String(req.headers['x-nullsteer-event']) });
        res.writeHead(204).end();
      });
    });
    await new Promise<void>((r) => hook.listen(0, '127.0.0.1', () => r()));
    const port = (hook.address() as { port: number }).port;
    const dir = mkdtempSync(join(tmpdir(), 'nullsteer-rules-'));
    const arrayFile = join(dir, 'ring-24.json');
    copyFileSync(fileURLToPath(new URL('../../config/arrays/ring-24.json', import.meta.url)), arrayFile);
    dataDir = join(dir, 'data');
    outputsDir = join(dir, 'recordings');
    svc = await startTestService({ source: { kind: 'simulator' }, array: { file: arrayFile }, data: { dir: dataDir }, outputs: { dir: outputsDir }, monitor: { webhooks: [{ url: `http://127.0.0.1:${port}/hook`, secret: SECRET }] } });
    ws = new WebSocket(`${svc.url.replace('http', 'ws')}/api/live`);
    ws.on('message', (data, isBinary) => {
      if (isBinary) return;
      const m = JSON.parse(data.toString());
      if (m.type === 'event') liveEvents.push(m);
    });
  }, 30_000);

  afterAll(async () => {
    ws?.close();
    await svc?.close();
    await new Promise((r) => hook.close(r));
  });

  it('a rule saved over REST makes signed, live, listed and counted events; bad bodies are refused by field', async () => {
    expect((await fetch(`${svc.url}/api/sectors/gate`, { method: 'PUT', headers: JSON_HEADERS, body: JSON.stringify({ azimuthDeg: [20, 50], method: 'mvdr', weighting: 'A' }) })).status).toBe(201);
    // Six seconds of stream first, so the pre-trigger ring holds the clip's 5 s before the event.
    await waitFor(async () => ((await getStatus(svc)).engine.hops ?? 0) * 256 >= 6 * 48_000, 30_000, 'six seconds of stream');
    const bad = await fetch(`${svc.url}/api/rules/gate-loud`, { method: 'PUT', headers: JSON_HEADERS, body: JSON.stringify({ sector: 'gate', threshold: { mode: 'loudest', db: 1 }, extra: 1 }) });
    expect(bad.status).toBe(400);
    const badText = await bad.text();
    expect(badText).toContain('threshold.mode');
    expect(badText).toContain('extra: unknown field');
    const put = await fetch(`${svc.url}/api/rules/gate-loud`, { method: 'PUT', headers: JSON_HEADERS, body: JSON.stringify({ sector: 'gate', threshold: { mode: 'absolute', db: -80 }, minDurationS: 0.5, releaseS: 1 }) });
    expect(put.status).toBe(201);
    expect(JSON.parse(readFileSync(join(dataDir, 'rules.json'), 'utf8')).rules[0]).toMatchObject({ name: 'gate-loud', sector: 'gate', threshold: { mode: 'absolute', db: -80 } });
    expect((await (await fetch(`${svc.url}/api/rules/gate-loud`)).json()).rule.clip).toEqual({ preS: 5, postS: 5, beam: true, raw: false });

    await waitFor(() => liveEvents.some((e) => e.change === 'started') && received.some((r) => r.event === 'started'), 60_000, 'an event started, live and by webhook');
    const started = liveEvents.find((e) => e.change === 'started')!;
    expect(started.event.rule).toBe('gate-loud');
    // The webhook body is signed with the hook's secret over its exact bytes.
    const r = received.find((x) => x.event === 'started')!;
    expect(r.signature).toBe(`sha256=${createHmac('sha256', SECRET).update(r.body).digest('hex')}`);
    expect(JSON.parse(r.body).data.id).toBe(started.event.id);
    const listed = (await (await fetch(`${svc.url}/api/events?rule=gate-loud`)).json()) as { events: { id: string; azimuthDeg: number }[] };
    expect(listed.events.map((e) => e.id)).toContain(started.event.id);
    expect(Math.abs(listed.events[0].azimuthDeg - 35)).toBeLessThanOrEqual(3);
    expect(await (await fetch(`${svc.url}/metrics`)).text()).toMatch(/nullsteer_events_total\{rule="gate-loud"\} [1-9]/);
    await waitFor(() => existsSync(join(dataDir, 'events')) && readdirSync(join(dataDir, 'events')).some((f) => f.endsWith('.jsonl')), 10_000, 'an events file');
    const file = readdirSync(join(dataDir, 'events')).find((f) => f.endsWith('.jsonl'))!;
    expect(JSON.parse(readFileSync(join(dataDir, 'events', file), 'utf8').split('\n')[0])).toMatchObject({ change: 'started', rule: 'gate-loud', sector: 'gate' });
    const st = await getStatus(svc);
    expect(st.monitor.events.started).toBeGreaterThanOrEqual(1);
    expect(st.monitor.rules).toBe(1);
    expect(st.monitor.webhooks.hooks[0].delivered).toBeGreaterThanOrEqual(1);
    // Its clip is being written (the event goes on); the pre-trigger ring holds 10 s of 24 channels.
    expect(st.monitor.clips).toMatchObject({ started: 1, active: 1, refused: 0, preTriggerBytes: 24 * 48_000 * 10 * 4 });
    const journal = await (await fetch(`${svc.url}/api/journal`)).json();
    expect(JSON.stringify(journal)).toContain('"kind":"rules"');

    expect((await fetch(`${svc.url}/api/rules/gate-loud`, { method: 'DELETE', headers: JSON_HEADERS })).status).toBe(200);
    expect((await (await fetch(`${svc.url}/api/rules`)).json()).rules).toEqual([]);
    expect((await fetch(`${svc.url}/api/rules/nope`)).status).toBe(404);
    // Closing the service closes the clip where it is: a WAV and its sidecar, marked truncated.
    await svc.close();
    const clipsDir = join(outputsDir, 'clips');
    const names = readdirSync(clipsDir).sort();
    expect(names).toEqual([`${started.event.id}-beam.json`, `${started.event.id}-beam.wav`]);
    const side = JSON.parse(readFileSync(join(clipsDir, names[0]), 'utf8'));
    expect(side).toMatchObject({ truncated: true, indicative: true, files: [`${started.event.id}-beam.wav`] });
    expect(side.preTriggerS).toBeGreaterThanOrEqual(4.9);
    expect(side.caution).toContain('recording people is regulated');
  }, 90_000);
});
