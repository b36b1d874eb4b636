/**
 * Webhooks (server/monitor/webhooks.ts) against receivers on 127.0.0.1 started and stopped here.
 * Time for back-off and timeouts is a manual clock: the tests fire timers by hand and assert on
 * the sender's counters and what the receivers got, never on elapsed time.
 */
import { createHmac, timingSafeEqual } from 'node:crypto';
import { readFileSync } from 'node:fs';
import http from 'node:http';
import type { AddressInfo } from 'node:net';
import { afterEach, describe, expect, it } from 'vitest';
import { CONFIG_SCHEMA } from '../../server/config/schema.ts';
import { ConfigError, validateConfig } from '../../server/config/validate.ts';
import {
  backoffDelayMs,
  signatureHex,
  WEBHOOK_DEFAULTS,
  WEBHOOK_MAX_HOOKS,
  WebhookConfigError,
  WebhookSender,
  type WebhookClock,
  type WebhookHookCounters,
} from '../../server/monitor/webhooks.ts';
import { waitFor } from '../helpers/service.ts';

/** Timers fired only by the test; time moves only when the test says. */
class ManualClock implements WebhookClock {
  t = Date.UTC(2026, 11, 4, 1, 0, 0);
  readonly timers = new Map<number, { at: number; delayMs: number; fn: () => void }>();
  #next = 1;
  nowMs(): number {
    return this.t;
  }
  setTimer(fn: () => void, delayMs: number): unknown {
    const id = this.#next++;
    this.timers.set(id, { at: this.t + delayMs, delayMs, fn });
    return id;
  }
  clearTimer(handle: unknown): void {
    this.timers.delete(handle as number);
  }
  /** Delays of the timers now pending, ascending. */
  pending(): number[] {
    return [...this.timers.values()].map((t) => t.delayMs).sort((a, b) => a - b);
  }
  /** Fire the earliest pending timer (time jumps to it); returns its delay. */
  fireNext(): number {
    let best: [number, { at: number; delayMs: number; fn: () => void }] | null = null;
    for (const e of this.timers) if (best === null || e[1].at < best[1].at) best = e;
    if (best === null) throw new Error('no timer pending');
    this.timers.delete(best[0]);
    this.t = best[1].at;
    best[1].fn();
    return best[1].delayMs;
  }
}

interface Received {
  headers: http.IncomingHttpHeaders;
  body: Buffer;
}

type Responder = (r: Received, req: http.IncomingMessage, res: http.ServerResponse) => void;

/** An HTTP receiver on 127.0.0.1 that keeps every request it gets and answers through `respond`. */
async function receiver(respond: Responder): Promise<{ url: string; got: Received[]; open: Set<http.ServerResponse>; close: () => Promise<void> }> {
  const got: Received[] = [];
  const open = new Set<http.ServerResponse>();
  const server = http.createServer((req, res) => {
    const chunks: Buffer[] = [];
    req.on('data', (c: Buffer) => chunks.push(c));
    req.on('end', () => {
      const r = { headers: req.headers, body: Buffer.concat(chunks) };
      got.push(r);
      open.add(res);
      res.on('close', () => open.delete(res));
      respond(r, req, res);
    });
  });
  await new Promise<void>((resolve) => server.listen(0, '127.0.0.1', resolve));
  const { port } = server.address() as AddressInfo;
  return {
    url: `http://127.0.0.1:${port}/hook/path?token=should-not-show`,
    got,
    open,
    close: () =>
      new Promise<void>((resolve) => {
        server.closeAllConnections();
        server.close(() => resolve());
      }),
  };
}

const SECRET_A = 'a-secret-of-at-least-16';
const SECRET_B = 'another-secret-0123456789';

/** The receiver's own check: HMAC-SHA256 of the raw body with node:crypto, compared in constant time. */
function signatureVerifies(secret: string, r: Received): boolean {
  const header = r.headers['x-nullsteer-signature'];
  if (typeof header !== 'string' || !header.startsWith('sha256=')) return false;
  const want = createHmac('sha256', secret).update(r.body).digest();
  const have = Buffer.from(header.slice(7), 'hex');
  return have.length === want.length && timingSafeEqual(have, want);
}

