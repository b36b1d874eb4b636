/**
 * Alarms out by webhook: each monitoring event (`started`, `updated`, `ended`) is POSTed as JSON to
 * every configured hook that asked for its kind (config `monitor.webhooks`).
 *
 * Each delivery carries
 *   content-type: application/json
 *   x-nullsteer-signature: sha256=HEX   HMAC-SHA256 (RFC 2104 with SHA-256; test vectors RFC 4231) of the
 *                                       exact body bytes, keyed with the hook's secret (its UTF-8 bytes)
 *   x-nullsteer-delivery: ID            the same on every attempt of one event (receivers drop repeats)
 *   x-nullsteer-event: KIND
 * The body is `{"deliveryId":ID,"event":KIND,"createdUtc":ISO-8601,"data":PAYLOAD}`, built once per
 * event: every attempt and every hook sends the same bytes, so a receiver may also refuse stale
 * `createdUtc` values against replays.
 *
 * Delivery: one request in flight per hook, events in order per hook. A 2xx answer ends a delivery;
 * any other status (redirects are not followed), a network error, or no answer within
 * `timeoutMs` (AbortController) is a failed attempt, retried after an exponential back-off with
 * jitter (backoffDelayMs) until `maxAttempts` attempts were made; then the delivery is abandoned
 * and counted. Hooks are independent: a dead receiver never holds up another hook, `send`, or the
 * event loop (everything is asynchronous; `send` only serialises and queues).
 *
 * Bounds: per hook at most `queueMax` deliveries wait behind the one being tried; when full, the
 * oldest waiting one is dropped and counted (`dropped`). A body is at most `maxBodyBytes`; larger
 * payloads are refused and counted. Memory is therefore at most hooks × (queueMax + 1) bodies of at
 * most maxBodyBytes (8 × 257 × 32 KiB ≈ 64 MiB in the very worst case with the defaults; event bodies
 * are usually under 2 KiB, and one body is shared by every hook that takes it).
 *
 * Nothing secret leaves through `counters()`: a hook is shown by its origin (scheme, host, port; the
 * path and query may hold a token and are left out), errors by HTTP status or error code only.
 */
import { createHmac, randomUUID } from 'node:crypto';
import http from 'node:http';
import https from 'node:https';

export const WEBHOOK_EVENTS = ['started', 'updated', 'ended'] as const;
export type WebhookEvent = (typeof WEBHOOK_EVENTS)[number];

/** One hook as configured (`monitor.webhooks[i]`). */
export interface WebhookHookConfig {
  /** http:// or https:// URL, no user:password@. */
  url: string;
  /** 16–256 characters; the HMAC key (its UTF-8 bytes). */
  secret: string;
  /** Non-empty subset of WEBHOOK_EVENTS; missing: all. */
  events?: readonly WebhookEvent[];
}

/** Clock and timers, injectable so that tests drive time (back-off, timeouts) without waiting. */
export interface WebhookClock {
  /** Milliseconds since the Unix epoch (the body's createdUtc, lastError.atMs). */
  nowMs(): number;
  /** Call `fn` once after `delayMs` milliseconds; returns a handle for clearTimer. */
  setTimer(fn: () => void, delayMs: number): unknown;
  clearTimer(handle: unknown): void;
}

export const REAL_CLOCK: WebhookClock = {
  nowMs: () => Date.now(),
  setTimer: (fn, delayMs) => setTimeout(fn, delayMs),
  clearTimer: (h) => clearTimeout(h as ReturnType<typeof setTimeout>),
};

export interface WebhookSenderOptions {
  /** Deliveries waiting per hook behind the one being tried; when full the oldest is dropped and counted. */
  queueMax?: number;
  /** Per-attempt limit, from the request's start to the response's status line, ms. */
  timeoutMs?: number;
  /** Back-off before the first retry (before jitter), ms; doubled per failed attempt. */
  backoffFirstMs?: number;
  /** Longest back-off (before jitter), ms. */
  backoffMaxMs?: number;
  /** Attempts per delivery, the first included; then it is abandoned and counted. */
  maxAttempts?: number;
  /** Largest body accepted, bytes; larger payloads are refused and counted. */
  maxBodyBytes?: number;
  clock?: WebhookClock;
  /** Uniform in [0, 1): the jitter (Math.random by default). */
  random?: () => number;
}

