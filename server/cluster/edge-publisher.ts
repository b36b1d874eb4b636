/**
 * The edge's side of a site of arrays: this server's rows, peaks, status and journal published on
 * the site's NATS broker under `nullsteer.SITE.NODE.` (shared/site.ts), with JetStream keeping the
 * peaks and the journal in the site's stream.
 *
 * The engine never waits for the broker:
 * - {@link EdgePublisher.row} only queues the row's encoded bytes (the same bytes the dashboards
 *   get) in a bounded queue; publishing, the peak figures and JSON happen later, off the row path.
 * - Core subjects (`rows`, `status`) are sent only while connected, fire-and-forget; while the
 *   broker is away, or while too much is unflushed, they are skipped and counted.
 * - Durable entries (`peaks`, `journal`) wait in the bounded {@link PendingQueue} until JetStream
 *   acknowledges them; they are sent in order, a few in flight, each with the edge's own sequence
 *   number (header `Nullsteer-Edge-Seq`, with the run's id in `Nullsteer-Edge-Run`) and a message
 *   id, so that a resend after a lost acknowledgement is stored once (JetStream's duplicate window).
 * - The connection reconnects forever with the client's own reconnect (maxReconnectAttempts −1,
 *   a growing delay with jitter); a broker problem is a state and a counted error, never a throw.
 */
import { connect, headers, nanos, type NatsConnection } from '@nats-io/transport-node';
import { jetstream, jetstreamManager, StorageType, type JetStreamClient, type StreamConfig } from '@nats-io/jetstream';
import { networkInterfaces } from 'node:os';
import { randomBytes } from 'node:crypto';
import { tryDecodeRow } from '../../shared/messages.ts';
import type { JournalEntry } from '../../shared/session.ts';
import { MAX_SITE_MESSAGE_BYTES, SITE_MESSAGE_VERSION, siteStreamName, siteSubject, siteWildcard, type JournalMessage, type NodeStatusMessage, type PeakMessage, type Pose } from '../../shared/site.ts';
import { PendingQueue } from './pending-queue.ts';
import { sitePeaks, type PeakGrid } from './peak-figures.ts';

/** Header with the edge's sequence number of a durable entry (1, 2, … per run of the edge). */
export const EDGE_SEQ_HEADER = 'Nullsteer-Edge-Seq';
/** Header with the id of the edge's run (a new one each start: the sequence restarts at 1). */
export const EDGE_RUN_HEADER = 'Nullsteer-Edge-Run';

/** Rows waiting to be published (policy when full: the oldest is dropped and counted). */
export const ROW_QUEUE_MAX = 64;
/** Core messages handed to the client and not yet confirmed by a flush: beyond it rows and status are skipped (counted). */
export const MAX_UNFLUSHED = 256;
/** Durable entries sent and not yet acknowledged at any time. */
export const DURABLE_WINDOW = 16;

export type BrokerState = 'connected' | 'reconnecting' | 'off';

/** What the status message says about this edge, asked once a second. */
export interface EdgeDescription {
  arrayName: string;
  channels: number;
  /** Busiest worker's busy fraction, 0–1. */
  load: number;
  dashboardUrl: string | null;
}

export interface EdgePublisherOptions {
  natsUrl: string;
  site: string;
  node: string;
  token: string | null;
  durableMaxAgeS: number;
  durableMaxBytes: number;
  pendingMaxEntries: number;
  sampleRateHz: number;
  /** The array's pose on the site (its file's `pose`), null without one: peaks then carry no site angles. */
  pose: Pose | null;
  describe: () => EdgeDescription;
  /** UTC (ms) of a row: from its sample index where the source keeps a UTC clock, else the row's emission time. */
  utcOfRow?: (sampleIndex: number, emittedAtMs: number) => number;
  /** Mean age of the estimate behind a row's peaks, ms (the covariance's memory; it follows τ live). Absent: not sent. */
  estimateAgeMs?: () => number;
  statusIntervalMs?: number;
  ackTimeoutMs?: number;
  onError?: (message: string) => void;
}