/** Every delivery taken on is in exactly one place. */
function balanced(c: WebhookHookCounters): boolean {
  const current = c.state === 'in-flight' || c.state === 'backing-off' ? 1 : 0;
  return c.sent === c.delivered + c.dropped + c.abandoned + c.discarded + c.queued + current;
}

const cleanups: (() => unknown)[] = [];
afterEach(async () => {
  while (cleanups.length > 0) await cleanups.pop()?.();
});

async function started(respond: Responder) {
  const r = await receiver(respond);
  cleanups.push(r.close);
  return r;
}

function sender(...args: ConstructorParameters<typeof WebhookSender>): WebhookSender {
  const s = new WebhookSender(...args);
  cleanups.push(() => s.close());
  return s;
}

const ok: Responder = (_r, _req, res) => res.writeHead(200).end('ok');

describe('signature', () => {
  // RFC 4231 section 4 (HMAC-SHA-256 lines of test cases 1–7); values from memory, checked here with
  // Python's hmac module (an independent implementation).
  const rfc4231: [string, Buffer, Buffer, string][] = [
    ['1', Buffer.alloc(20, 0x0b), Buffer.from('Hi There'), 'b0344c61d8db38535ca8afceaf0bf12b881dc200c9833da726e9376c2e32cff7'],
    ['2', Buffer.from('Jefe'), Buffer.from('what do ya want for nothing?'), '5bdcc146bf60754e6a042426089575c75a003f089d2739839dec58b964ec3843'],
    ['3', Buffer.alloc(20, 0xaa), Buffer.alloc(50, 0xdd), '773ea91e36800e46854db8ebd09181a72959098b3ef8c122d9635514ced565fe'],
    ['4', Buffer.from(Array.from({ length: 25 }, (_, i) => i + 1)), Buffer.alloc(50, 0xcd), '82558a389a443c0ea4cc819899f2083a85f0faa3e578f8077a2e3ff46729665b'],
    // Test case 5 gives only the first 128 bits (truncation).
    ['5', Buffer.alloc(20, 0x0c), Buffer.from('Test With Truncation'), 'a3b6167473100ee06e0c796c2955552b'],
    ['6', Buffer.alloc(131, 0xaa), Buffer.from('Test Using Larger Than Block-Size Key - Hash Key First'), '60e431591ee0b67f0d8a26aacbf5b77f8e0bc6213728c5140546040f0ee37f54'],
    [
      '7',
      Buffer.alloc(131, 0xaa),
      Buffer.from('This is a test using a larger than block-size key and a larger than block-size data. The key needs to be hashed before being used by the HMAC algorithm.'),
      '9b09ffa71b942fcb27635fbcd5b0e944bfdc63644f0713938a7f51535c3a35e2',
    ],
  ];
  it.each(rfc4231)('matches RFC 4231 test case %s', (_n, key, data, want) => {
    expect(signatureHex(key, data).slice(0, want.length)).toBe(want);
    expect(signatureHex(key, data)).toMatch(/^[0-9a-f]{64}$/);
  });
  it('takes a string key as its UTF-8 bytes (RFC 4231 test case 2 with the key "Jefe")', () => {
    expect(signatureHex('Jefe', Buffer.from('what do ya want for nothing?'))).toBe('5bdcc146bf60754e6a042426089575c75a003f089d2739839dec58b964ec3843');
  });
});

describe('back-off', () => {
  it('doubles from the first delay up to the largest, jitter within [base/2, base)', () => {
    // Bases 500, 1000, ..., capped at 30000 (the brief's 0.5 s doubling to 30 s); computed by hand.
    const bases = [500, 1000, 2000, 4000, 8000, 16000, 30000, 30000];
    bases.forEach((base, i) => {
      expect(backoffDelayMs(i + 1, 500, 30_000, 0)).toBe(base / 2);
      expect(backoffDelayMs(i + 1, 500, 30_000, 0.5)).toBe(base * 0.75);
      expect(backoffDelayMs(i + 1, 500, 30_000, 0.999)).toBeLessThan(base);
    });
  });
});