/** Defaults of WebhookSenderOptions: back-off 0.5, 1, 2, 4, 8, 16, 30 s (before jitter) over 8 attempts. */
export const WEBHOOK_DEFAULTS = {
  queueMax: 256,
  timeoutMs: 5000,
  backoffFirstMs: 500,
  backoffMaxMs: 30_000,
  maxAttempts: 8,
  maxBodyBytes: 32 * 1024,
} as const;

/** The most hooks a sender takes (as the config schema). */
export const WEBHOOK_MAX_HOOKS = 8;

export type WebhookFailure = 'status' | 'timeout' | 'network';

export interface WebhookHookCounters {
  /** Position in monitor.webhooks. */
  index: number;
  /** scheme://host:port of the hook only (never its path, query or credentials). */
  target: string;
  events: WebhookEvent[];
  /** idle; in-flight: a request is out; backing-off: waiting to retry; closed. */
  state: 'idle' | 'in-flight' | 'backing-off' | 'closed';
  /** Deliveries taken on (events of this hook's kinds passed to send). */
  sent: number;
  /** POST requests made, first attempts and retries. */
  attempts: number;
  /** Deliveries answered 2xx. */
  delivered: number;
  /** Requests after a delivery's first. */
  retries: number;
  /** Failed attempts by reason. */
  failures: Record<WebhookFailure, number>;
  /** Deliveries dropped from a full queue (the oldest waiting). */
  dropped: number;
  /** Deliveries given up after maxAttempts failed attempts. */
  abandoned: number;
  /** Deliveries discarded by close(). */
  discarded: number;
  /** Deliveries waiting now behind the one being tried (≤ queueMax). */
  queued: number;
  /** The latest failed attempt: reason, `HTTP 503` / an error code / the timeout, and when (ms since epoch). */
  lastError: { reason: WebhookFailure; detail: string; atMs: number } | null;
}

export interface WebhookCounters {
  /** send() calls refused before any hook: unknown kind, payload not serialisable as a JSON object, body too large, sender closed. */
  refused: { kind: number; payload: number; tooLarge: number; closed: number };
  hooks: WebhookHookCounters[];
}

/** Thrown by the constructor for a configuration the schema should have refused. */
export class WebhookConfigError extends RangeError {
  readonly code = 'ERR_WEBHOOK_CONFIG';
  constructor(message: string) {
    super(message);
    this.name = 'WebhookConfigError';
  }
}

/**
 * HMAC-SHA256 of `body` keyed with `key` (a string is taken as its UTF-8 bytes), lower-case hex
 * (64 characters). RFC 2104 construction with SHA-256; checked against RFC 4231's test vectors.
 */
export function signatureHex(key: string | Uint8Array, body: Uint8Array): string {
  return createHmac('sha256', key).update(body).digest('hex');
}

/**
 * Back-off before the retry that follows `failedAttempts` failed attempts (≥ 1), ms:
 * base = min(maxMs, firstMs · 2^(failedAttempts − 1)), then "equal jitter": base/2 + random·base/2,
 * so a delay lies in [base/2, base) and hooks failing together spread out.
 */
export function backoffDelayMs(failedAttempts: number, firstMs: number, maxMs: number, random01: number): number {
  const base = Math.min(maxMs, firstMs * 2 ** Math.max(0, failedAttempts - 1));
  const r = Number.isFinite(random01) ? Math.min(Math.max(random01, 0), 1) : 0.5;
  return base / 2 + (r * base) / 2;
}

interface Delivery {
  readonly id: string;
  readonly kind: WebhookEvent;
  readonly body: Buffer;
}