type Kind = 'rows' | 'peaks' | 'status' | 'journal' | 'events';
const kinds = (): Record<Kind, number> => ({ rows: 0, peaks: 0, status: 0, journal: 0, events: 0 });

/** `GET /api/status` → `cluster`. */
export interface ClusterStatus {
  state: BrokerState;
  /** The broker's URL without credentials. */
  url: string | null;
  site: string;
  node: string;
  /** Messages published (core: handed to a connected client; durable: acknowledged by JetStream). */
  published: Record<Kind, number>;
  publishedBytes: Record<Kind, number>;
  /** Core messages not sent because the broker was away or too much was unflushed. */
  skipped: { rows: number; status: number };
  /** Durable entries held for JetStream (queued and in flight). */
  pending: number;
  /** Durable entries dropped for room (pending queue full; peaks first), plus rows dropped before their peaks were read. */
  dropped: number;
  droppedByKind: { peaks: number; journal: number; events: number; rows: number };
  /** Journal entries whose before/after were left out to fit a message. */
  journalTrimmed: number;
  /** The edge's sequence number of the latest durable entry. */
  lastSeq: number;
  streamReady: boolean;
  reconnects: number;
  lastError: string | null;
}

/** `cluster` in status when no broker is configured. */
export function clusterOff(site: string, node: string): ClusterStatus {
  return { state: 'off', url: null, site, node, published: kinds(), publishedBytes: kinds(), skipped: { rows: 0, status: 0 }, pending: 0, dropped: 0, droppedByKind: { peaks: 0, journal: 0, events: 0, rows: 0 }, journalTrimmed: 0, lastSeq: 0, streamReady: false, reconnects: 0, lastError: null };
}

/** The server's own dashboard URL for other machines: its bound address, or a wildcard's first external address. */
export function dashboardUrl(host: string, port: number): string | null {
  let h = host;
  if (host === '0.0.0.0' || host === '::' || host === '') {
    const all = Object.values(networkInterfaces()).flat();
    const ext = all.find((a) => a && !a.internal && a.family === 'IPv4') ?? all.find((a) => a && !a.internal && a.family === 'IPv6' && !a.address.startsWith('fe80'));
    if (!ext) return null;
    h = ext.address;
  }
  return `http://${h.includes(':') && !h.startsWith('[') ? `[${h}]` : h}:${port}/`;
}

/** The URL without user or password (the config's pattern allows none, but status must never show one). */
export function publicNatsUrl(url: string): string {
  try {
    const u = new URL(url);
    return `nats://${u.host}`;
  } catch {
    return 'nats://?';
  }
}

function errText(e: unknown): string {
  const m = e instanceof Error ? e.message : String(e);
  return m.split('\n')[0].slice(0, 200);
}

const enc = new TextEncoder();

export class EdgePublisher {
  readonly #o: EdgePublisherOptions;
  readonly #queue: PendingQueue;
  readonly #subjects: Record<Kind, string>;
  readonly #runId = randomBytes(6).toString('hex');
  readonly #startedMs = performance.now();
  #nc: NatsConnection | null = null;
  #js: JetStreamClient | null = null;
  #state: BrokerState = 'reconnecting';
  #closed = false;
  #streamReady = false;
  #ensuring = false;
  #blockedUntilSettled = false;
  #retryTimer: ReturnType<typeof setTimeout> | null = null;
  #statusTimer: ReturnType<typeof setInterval> | null = null;
  #rows: { bytes: Uint8Array; grid: PeakGrid }[] = [];
  #drainScheduled = false;
  #unflushed = 0;
  #flushing = false;
  #scratch = new Float64Array(0);
  readonly #published = kinds();
  readonly #bytes = kinds();
  readonly #skipped = { rows: 0, status: 0 };
  #rowsDropped = 0;
  #journalTrimmed = 0;
  #reconnects = 0;
  #lastError: string | null = null;
  #attempt = 0;
  // For the status message: rows seen, the latest row's sample index and UTC.
  #rowsSeen = 0;
  #rowsAtTick = 0;
  #tickMs = performance.now();
  #rowsPerS = 0;
  #lastRowMs = -Infinity;
  #sampleIndex: number | null = null;
  #sampleUtcMs: number | null = null;