describe('WebhookSender', () => {
  it('signs every delivery; each hook gets only its kinds; the body is what the headers say', async () => {
    const a = await started(ok);
    const b = await started(ok);
    const s = sender([
      { url: a.url, secret: SECRET_A },
      { url: b.url, secret: SECRET_B, events: ['started', 'ended'] },
    ]);
    s.send('started', { event: 'e1', rule: 'gate', levelDb: -20.5 });
    s.send('updated', { event: 'e1', rule: 'gate', levelDb: -18 });
    s.send('ended', { event: 'e1', rule: 'gate', note: 'unicode ✓ ünïcödé' });
    // send() returned before any answer: everything is still on its way.
    expect(s.counters().hooks.map((h) => h.delivered)).toEqual([0, 0]);
    await waitFor(() => s.counters().hooks[0].delivered === 3 && s.counters().hooks[1].delivered === 2, 20_000, 'deliveries');
    expect(a.got).toHaveLength(3);
    expect(b.got).toHaveLength(2);
    for (const [secret, r] of [...a.got.map((r) => [SECRET_A, r] as const), ...b.got.map((r) => [SECRET_B, r] as const)]) {
      expect(signatureVerifies(secret, r)).toBe(true);
      expect(signatureVerifies(secret === SECRET_A ? SECRET_B : SECRET_A, r)).toBe(false);
      expect(r.headers['content-type']).toBe('application/json');
      expect(Number(r.headers['content-length'])).toBe(r.body.length);
      const body = JSON.parse(r.body.toString('utf8'));
      expect(body.deliveryId).toBe(r.headers['x-nullsteer-delivery']);
      expect(body.event).toBe(r.headers['x-nullsteer-event']);
      expect(Number.isNaN(Date.parse(body.createdUtc))).toBe(false);
    }
    // In order per hook; both hooks got the same delivery (same id, same bytes) for the kinds they share.
    expect(a.got.map((r) => r.headers['x-nullsteer-event'])).toEqual(['started', 'updated', 'ended']);
    expect(b.got.map((r) => r.headers['x-nullsteer-event'])).toEqual(['started', 'ended']);
    expect(b.got[0].body.equals(a.got[0].body)).toBe(true);
    expect(JSON.parse(a.got[2].body.toString('utf8')).data.note).toBe('unicode ✓ ünïcödé');
    const c = s.counters();
    expect(c.hooks[0]).toMatchObject({ sent: 3, attempts: 3, delivered: 3, retries: 0, dropped: 0, abandoned: 0, queued: 0, state: 'idle', lastError: null, events: ['started', 'updated', 'ended'] });
    expect(c.hooks[1]).toMatchObject({ sent: 2, delivered: 2, events: ['started', 'ended'] });
    // Only the origin is shown: no path, no query (the test URL carries a token-like query).
    expect(c.hooks[0].target).toBe(new URL(a.url).origin);
    expect(JSON.stringify(c)).not.toContain('should-not-show');
    expect(JSON.stringify(c)).not.toContain(SECRET_A);
  });

  it('a 503 then a 200 delivers the event exactly once with 2xx, the delivery id and body repeated', async () => {
    let n = 0;
    const r = await started((_r, _req, res) => (n++ === 0 ? res.writeHead(503).end('busy') : res.writeHead(200).end()));
    const clock = new ManualClock();
    const s = sender([{ url: r.url, secret: SECRET_A }], { clock, random: () => 0.5 });
    s.send('started', { event: 'e2' });
    await waitFor(() => s.counters().hooks[0].state === 'backing-off', 20_000, 'the first attempt to fail');
    expect(s.counters().hooks[0]).toMatchObject({ attempts: 1, failures: { status: 1, timeout: 0, network: 0 }, lastError: { reason: 'status', detail: 'HTTP 503' } });
    // The retry waits for the back-off timer: 500 ms base with jitter 0.5 → 375 ms; only it is pending.
    expect(clock.pending()).toEqual([375]);
    expect(r.got).toHaveLength(1);
    clock.fireNext();
    await waitFor(() => s.counters().hooks[0].delivered === 1, 20_000, 'the retry to be delivered');
    expect(r.got).toHaveLength(2);
    expect(r.got[1].headers['x-nullsteer-delivery']).toBe(r.got[0].headers['x-nullsteer-delivery']);
    expect(r.got[1].body.equals(r.got[0].body)).toBe(true);
    expect(r.got[1].headers['x-nullsteer-signature']).toBe(r.got[0].headers['x-nullsteer-signature']);
    expect(r.got.map((g) => g.headers['x-nullsteer-attempt'])).toEqual(['1', '2']);
    expect(signatureVerifies(SECRET_A, r.got[1])).toBe(true);
    const c = s.counters().hooks[0];
    expect(c).toMatchObject({ sent: 1, attempts: 2, delivered: 1, retries: 1, abandoned: 0, state: 'idle' });
    expect(clock.timers.size).toBe(0);
    expect(balanced(c)).toBe(true);
  });

  it('a receiver that never answers: timed out and retried, without holding up another hook or the event loop', async () => {
    const silent = await started(() => undefined); // keeps every request open, never answers
    const good = await started(ok);
    const clock = new ManualClock();
    const s = sender(
      [
        { url: silent.url, secret: SECRET_A },
        { url: good.url, secret: SECRET_B },
      ],
      { clock, random: () => 0, maxAttempts: 2 },
    );
    let ticks = 0;
    const ticker = setInterval(() => ticks++, 1);
    cleanups.push(() => clearInterval(ticker));
    for (let i = 1; i <= 3; i++) s.send('updated', { seq: i });
    await waitFor(() => s.counters().hooks[1].delivered === 3 && silent.got.length === 1, 20_000, 'the good hook to be served');
    const ticksWhileWaiting = ticks;
    expect(ticksWhileWaiting).toBeGreaterThan(0); // timers of the event loop kept running meanwhile
    let c = s.counters();
    expect(c.hooks[0]).toMatchObject({ state: 'in-flight', attempts: 1, delivered: 0, queued: 2 });
    // Only the per-request timeout is pending for the silent hook (the good hook has nothing left).
    expect(clock.pending()).toEqual([WEBHOOK_DEFAULTS.timeoutMs]);
    clock.fireNext(); // the 5 s timeout: the request is aborted
    c = s.counters();
    expect(c.hooks[0]).toMatchObject({ state: 'backing-off', failures: { status: 0, timeout: 1, network: 0 }, lastError: { reason: 'timeout' } });
    expect(clock.pending()).toEqual([250]); // back-off 500 ms, jitter 0 → 250
    clock.fireNext();
    await waitFor(() => silent.got.length === 2, 20_000, 'the retry to reach the silent receiver');
    expect(silent.got[1].headers['x-nullsteer-delivery']).toBe(silent.got[0].headers['x-nullsteer-delivery']);
    clock.fireNext(); // second timeout: maxAttempts 2 reached → abandoned, the next event starts
    await waitFor(() => silent.got.length === 3, 20_000, 'the next event to reach the silent receiver');
    c = s.counters();
    expect(c.hooks[0]).toMatchObject({ attempts: 3, retries: 1, abandoned: 1, failures: { timeout: 2 }, queued: 1, state: 'in-flight' });
    expect(JSON.parse(silent.got[2].body.toString('utf8')).data.seq).toBe(2);
    expect(c.hooks[1]).toMatchObject({ delivered: 3, failures: { status: 0, timeout: 0, network: 0 } });
    expect(c.hooks.every(balanced)).toBe(true);
    // close(): the request in flight is aborted, timers cleared, what waits discarded and counted.
    s.close();
    c = s.counters();
    expect(clock.timers.size).toBe(0);
    expect(c.hooks[0]).toMatchObject({ state: 'closed', discarded: 2, queued: 0, failures: { timeout: 2, network: 0 } });
    expect(c.hooks.every(balanced)).toBe(true);
    await waitFor(() => silent.open.size === 0, 20_000, 'the aborted request to close at the receiver');
    s.send('ended', { seq: 4 });
    expect(s.counters().refused.closed).toBe(1);
  });

  it('holds at most queueMax waiting per hook; the oldest waiting are dropped and counted', async () => {
    const held: http.ServerResponse[] = [];
    const r = await started((_r, _req, res) => held.push(res)); // answers only when the test releases
    const clock = new ManualClock();
    const s = sender([{ url: r.url, secret: SECRET_A }], { clock, queueMax: 4 });
    for (let i = 1; i <= 10; i++) s.send('updated', { seq: i });
    // Event 1 is being tried; of 2..10 only the newest 4 wait.
    let c = s.counters().hooks[0];
    expect(c).toMatchObject({ sent: 10, dropped: 5, queued: 4, state: 'in-flight' });
    expect(balanced(c)).toBe(true);
    const release = async (k: number) => {
      await waitFor(() => held.length === k, 20_000, `request ${k}`);
      held[k - 1].writeHead(204).end();
    };
    for (let k = 1; k <= 5; k++) await release(k);
    await waitFor(() => s.counters().hooks[0].delivered === 5, 20_000, 'the rest to be delivered');
    expect(r.got.map((g) => JSON.parse(g.body.toString('utf8')).data.seq)).toEqual([1, 7, 8, 9, 10]);
    c = s.counters().hooks[0];
    expect(c).toMatchObject({ sent: 10, delivered: 5, dropped: 5, queued: 0, state: 'idle' });
    expect(balanced(c)).toBe(true);
  });

  it('a receiver that closes the socket counts as a network failure', async () => {
    const r = await started((_r, req) => req.socket.destroy());
    const clock = new ManualClock();
    const s = sender([{ url: r.url, secret: SECRET_A }], { clock, maxAttempts: 2, random: () => 0 });
    s.send('started', { event: 'e3' });
    await waitFor(() => s.counters().hooks[0].state === 'backing-off', 20_000, 'the first attempt to fail');
    expect(s.counters().hooks[0]).toMatchObject({ failures: { status: 0, timeout: 0, network: 1 }, lastError: { reason: 'network' } });
    expect(s.counters().hooks[0].lastError?.detail).toMatch(/^(ECONNRESET|EPIPE)$/); // reset after the request was read; EPIPE if it lands while writing
    clock.fireNext();
    await waitFor(() => s.counters().hooks[0].abandoned === 1, 20_000, 'the delivery to be given up');
    const c = s.counters().hooks[0];
    expect(c).toMatchObject({ attempts: 2, retries: 1, delivered: 0, failures: { network: 2 }, state: 'idle' });
    expect(r.got).toHaveLength(2);
    expect(balanced(c)).toBe(true);
    // The error names no address, path or secret.
    expect(JSON.stringify(c.lastError)).not.toMatch(/127\.0\.0\.1|hook|secret/);
  });

  it('a refused connection (no receiver on the port) counts as a network failure too', async () => {
    const r = await receiver(ok);
    await r.close(); // the port is free again: connections are refused
    const clock = new ManualClock();
    const s = sender([{ url: r.url, secret: SECRET_A }], { clock, maxAttempts: 1 });
    s.send('ended', { event: 'e4' });
    await waitFor(() => s.counters().hooks[0].abandoned === 1, 20_000, 'the delivery to be given up');
    expect(s.counters().hooks[0]).toMatchObject({ failures: { network: 1 }, lastError: { reason: 'network', detail: 'ECONNREFUSED' } });
  });

  it('send() never throws: bad kinds, payloads and sizes are refused and counted', () => {
    const s = sender([{ url: 'http://127.0.0.1:9/x', secret: SECRET_A }], { clock: new ManualClock(), maxBodyBytes: 1024 });
    const circular: Record<string, unknown> = {};
    circular.self = circular;
    expect(() => s.send('exploded' as 'started', {})).not.toThrow();
    expect(() => s.send('started', circular)).not.toThrow();
    expect(() => s.send('started', { n: 1n } as object)).not.toThrow();
    expect(() => s.send('started', null as unknown as object)).not.toThrow();
    expect(() => s.send('started', { text: 'x'.repeat(2000) })).not.toThrow();
    expect(s.counters().refused).toEqual({ kind: 1, payload: 3, tooLarge: 1, closed: 0 });
    expect(s.counters().hooks[0].sent).toBe(0);
  });

  it('the constructor refuses what the schema refuses', () => {
    const bad: [unknown, RegExp][] = [
      [[{ url: 'ftp://127.0.0.1/x', secret: SECRET_A }], /only http/],
      [[{ url: 'http://user:pw@127.0.0.1/x', secret: SECRET_A }], /user:password/],
      [[{ url: 'not a url', secret: SECRET_A }], /not a URL/],
      [[{ url: 'http://127.0.0.1/x', secret: 'short' }], /16–256/],
      [[{ url: 'http://127.0.0.1/x', secret: SECRET_A, events: [] }], /non-empty/],
      [[{ url: 'http://127.0.0.1/x', secret: SECRET_A, events: ['begun'] }], /unknown event/],
      [Array.from({ length: 9 }, () => ({ url: 'http://127.0.0.1/x', secret: SECRET_A })), /at most 8/],
    ];
    for (const [hooks, why] of bad) {
      let err: unknown;
      try {
        new WebhookSender(hooks as never);
      } catch (e) {
        err = e;
      }
      expect(err).toBeInstanceOf(WebhookConfigError);
      expect(err).toBeInstanceOf(RangeError);
      expect((err as WebhookConfigError).code).toBe('ERR_WEBHOOK_CONFIG');
      expect((err as Error).message).toMatch(why);
    }
    expect(() => new WebhookSender([], { queueMax: 0 })).toThrow(WebhookConfigError);
  });
});