/** Fixed-capacity FIFO ring: push, shift, drop-oldest in O(1); never grows past `capacity`. */
class Ring<T> {
  readonly #a: (T | undefined)[];
  #head = 0;
  #length = 0;
  constructor(capacity: number) {
    this.#a = new Array<T | undefined>(capacity).fill(undefined);
  }
  get length(): number {
    return this.#length;
  }
  /** Push `v`; when full the oldest is removed first and returned. */
  push(v: T): T | undefined {
    let dropped: T | undefined;
    if (this.#length === this.#a.length) dropped = this.shift();
    this.#a[(this.#head + this.#length) % this.#a.length] = v;
    this.#length++;
    return dropped;
  }
  shift(): T | undefined {
    if (this.#length === 0) return undefined;
    const v = this.#a[this.#head];
    this.#a[this.#head] = undefined;
    this.#head = (this.#head + 1) % this.#a.length;
    this.#length--;
    return v;
  }
  clear(): number {
    const n = this.#length;
    while (this.#length > 0) this.shift();
    return n;
  }
}

interface HookState {
  readonly index: number;
  readonly url: URL;
  readonly target: string;
  readonly key: Buffer;
  readonly events: ReadonlySet<WebhookEvent>;
  readonly queue: Ring<Delivery>;
  current: Delivery | null;
  /** Attempts made for `current`. */
  currentAttempts: number;
  state: WebhookHookCounters['state'];
  request: http.ClientRequest | null;
  abort: AbortController | null;
  timeoutTimer: unknown;
  retryTimer: unknown;
  counts: Omit<WebhookHookCounters, 'index' | 'target' | 'events' | 'state' | 'queued' | 'failures' | 'lastError'>;
  failures: Record<WebhookFailure, number>;
  lastError: WebhookHookCounters['lastError'];
}

function positiveInt(name: string, v: number | undefined, fallback: number, max: number): number {
  const x = v ?? fallback;
  if (!Number.isInteger(x) || x < 1 || x > max) throw new WebhookConfigError(`${name} must be an integer 1–${max}, got ${String(v)}`);
  return x;
}

function parseHook(h: WebhookHookConfig, i: number): { url: URL; target: string; key: Buffer; events: Set<WebhookEvent> } {
  const where = `monitor.webhooks[${i}]`;
  if (typeof h !== 'object' || h === null) throw new WebhookConfigError(`${where}: not an object`);
  let url: URL;
  try {
    url = new URL(h.url);
  } catch {
    throw new WebhookConfigError(`${where}.url: not a URL`);
  }
  if (url.protocol !== 'http:' && url.protocol !== 'https:') throw new WebhookConfigError(`${where}.url: only http:// and https:// are allowed`);
  if (url.username !== '' || url.password !== '') throw new WebhookConfigError(`${where}.url: no user:password@ (the signature authenticates the server)`);
  if (typeof h.secret !== 'string' || h.secret.length < 16 || h.secret.length > 256) throw new WebhookConfigError(`${where}.secret: must be 16–256 characters`);
  const events = h.events ?? WEBHOOK_EVENTS;
  if (!Array.isArray(events) || events.length === 0) throw new WebhookConfigError(`${where}.events: must be a non-empty list of ${WEBHOOK_EVENTS.join(', ')}`);
  for (const e of events) if (!(WEBHOOK_EVENTS as readonly string[]).includes(e)) throw new WebhookConfigError(`${where}.events: unknown event ${JSON.stringify(e)}`);
  return { url, target: url.origin, key: Buffer.from(h.secret, 'utf8'), events: new Set(events) };
}

/**
 * Sends monitoring events to the configured hooks. `send` never blocks and never throws; each
 * hook has its own bounded queue, one request in flight, retries with back-off and counters.
 */
export class WebhookSender {
  readonly #hooks: HookState[];
  readonly #clock: WebhookClock;
  readonly #random: () => number;
  readonly #queueMax: number;
  readonly #timeoutMs: number;
  readonly #backoffFirstMs: number;
  readonly #backoffMaxMs: number;
  readonly #maxAttempts: number;
  readonly #maxBodyBytes: number;
  readonly #refused = { kind: 0, payload: 0, tooLarge: 0, closed: 0 };
  #closed = false;

  /**
   * @param hooks monitor.webhooks (at most 8; validated again here)
   * @throws WebhookConfigError (a RangeError, code ERR_WEBHOOK_CONFIG) for a hook or option out of range
   */
  constructor(hooks: readonly WebhookHookConfig[], options: WebhookSenderOptions = {}) {
    if (!Array.isArray(hooks)) throw new WebhookConfigError('monitor.webhooks: not a list');
    if (hooks.length > WEBHOOK_MAX_HOOKS) throw new WebhookConfigError(`monitor.webhooks: at most ${WEBHOOK_MAX_HOOKS} hooks, got ${hooks.length}`);
    const d = WEBHOOK_DEFAULTS;
    this.#queueMax = positiveInt('queueMax', options.queueMax, d.queueMax, 1_000_000);
    this.#timeoutMs = positiveInt('timeoutMs', options.timeoutMs, d.timeoutMs, 600_000);
    this.#backoffFirstMs = positiveInt('backoffFirstMs', options.backoffFirstMs, d.backoffFirstMs, 3_600_000);
    this.#backoffMaxMs = positiveInt('backoffMaxMs', options.backoffMaxMs, d.backoffMaxMs, 86_400_000);
    if (this.#backoffMaxMs < this.#backoffFirstMs) throw new WebhookConfigError('backoffMaxMs must be ≥ backoffFirstMs');
    this.#maxAttempts = positiveInt('maxAttempts', options.maxAttempts, d.maxAttempts, 1000);
    this.#maxBodyBytes = positiveInt('maxBodyBytes', options.maxBodyBytes, d.maxBodyBytes, 16 * 1024 * 1024);
    this.#clock = options.clock ?? REAL_CLOCK;
    this.#random = options.random ?? Math.random;
    this.#hooks = hooks.map((h, index) => {
      const p = parseHook(h, index);
      return {
        index,
        ...p,
        queue: new Ring<Delivery>(this.#queueMax),
        current: null,
        currentAttempts: 0,
        state: 'idle',
        request: null,
        abort: null,
        timeoutTimer: null,
        retryTimer: null,
        counts: { sent: 0, attempts: 0, delivered: 0, retries: 0, dropped: 0, abandoned: 0, discarded: 0 },
        failures: { status: 0, timeout: 0, network: 0 },
        lastError: null,
      };
    });
  }

  /** Hooks configured. */
  get hookCount(): number {
    return this.#hooks.length;
  }

  /**
   * Queue `payload` (a JSON-serialisable object) as a `kind` event for every hook that takes that
   * kind. Returns at once; never throws: a bad kind, a payload that is not a JSON object, a body
   * over maxBodyBytes or a closed sender is counted in `refused`.
   */
  send(kind: WebhookEvent, payload: object): void {
    try {
      if (this.#closed) {
        this.#refused.closed++;
        return;
      }
      if (!(WEBHOOK_EVENTS as readonly string[]).includes(kind)) {
        this.#refused.kind++;
        return;
      }
      const takers = this.#hooks.filter((h) => h.events.has(kind));
      if (takers.length === 0) return;
      const id = randomUUID();
      let body: Buffer;
      try {
        if (typeof payload !== 'object' || payload === null || Array.isArray(payload)) throw new TypeError('not an object');
        const text = JSON.stringify({ deliveryId: id, event: kind, createdUtc: new Date(this.#clock.nowMs()).toISOString(), data: payload });
        body = Buffer.from(text, 'utf8');
      } catch {
        this.#refused.payload++;
        return;
      }
      if (body.length > this.#maxBodyBytes) {
        this.#refused.tooLarge++;
        return;
      }
      const delivery: Delivery = { id, kind, body };
      for (const h of takers) {
        h.counts.sent++;
        if (h.queue.push(delivery) !== undefined) h.counts.dropped++;
        this.#pump(h);
      }
    } catch {
      // Nothing above should throw; if it did, the event is counted as refused rather than thrown at the caller.
      this.#refused.payload++;
    }
  }

  /** Counters per hook (no secrets, no paths or credentials). */
  counters(): WebhookCounters {
    return {
      refused: { ...this.#refused },
      hooks: this.#hooks.map((h) => ({
        index: h.index,
        target: h.target,
        events: WEBHOOK_EVENTS.filter((e) => h.events.has(e)),
        state: h.state,
        ...h.counts,
        failures: { ...h.failures },
        queued: h.queue.length,
        lastError: h.lastError === null ? null : { ...h.lastError },
      })),
    };
  }

  /**
   * Stop: clear every timer, abort requests in flight (not counted as failures), discard what
   * waits (counted `discarded`). Later send() calls are refused and counted. Idempotent.
   */
  close(): void {
    if (this.#closed) return;
    this.#closed = true;
    for (const h of this.#hooks) {
      if (h.retryTimer !== null) this.#clock.clearTimer(h.retryTimer);
      if (h.timeoutTimer !== null) this.#clock.clearTimer(h.timeoutTimer);
      h.retryTimer = null;
      h.timeoutTimer = null;
      const abort = h.abort;
      h.abort = null;
      h.request = null;
      if (h.current !== null) h.counts.discarded++;
      h.current = null;
      h.counts.discarded += h.queue.clear();
      h.state = 'closed';
      abort?.abort();
    }
  }

  /** Start the next delivery of `h` when none is being tried. */
  #pump(h: HookState): void {
    if (this.#closed || h.current !== null) return;
    const next = h.queue.shift();
    if (next === undefined) {
      h.state = 'idle';
      return;
    }
    h.current = next;
    h.currentAttempts = 0;
    this.#attempt(h);
  }

  #attempt(h: HookState): void {
    const d = h.current;
    if (d === null || this.#closed) return;
    h.currentAttempts++;
    h.counts.attempts++;
    if (h.currentAttempts > 1) h.counts.retries++;
    h.state = 'in-flight';
    const abort = new AbortController();
    h.abort = abort;
    let settled = false;
    const settle = (outcome: { ok: true } | { ok: false; reason: WebhookFailure; detail: string }) => {
      if (settled) return;
      settled = true;
      if (h.abort !== abort) return; // closed meanwhile: close() has accounted for the delivery
      if (h.timeoutTimer !== null) this.#clock.clearTimer(h.timeoutTimer);
      h.timeoutTimer = null;
      h.abort = null;
      h.request = null;
      this.#finish(h, outcome);
    };
    h.timeoutTimer = this.#clock.setTimer(() => {
      h.timeoutTimer = null;
      settle({ ok: false, reason: 'timeout', detail: `no answer within ${this.#timeoutMs} ms` });
      abort.abort();
    }, this.#timeoutMs);
    try {
      const mod = h.url.protocol === 'https:' ? https : http;
      const req = mod.request(h.url, {
        method: 'POST',
        // A fresh connection per attempt (no keep-alive): a receiver closing an idle socket never
        // turns into a spurious failure, and nothing lingers after close().
        agent: false,
        signal: abort.signal,
        headers: {
          'content-type': 'application/json',
          'content-length': String(d.body.length),
          'user-agent': 'nullsteer-webhooks',
          'x-nullsteer-signature': `sha256=${signatureHex(h.key, d.body)}`,
          'x-nullsteer-delivery': d.id,
          'x-nullsteer-event': d.kind,
          'x-nullsteer-attempt': String(h.currentAttempts),
        },
      });
      h.request = req;
      req.on('response', (res) => {
        const status = res.statusCode ?? 0;
        // The status line decides; the body is not read (bounded: the connection is closed).
        if (status >= 200 && status < 300) settle({ ok: true });
        else settle({ ok: false, reason: 'status', detail: `HTTP ${status}` });
        res.on('error', () => undefined);
        res.destroy();
      });
      req.on('error', (err: NodeJS.ErrnoException) => {
        settle({ ok: false, reason: 'network', detail: typeof err.code === 'string' ? err.code : err.name || 'error' });
      });
      req.end(d.body);
    } catch (err) {
      const code = (err as NodeJS.ErrnoException | null)?.code;
      settle({ ok: false, reason: 'network', detail: typeof code === 'string' ? code : 'request not made' });
    }
  }

  #finish(h: HookState, outcome: { ok: true } | { ok: false; reason: WebhookFailure; detail: string }): void {
    if (outcome.ok) {
      h.counts.delivered++;
      h.current = null;
      this.#pump(h);
      return;
    }
    h.failures[outcome.reason]++;
    h.lastError = { reason: outcome.reason, detail: outcome.detail, atMs: this.#clock.nowMs() };
    if (h.currentAttempts >= this.#maxAttempts) {
      h.counts.abandoned++;
      h.current = null;
      this.#pump(h);
      return;
    }
    h.state = 'backing-off';
    const delayMs = backoffDelayMs(h.currentAttempts, this.#backoffFirstMs, this.#backoffMaxMs, this.#random());
    h.retryTimer = this.#clock.setTimer(() => {
      h.retryTimer = null;
      this.#attempt(h);
    }, delayMs);
  }
}