  constructor(opts: EdgePublisherOptions) {
    this.#o = opts;
    this.#queue = new PendingQueue(opts.pendingMaxEntries);
    this.#subjects = { rows: siteSubject(opts.site, opts.node, 'rows'), peaks: siteSubject(opts.site, opts.node, 'peaks'), status: siteSubject(opts.site, opts.node, 'status'), journal: siteSubject(opts.site, opts.node, 'journal'), events: siteSubject(opts.site, opts.node, 'events') };
    this.#statusTimer = setInterval(() => this.#sendStatus(), opts.statusIntervalMs ?? 1000);
    this.#statusTimer.unref?.();
    void this.#connectLoop();
  }

  get state(): BrokerState {
    return this.#state;
  }

  /**
   * A row the engine emitted and its encoded bytes (shared/messages.ts encodeRow; not written to
   * afterwards). Queues them and returns: O(1), no encoding, no I/O.
   * @param grid the direction grid the row was scanned on
   */
  row(bytes: Uint8Array, grid: PeakGrid): void {
    if (this.#closed) return;
    if (this.#rows.length >= ROW_QUEUE_MAX) {
      this.#rows.shift();
      this.#rowsDropped++;
    }
    this.#rows.push({ bytes, grid });
    if (!this.#drainScheduled) {
      this.#drainScheduled = true;
      setImmediate(() => this.#drainRows());
    }
  }

  /**
   * A monitoring event's change (server/monitor/events.ts), published durably on
   * `nullsteer.SITE.NODE.events` as `{ v, site, node, change, event }`; it waits in the pending queue
   * like a journal entry (peaks are dropped before it).
   */
  event(change: 'started' | 'updated' | 'ended', event: object): void {
    if (this.#closed) return;
    try {
      const data = enc.encode(JSON.stringify({ v: SITE_MESSAGE_VERSION, site: this.#o.site, node: this.#o.node, change, event }));
      if (data.byteLength > MAX_SITE_MESSAGE_BYTES) return this.#error(`event larger than ${MAX_SITE_MESSAGE_BYTES} bytes: not published`);
      this.#queue.push('events', this.#subjects.events, data);
      this.#pump();
    } catch (e) {
      this.#error(`event: ${errText(e)}`);
    }
  }

  /** A journal entry as appended: published durably as a JournalMessage. */
  journal(entry: JournalEntry): void {
    if (this.#closed) return;
    try {
      const msg: JournalMessage = { v: SITE_MESSAGE_VERSION, site: this.#o.site, node: this.#o.node, entry };
      let data = enc.encode(JSON.stringify(msg));
      if (data.byteLength > MAX_SITE_MESSAGE_BYTES) {
        // Too large for the site's readers: the entry without its before/after, said in its summary.
        this.#journalTrimmed++;
        const summary = `${entry.summary.slice(0, 1800)} (before/after left out: larger than ${MAX_SITE_MESSAGE_BYTES} bytes)`;
        data = enc.encode(JSON.stringify({ ...msg, entry: { ...entry, summary, before: null, after: null } }));
      }
      this.#queue.push('journal', this.#subjects.journal, data);
      this.#pump();
    } catch (e) {
      this.#error(`journal entry ${entry.seq}: ${errText(e)}`);
    }
  }

  status(): ClusterStatus {
    const q = this.#queue.counts();
    return {
      state: this.#state,
      url: publicNatsUrl(this.#o.natsUrl),
      site: this.#o.site,
      node: this.#o.node,
      published: { ...this.#published },
      publishedBytes: { ...this.#bytes },
      skipped: { ...this.#skipped },
      pending: q.pending,
      dropped: q.dropped.peaks + q.dropped.journal + q.dropped.events + this.#rowsDropped,
      droppedByKind: { peaks: q.dropped.peaks, journal: q.dropped.journal, events: q.dropped.events, rows: this.#rowsDropped },
      journalTrimmed: this.#journalTrimmed,
      lastSeq: q.lastSeq,
      streamReady: this.#streamReady,
      reconnects: this.#reconnects,
      lastError: this.#lastError,
    };
  }

  /** Stop: durable entries get up to `drainMs` to be acknowledged (what is left is counted in status), then the connection closes. */
  async close(drainMs = 1000): Promise<void> {
    if (this.#closed) return;
    if (this.#state === 'connected' && this.#queue.size > 0) {
      const until = performance.now() + drainMs;
      while (this.#queue.size > 0 && this.#state === 'connected' && performance.now() < until) await new Promise((r) => setTimeout(r, 20));
    }
    this.#closed = true;
    this.#state = 'off';
    if (this.#statusTimer) clearInterval(this.#statusTimer);
    if (this.#retryTimer) clearTimeout(this.#retryTimer);
    const nc = this.#nc;
    this.#nc = null;
    this.#js = null;
    await nc?.close().catch(() => undefined);
  }

  #error(m: string): void {
    this.#lastError = m;
    this.#o.onError?.(m);
  }

  /** Delay before the next connection attempt: 100 ms doubling to 2 s, plus up to 25 % jitter. */
  #delayMs(): number {
    const base = Math.min(2000, 100 * 2 ** Math.min(this.#attempt++, 5));
    return base + Math.random() * 0.25 * base;
  }

  async #connectLoop(): Promise<void> {
    while (!this.#closed) {
      let nc: NatsConnection;
      try {
        nc = await connect({
          servers: this.#o.natsUrl,
          ...(this.#o.token ? { token: this.#o.token } : {}),
          name: `nullsteer edge ${this.#o.site}/${this.#o.node}`,
          maxReconnectAttempts: -1,
          waitOnFirstConnect: true,
          reconnectDelayHandler: () => this.#delayMs(),
          pingInterval: 5000,
          maxPingOut: 2,
          timeout: 5000,
          ignoreClusterUpdates: true,
        });
      } catch (e) {
        // Refused outright (e.g. authentication): try again later, the same way.
        this.#error(`broker: ${errText(e)}`);
        await new Promise((r) => setTimeout(r, Math.max(2000, this.#delayMs())));
        continue;
      }
      if (this.#closed) {
        await nc.close().catch(() => undefined);
        return;
      }
      this.#attempt = 0;
      this.#nc = nc;
      this.#js = jetstream(nc, { timeout: this.#o.ackTimeoutMs ?? 5000 });
      this.#connected();
      void this.#watch(nc);
      const done = await nc.closed();
      if (this.#closed) return;
      if (done instanceof Error) this.#error(`broker: ${errText(done)}`);
      this.#nc = null;
      this.#js = null;
      this.#state = 'reconnecting';
      this.#streamReady = false;
      await new Promise((r) => setTimeout(r, this.#delayMs()));
    }
  }

  async #watch(nc: NatsConnection): Promise<void> {
    try {
      for await (const s of nc.status()) {
        if (this.#closed || this.#nc !== nc) return;
        if (s.type === 'disconnect') {
          this.#state = 'reconnecting';
          this.#streamReady = false;
          this.#unflushed = 0;
        } else if (s.type === 'reconnect') {
          this.#attempt = 0;
          this.#reconnects++;
          this.#connected();
        } else if (s.type === 'error') this.#error(`broker: ${errText(s.error)}`);
      }
    } catch (e) {
      this.#error(`broker status: ${errText(e)}`);
    }
  }

  #connected(): void {
    this.#state = 'connected';
    this.#unflushed = 0;
    this.#flushing = false;
    void this.#ensureStream();
  }

  /** The site's stream over every node's peaks and journal, created or brought to the configured retention. */
  async #ensureStream(): Promise<void> {
    const nc = this.#nc;
    if (!nc || this.#ensuring) return;
    this.#ensuring = true;
    try {
      const jsm = await jetstreamManager(nc, { timeout: this.#o.ackTimeoutMs ?? 5000 });
      const name = siteStreamName(this.#o.site);
      const subjects = [siteWildcard(this.#o.site, 'peaks'), siteWildcard(this.#o.site, 'journal'), siteWildcard(this.#o.site, 'events')];
      const maxAgeMs = this.#o.durableMaxAgeS * 1000;
      const want: Partial<StreamConfig> = { subjects, max_age: nanos(maxAgeMs), max_bytes: this.#o.durableMaxBytes, duplicate_window: nanos(Math.min(120_000, maxAgeMs)) };
      let info = null;
      try {
        info = await jsm.streams.info(name);
      } catch (e) {
        if (!/not found/i.test(errText(e))) throw e;
      }
      if (!info) {
        try {
          await jsm.streams.add({ name, storage: StorageType.File, ...want });
        } catch (e) {
          // Another edge of the site created it meanwhile.
          if (!/already in use/i.test(errText(e))) throw e;
        }
      } else {
        const c = info.config;
        const same = c.max_age === want.max_age && c.max_bytes === want.max_bytes && subjects.every((s) => c.subjects?.includes(s));
        if (!same) await jsm.streams.update(name, { ...c, ...want, subjects: [...new Set([...(c.subjects ?? []), ...subjects])] });
      }
      if (this.#nc === nc) this.#streamReady = true;
    } catch (e) {
      this.#error(`stream ${siteStreamName(this.#o.site)}: ${errText(e)}`);
      this.#retryLater();
    } finally {
      this.#ensuring = false;
    }
    this.#pump();
  }

  #retryLater(): void {
    if (this.#retryTimer || this.#closed) return;
    this.#retryTimer = setTimeout(() => {
      this.#retryTimer = null;
      this.#blockedUntilSettled = false;
      if (this.#state === 'connected' && !this.#streamReady) void this.#ensureStream();
      else this.#pump();
    }, 1000);
    this.#retryTimer.unref?.();
  }

  /** Send queued durable entries in order while connected, at most DURABLE_WINDOW unacknowledged. */
  #pump(): void {
    const js = this.#js;
    if (!js || this.#state !== 'connected' || !this.#streamReady || this.#blockedUntilSettled || this.#closed) return;
    while (this.#queue.inFlight < DURABLE_WINDOW) {
      const e = this.#queue.take();
      if (!e) return;
      const h = headers();
      h.set(EDGE_SEQ_HEADER, String(e.seq));
      h.set(EDGE_RUN_HEADER, this.#runId);
      js.publish(e.subject, e.data, { msgID: `${this.#o.node}.${this.#runId}.${e.seq}`, headers: h, timeout: this.#o.ackTimeoutMs ?? 5000 }).then(
        () => {
          this.#queue.ack(e);
          this.#published[e.kind]++;
          this.#bytes[e.kind] += e.data.byteLength;
          this.#pump();
        },
        (err: unknown) => {
          this.#queue.fail(e);
          // Keep the order: nothing new goes out until every entry in flight has settled, then a retry.
          this.#blockedUntilSettled = true;
          // The stream may be gone (deleted, a broker with a fresh store): checked again before the retry.
          this.#streamReady = false;
          if (!this.#closed) this.#error(`JetStream ${e.kind} ${e.seq}: ${errText(err)}`);
          if (this.#queue.inFlight === 0) this.#retryLater();
        },
      );
    }
  }

  /** Publish a core message if connected and not too much is unflushed; false when skipped. */
  #core(kind: 'rows' | 'status', data: Uint8Array): boolean {
    const nc = this.#nc;
    if (!nc || this.#state !== 'connected' || this.#unflushed >= MAX_UNFLUSHED) {
      this.#skipped[kind]++;
      return false;
    }
    try {
      nc.publish(this.#subjects[kind], data);
    } catch (e) {
      this.#skipped[kind]++;
      this.#error(`publish ${kind}: ${errText(e)}`);
      return false;
    }
    this.#published[kind]++;
    this.#bytes[kind] += data.byteLength;
    this.#unflushed++;
    if (!this.#flushing && this.#unflushed >= 16) {
      this.#flushing = true;
      const mark = this.#unflushed;
      nc.flush().then(
        () => {
          if (this.#nc === nc) this.#unflushed = Math.max(0, this.#unflushed - mark);
          this.#flushing = false;
        },
        () => {
          this.#flushing = false;
        },
      );
    }
    return true;
  }

  #drainRows(): void {
    this.#drainScheduled = false;
    const rows = this.#rows;
    this.#rows = [];
    for (const { bytes, grid } of rows) {
      try {
        this.#oneRow(bytes, grid);
      } catch (e) {
        this.#error(`row: ${errText(e)}`);
      }
    }
  }

  #oneRow(bytes: Uint8Array, grid: PeakGrid): void {
    const r = tryDecodeRow(bytes);
    if (!r.ok) return;
    const row = r.row;
    this.#rowsSeen++;
    this.#lastRowMs = performance.now();
    const utcMs = this.#o.utcOfRow ? this.#o.utcOfRow(row.sampleIndex, row.emittedAtMs) : row.emittedAtMs;
    this.#sampleIndex = row.sampleIndex;
    this.#sampleUtcMs = utcMs;
    this.#core('rows', bytes);
    if (!row.mvdrDb || row.peaks.mvdr.length === 0 || row.nAz !== grid.nAz || row.nEl !== grid.nEl) return;
    const d = grid.nAz * grid.nEl;
    if (this.#scratch.length < d) this.#scratch = new Float64Array(d);
    const peaks = sitePeaks(row.mvdrDb, row.peaks.mvdr, grid, this.#o.pose, this.#scratch);
    if (!peaks || peaks.length === 0) return;
    const msg: PeakMessage = { v: SITE_MESSAGE_VERSION, site: this.#o.site, node: this.#o.node, sampleIndex: Math.max(0, row.sampleIndex), sampleRateHz: this.#o.sampleRateHz, utcMs, ...this.#age(), peaks };
    this.#queue.push('peaks', this.#subjects.peaks, enc.encode(JSON.stringify(msg)));
    this.#pump();
  }

  #age(): { ageMs?: number } {
    const a = this.#o.estimateAgeMs?.();
    return a !== undefined && Number.isFinite(a) && a >= 0 ? { ageMs: Math.round(a * 1000) / 1000 } : {};
  }

  #sendStatus(): void {
    if (this.#closed) return;
    try {
      const now = performance.now();
      const dt = (now - this.#tickMs) / 1000;
      if (dt > 0) this.#rowsPerS = (this.#rowsSeen - this.#rowsAtTick) / dt;
      this.#rowsAtTick = this.#rowsSeen;
      this.#tickMs = now;
      const d = this.#o.describe();
      const q = this.#queue.counts();
      const msg: NodeStatusMessage = {
        v: SITE_MESSAGE_VERSION,
        site: this.#o.site,
        node: this.#o.node,
        sentUtcMs: Date.now(),
        uptimeS: (now - this.#startedMs) / 1000,
        arrayName: d.arrayName.slice(0, 200),
        channels: d.channels,
        pose: this.#o.pose,
        sampleRateHz: this.#o.sampleRateHz,
        sampleIndex: this.#sampleIndex,
        sampleUtcMs: this.#sampleUtcMs,
        rowsPerS: Math.min(10000, this.#rowsPerS),
        load: Math.min(100, Math.max(0, Number.isFinite(d.load) ? d.load : 0)),
        input: now - this.#lastRowMs < 2000 ? 'flowing' : 'waiting',
        dashboardUrl: d.dashboardUrl,
        pending: q.pending,
        dropped: q.dropped.peaks + q.dropped.journal + this.#rowsDropped,
      };
      this.#core('status', enc.encode(JSON.stringify(msg)));
    } catch (e) {
      this.#error(`status: ${errText(e)}`);
    }
  }
}