describe('monitor.webhooks in the configuration', () => {
  const defaults = JSON.parse(readFileSync(new URL('../../config/default.json', import.meta.url), 'utf8'));
  const withHooks = (webhooks: unknown) => ({ ...defaults, monitor: { ...defaults.monitor, webhooks } });
  const issues = (webhooks: unknown): string[] => {
    try {
      validateConfig(withHooks(webhooks));
      return [];
    } catch (e) {
      expect(e).toBeInstanceOf(ConfigError);
      return (e as ConfigError).issues.map((i) => i.path);
    }
  };

  it('states the sender\'s queue bound in the field\'s documentation', () => {
    const spec = CONFIG_SCHEMA.kind === 'object' ? CONFIG_SCHEMA.fields.monitor : null;
    const hooks = spec?.kind === 'object' ? spec.fields.webhooks : null;
    expect(hooks?.kind).toBe('recordList');
    expect(hooks?.kind === 'recordList' && hooks.maxItems).toBe(WEBHOOK_MAX_HOOKS);
    expect(hooks?.doc).toContain(`at most ${WEBHOOK_DEFAULTS.queueMax} waiting per hook`);
  });

  it('defaults to no hooks; events may be left out', () => {
    expect(validateConfig(defaults).monitor.webhooks).toEqual([]);
    expect(issues([{ url: 'https://example.org/hook', secret: SECRET_A }])).toEqual([]);
    expect(issues([{ url: 'http://10.0.0.2:8080/a?b=c', secret: SECRET_A, events: ['ended'] }])).toEqual([]);
  });

  it('refuses other schemes, credentials, short or long secrets, empty or unknown events, more than 8 hooks, unknown fields', () => {
    expect(issues([{ url: 'ftp://example.org/hook', secret: SECRET_A }])).toEqual(['monitor.webhooks[0].url']);
    expect(issues([{ url: 'https://u:p@example.org/hook', secret: SECRET_A }])).toEqual(['monitor.webhooks[0].url']);
    expect(issues([{ url: 'https://example.org/hook', secret: 'x'.repeat(15) }])).toEqual(['monitor.webhooks[0].secret']);
    expect(issues([{ url: 'https://example.org/hook', secret: 'x'.repeat(257) }])).toEqual(['monitor.webhooks[0].secret']);
    expect(issues([{ url: 'https://example.org/hook', secret: SECRET_A, events: [] }])).toEqual(['monitor.webhooks[0].events']);
    expect(issues([{ url: 'https://example.org/hook', secret: SECRET_A, events: ['begun'] }])).toEqual(['monitor.webhooks[0].events']);
    expect(issues([{ url: 'https://example.org/hook', secret: SECRET_A, extra: 1 }])).toEqual(['monitor.webhooks[0].extra']);
    expect(issues([{ secret: SECRET_A }])).toEqual(['monitor.webhooks[0].url']);
    expect(issues(Array.from({ length: 9 }, () => ({ url: 'https://example.org/hook', secret: SECRET_A })))).toEqual(['monitor.webhooks']);
  });
});
