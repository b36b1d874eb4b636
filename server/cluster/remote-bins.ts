/**
 * The engine's side of remote bin workers: who is on the broker (heartbeats), which bin ranges of
 * the plan in force they hold (parts), the hop batches sent to them and the parts they answer.
 * The engine (engine.ts) decides the plan; this module carries it:
 *
 * - Members: a worker is a candidate once its heartbeats have come for JOIN_STABLE_MS; it is lost
 *   when they stop for HELLO_TIMEOUT_MS, when it says it is leaving, or when the engine finds its
 *   part silent past the deadline for `dropMs`. A lost worker is left out of plans for
 *   LOST_COOLDOWN_MS (a worker that keeps failing does not make the engine re-plan over and over).
 * - Plans: `prepare` asks each chosen worker to build its part (request/reply, bounded wait);
 *   `commit` makes them the parts in force. Every message carries the plan's epoch; a part of an
 *   old epoch is counted and ignored here, a batch of an old epoch by the worker.
 * - Hops: `onHop` copies each remote part's bins of the hop just published (float32) into its
 *   batch and sends the batch at every scan hop or when HOP_BATCH_MAX hops wait; the ring slot is
 *   free once copied. Nothing here waits for the broker: while it is away the client buffers (its
 *   own bound), the parts go silent, and the engine falls back to its local threads.
 */
import { connect, type NatsConnection, type Subscription } from '@nats-io/transport-node';
import { randomBytes } from 'node:crypto';
import { publicText } from '../public-text.ts';
import {
  AlignedScratch,
  assertLittleEndian,
  brokerOptions,
  encodeJson,
  HELLO_SUBJECT,
  HOP_BATCH_MAX,
  HopBatchWriter,
  hopsSubject,
  parseHello,
  parsePart,
  parsePlanReply,
  PART_BEAMS_MAX,
  PART_HEADER_BYTES,
  partsSubject,
  workerSubject,
  type CtrlMessage,
  type Part,
  type RemotePlan,
} from './remote-wire.ts';

export const JOIN_STABLE_MS = 1000;
export const HELLO_TIMEOUT_MS = 1500;
export const LOST_COOLDOWN_MS = 10_000;
/** Members remembered at most (heartbeats of more workers than this are counted and ignored). */
export const MAX_MEMBERS = 64;
export const PLAN_REPLY_TIMEOUT_MS = 5000;

export interface RemoteBinsOptions {
  natsUrl: string;
  token?: string | null;
  /** How long the combiner waits for a remote part before emitting the row partial, ms. */
  deadlineMs: number;
  /** A part silent past its deadline for this long: its worker is dropped and its bins re-planned, ms. */
  dropMs: number;
  log?: (line: string) => void;
}

export interface RemoteMember {
  id: string;
  name: string;
  throughputBinsPerS: number | null;
  firstSeenMs: number;
  lastHelloMs: number;
  lostUntilMs: number;
  lostReason: string | null;
}

export interface RemotePartState {
  part: number;
  memberId: string;
  firstBin: number;
  bins: number;
  /** Offset of the part's first bin in a ring slot, doubles. */
  offsetDoubles: number;
  writer: HopBatchWriter;
  bytesSent: number;
  bytesReceived: number;
  lastAnswerMs: number | null;
  /** Since when the part has missed a deadline without answering since (null: answering). */
  missedSinceMs: number | null;
}

export interface RemoteEvents {
  /** A part of the plan in force (epoch and part index checked by the engine). */
  onPart(p: Part): void;
  /** The set of usable workers changed (`lost`: a worker of the plan in force is gone). */
  onMembership(reason: string, lost: boolean): void;
}

export class RemoteBins {
  readonly engineId = randomBytes(6).toString('hex');
  readonly opts: RemoteBinsOptions;
  #nc: NatsConnection | null = null;
  #subs: Subscription[] = [];
  #members = new Map<string, RemoteMember>();
  #parts: RemotePartState[] = [];
  #considered = new Set<string>();
  #epoch = 0;
  #events: RemoteEvents | null = null;
  #scratch = new AlignedScratch();
  #timer: NodeJS.Timeout | null = null;
  #closed = false;
  #limits = { maxDirections: 1, maxWeightsPerBeam: 0 };
  broker: 'connected' | 'reconnecting' | 'off' = 'off';
  readonly dropped: Record<string, number> = {};
  oldEpochMessages = 0;
  lateParts = 0;
  #bytesWindow: { atMs: number; bytes: Map<string, number> } = { atMs: performance.now(), bytes: new Map() };
  #rates = new Map<string, number>();

  private constructor(o: RemoteBinsOptions) {
    this.opts = o;
  }

  /**
   * Start connecting (in the background: an engine never waits for the broker; until connected no
   * remote worker is a candidate and the plan is local). `await ready` to wait for the first connection.
   */
  static start(o: RemoteBinsOptions): RemoteBins {
    assertLittleEndian();
    const r = new RemoteBins(o);
    r.broker = 'reconnecting';
    r.ready = r.#connect().catch((e) => {
      r.opts.log?.(`remote workers: cannot connect to ${o.natsUrl}: ${publicText(e)}`);
    });
    r.#timer = setInterval(() => r.#tick(), 100);
    r.#timer.unref();
    return r;
  }

  /** Settles when the first connection is made (or has failed for good). */
  ready: Promise<void> = Promise.resolve();

  async #connect(): Promise<void> {
    const o = this.opts;
    const nc = await connect(brokerOptions(o.natsUrl, o.token, `nullsteer engine ${this.engineId}`));
    if (this.#closed) {
      await nc.close();
      return;
    }
    this.#nc = nc;
    this.broker = 'connected';
    void (async () => {
      for await (const s of nc.status()) {
        if (s.type === 'disconnect' || s.type === 'reconnecting') this.broker = 'reconnecting';
        else if (s.type === 'reconnect') this.broker = 'connected';
      }
    })().catch(() => {});
    this.#subs.push(nc.subscribe(HELLO_SUBJECT, { callback: (err, m) => void (err || this.#onHello(m.data)) }));
    this.#subs.push(nc.subscribe(partsSubject(this.engineId), { callback: (err, m) => void (err || this.#onPart(m.data)) }));
  }

  attach(events: RemoteEvents): void {
    this.#events = events;
  }

  #drop(reason: string): void {
    this.dropped[reason] = (this.dropped[reason] ?? 0) + 1;
  }

  #onHello(data: Uint8Array): void {
    const p = parseHello(data);
    if (!p.ok) return this.#drop(`hello-${p.reason}`);
    const h = p.value;
    const now = performance.now();
    let m = this.#members.get(h.id);
    if (!m) {
      if (h.leaving) return;
      if (this.#members.size >= MAX_MEMBERS) return this.#drop('hello-too-many');
      m = { id: h.id, name: h.name, throughputBinsPerS: null, firstSeenMs: now, lastHelloMs: now, lostUntilMs: 0, lostReason: null };
      this.#members.set(h.id, m);
    }
    // A worker back after a silence longer than the timeout starts its join wait again.
    if (now - m.lastHelloMs > HELLO_TIMEOUT_MS) m.firstSeenMs = now;
    m.lastHelloMs = now;
    m.name = h.name;
    m.throughputBinsPerS = h.throughputBinsPerS;
    if (h.leaving) this.#lose(m, 'the worker said it is leaving');
  }

  #lose(m: RemoteMember, reason: string): void {
    const now = performance.now();
    if (m.lostUntilMs > now) return;
    m.lostUntilMs = now + LOST_COOLDOWN_MS;
    m.lostReason = reason;
    this.#considered.delete(m.id);
    const inPlan = this.#parts.some((p) => p.memberId === m.id);
    this.opts.log?.(`remote worker ${m.name} (${m.id}) lost: ${reason}`);
    if (inPlan) this.#events?.onMembership(`remote worker ${m.name} lost: ${reason}`, true);
  }

  /** Called by the engine: this part missed the deadline of a scan (the row went out partial). */
  missed(part: number): void {
    const p = this.#parts.find((x) => x.part === part);
    if (p && p.missedSinceMs === null) p.missedSinceMs = performance.now();
  }

  #tick(): void {
    const now = performance.now();
    for (const m of this.#members.values()) {
      const silent = now - m.lastHelloMs;
      if (silent > HELLO_TIMEOUT_MS && m.lostUntilMs <= now && this.#parts.some((p) => p.memberId === m.id)) this.#lose(m, `no heartbeat for ${Math.round(silent)} ms`);
      // Forget workers long gone (bounded registry).
      if (silent > 60_000 && !this.#parts.some((p) => p.memberId === m.id)) this.#members.delete(m.id);
    }
    for (const p of this.#parts) {
      const m = this.#members.get(p.memberId);
      if (m && p.missedSinceMs !== null && now - p.missedSinceMs > this.opts.dropMs) this.#lose(m, `no answer for ${Math.round(now - p.missedSinceMs + this.opts.deadlineMs)} ms`);
    }
    // A usable worker the plan in force did not weigh: a re-plan would take it (the engine limits how often).
    const joinable = this.candidates().some((c) => !this.#considered.has(c.id) && !this.#parts.some((p) => p.memberId === c.id));
    if (joinable) this.#events?.onMembership('a remote worker joined', false);
    if (now - this.#bytesWindow.atMs >= 1000) {
      const dt = (now - this.#bytesWindow.atMs) / 1000;
      this.#rates = new Map([...this.#bytesWindow.bytes].map(([k, v]) => [k, v / dt]));
      this.#bytesWindow = { atMs: now, bytes: new Map() };
    }
  }

  /** Workers a new plan may use: heard for JOIN_STABLE_MS, heard lately, not in their lost cool-down. */
  candidates(): RemoteMember[] {
    const now = performance.now();
    if (this.broker !== 'connected') return [];
    return [...this.#members.values()].filter((m) => now - m.firstSeenMs >= JOIN_STABLE_MS && now - m.lastHelloMs <= HELLO_TIMEOUT_MS && m.lostUntilMs <= now).sort((a, b) => (a.id < b.id ? -1 : 1));
  }

  /**
   * Most bins one remote part may hold so that its answer fits one broker message (all beams, every
   * direction) and one hop of it is at most a quarter of a batch's room.
   */
  maxBinsPerPart(channels: number, directions: number): number {
    const maxPayload = this.#nc?.info?.max_payload ?? 1 << 20;
    const fixed = PART_HEADER_BYTES + 8 * PART_BEAMS_MAX + 16 * directions + 8 * PART_BEAMS_MAX * (directions + 1);
    const perBinAnswer = 4 * PART_BEAMS_MAX * 2 * channels;
    const perBinHop = 8 * channels;
    return Math.max(0, Math.min(Math.floor((maxPayload - fixed) / perBinAnswer), Math.floor(maxPayload / 4 / perBinHop)));
  }

  /**
   * Ask each chosen worker to build its part of plan `epoch`. Resolves with the members that refused
   * or did not answer within the timeout (the engine plans again without them).
   */
  async prepare(plans: { memberId: string; plan: RemotePlan }[], timeoutMs = PLAN_REPLY_TIMEOUT_MS): Promise<{ failed: string[] }> {
    const nc = this.#nc;
    const failed: string[] = [];
    await Promise.all(
      plans.map(async ({ memberId, plan }) => {
        const m = this.#members.get(memberId);
        try {
          if (!nc) throw new Error('no broker');
          const reply = await nc.request(workerSubject(memberId, 'plan'), encodeJson(plan), { timeout: timeoutMs });
          const r = parsePlanReply(reply.data);
          if (!r.ok) throw new Error(`bad reply: ${r.reason}`);
          if (!r.value.ok) throw new Error(r.value.message);
          if (r.value.epoch !== plan.epoch) throw new Error(`reply for epoch ${r.value.epoch}`);
        } catch (e) {
          failed.push(memberId);
          if (m) this.#lose(m, `plan not built: ${publicText(e).split('\n')[0].slice(0, 200)}`);
        }
      }),
    );
    return { failed };
  }

  /** The parts of the plan in force (after the engine committed `epoch`); workers left out are released. */
  commit(epoch: number, parts: { part: number; memberId: string; firstBin: number; bins: number; offsetDoubles: number }[], channels: number, limits: { maxDirections: number; maxWeightsPerBeam: number }, considered: readonly string[]): void {
    const before = new Set(this.#parts.map((p) => p.memberId));
    // Workers this plan weighed and left out (no bins left for them) do not ask for a re-plan again
    // (a worker lost meanwhile is weighed again when its cool-down ends).
    const now = performance.now();
    this.#considered = new Set(considered.filter((id) => !((this.#members.get(id)?.lostUntilMs ?? 0) > now)));
    this.#epoch = epoch;
    this.#limits = limits;
    this.#parts = parts.map((p) => ({ ...p, writer: new HopBatchWriter(channels, p.bins, HOP_BATCH_MAX), bytesSent: 0, bytesReceived: 0, lastAnswerMs: null, missedSinceMs: null }));
    for (const id of before) if (!parts.some((p) => p.memberId === id)) this.#ctrlTo(id, { v: 1, type: 'release', engine: this.engineId, epoch });
  }

  get parts(): readonly RemotePartState[] {
    return this.#parts;
  }

  /**
   * The hop with sequence `seq` (0, 1, … per plan) was just written: copy each part's bins from the
   * ring slot (at `slotOffset` doubles) with the hop's meta, and send the batches due.
   */
  onHop(ring: Float64Array, slotOffset: number, meta: Float64Array, metaOffset: number, seq: number, scan: boolean): void {
    const t0 = performance.now();
    for (const p of this.#parts) {
      const w = p.writer;
      if (w.hops === 0) w.begin(this.#epoch, p.part, seq);
      w.add(meta, metaOffset, ring, slotOffset + p.offsetDoubles);
      if (scan || w.full) this.#send(p);
    }
    this.frontEndMs += performance.now() - t0;
  }

  /** Main-thread time spent copying hops into batches and handing them to the client, ms (the front end's cost). */
  frontEndMs = 0;
  /** Bytes of hop batches published, and of parts received, since start. */
  bytesPublished = 0;
  bytesReceived = 0;

  #send(p: RemotePartState): void {
    const bytes = p.writer.finish();
    p.writer.hops = 0;
    if (!this.#nc || this.#closed) return;
    try {
      // A copy: the client holds the bytes it is given until its next flush, and the writer is reused.
      this.#nc.publish(hopsSubject(p.memberId, this.engineId), bytes.slice());
      p.bytesSent += bytes.byteLength;
      this.bytesPublished += bytes.byteLength;
      this.#bytesWindow.bytes.set(p.memberId, (this.#bytesWindow.bytes.get(p.memberId) ?? 0) + bytes.byteLength);
    } catch {
      this.#drop('publish');
    }
  }

  /** Mask, grid and beam changes for every worker of the plan in force. */
  control(m: CtrlMessage extends infer T ? (T extends CtrlMessage ? Omit<T, 'v' | 'engine' | 'epoch'> : never) : never): void {
    for (const p of this.#parts) this.#ctrlTo(p.memberId, { ...m, v: 1, engine: this.engineId, epoch: this.#epoch } as CtrlMessage);
  }

  #ctrlTo(id: string, m: CtrlMessage): void {
    try {
      this.#nc?.publish(workerSubject(id, 'ctrl'), encodeJson(m));
    } catch {
      this.#drop('publish');
    }
  }

  #onPart(data: Uint8Array): void {
    const r = parsePart(this.#scratch.align(data), this.#limits);
    if (!r.ok) return this.#drop(`part-${r.reason}`);
    const part = r.value;
    if (part.epoch !== this.#epoch) {
      this.oldEpochMessages++;
      return;
    }
    const p = this.#parts.find((x) => x.part === part.part);
    if (!p) return this.#drop('part-unknown');
    p.lastAnswerMs = performance.now();
    p.missedSinceMs = null;
    p.bytesReceived += data.byteLength;
    this.bytesReceived += data.byteLength;
    this.#bytesWindow.bytes.set(p.memberId, (this.#bytesWindow.bytes.get(p.memberId) ?? 0) + data.byteLength);
    this.#events?.onPart(part);
  }

  status(localThreads: number): Record<string, unknown> {
    const now = performance.now();
    const inPlan = new Map(this.#parts.map((p) => [p.memberId, p]));
    const workers = [...this.#members.values()].map((m) => {
      const p = inPlan.get(m.id);
      const lost = m.lostUntilMs > now || now - m.lastHelloMs > HELLO_TIMEOUT_MS;
      return {
        name: m.name,
        id: m.id,
        bins: p?.bins ?? 0,
        firstBin: p?.firstBin ?? null,
        throughputBinsPerS: m.throughputBinsPerS,
        lastAnswerAgeMs: p?.lastAnswerMs != null ? Math.round(now - p.lastAnswerMs) : null,
        bytesPerS: Math.round(this.#rates.get(m.id) ?? 0),
        state: lost ? 'lost' : p ? 'active' : 'joining',
        ...(m.lostReason ? { lastLoss: m.lostReason } : {}),
      };
    });
    return {
      enabled: true,
      engineId: this.engineId,
      broker: this.broker,
      mode: this.#parts.length > 0 ? 'remote' : 'local-fallback',
      localThreads,
      epoch: this.#epoch,
      workers,
      lateParts: this.lateParts,
      oldEpochMessages: this.oldEpochMessages,
      dropped: { ...this.dropped },
    };
  }

  async close(): Promise<void> {
    if (this.#closed) return;
    for (const p of this.#parts) this.#ctrlTo(p.memberId, { v: 1, type: 'release', engine: this.engineId, epoch: this.#epoch });
    this.#closed = true;
    if (this.#timer) clearInterval(this.#timer);
    const nc = this.#nc;
    this.#nc = null;
    if (nc) await nc.drain().catch(() => nc.close());
  }
}
