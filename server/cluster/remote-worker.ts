/**
 * A remote bin worker (`nullsteer worker --nats URL`): it announces itself on the broker, builds the
 * bin ranges engines assign to it (the same BinProcessor a local bin worker thread runs), keeps their
 * covariance from the hop batches the engines publish, and answers each scan with its share of the
 * spectra, beam responses and weights (remote-wire.ts has the messages).
 *
 * Every message is parsed by a closed parser and a bad one is dropped and counted by reason; a
 * batch from an old epoch is counted and ignored; a gap in an engine's hop sequence (a batch lost
 * on the way, the worker too slow for the broker) restarts that range's covariance and is counted.
 * Memory is bounded: at most MAX_ENGINES plans held (each sized by PLAN_LIMITS), one staged plan per
 * engine, and a plan that saw no hop for IDLE_RELEASE_MS is released.
 */
import { connect, type NatsConnection, type Msg, type Subscription } from '@nats-io/transport-node';
import { randomBytes } from 'node:crypto';
import { BinProcessor } from '../engine/bin-processor.ts';
import { FLAG_BEAMS, FLAG_RESET, gridFromMessage, LOAD_FIXED, LOAD_RELATIVE, LOAD_WNG, loadingAt, MAX_BEAMS } from '../engine/protocol.ts';
import { publicText } from '../public-text.ts';
import {
  AlignedScratch,
  assertLittleEndian,
  brokerOptions,
  encodeJson,
  HELLO_SUBJECT,
  HOP_META_DOUBLES,
  hopsSubject,
  parseCtrl,
  parseHopBatch,
  parsePlan,
  partBytes,
  partsSubject,
  PLAN_LIMITS,
  workerSubject,
  writePart,
  type HelloMessage,
  type PlanReply,
  type RemoteBeam,
  type RemotePlan,
} from './remote-wire.ts';

/** Engines whose plans one worker holds at once; a further plan is refused. */
export const MAX_ENGINES = 8;
/** A plan that received no hop batch for this long is released (its engine went away). */
export const IDLE_RELEASE_MS = 30_000;
export const HEARTBEAT_MS = 500;

export interface RemoteWorkerOptions {
  natsUrl: string;
  token?: string | null;
  /** Shown in the engine's status: host name, or what --name says. */
  name: string;
  /** Subject token; random when absent. */
  id?: string;
  heartbeatMs?: number;
  log?: (line: string) => void;
}

interface Assignment {
  engine: string;
  epoch: number;
  part: number;
  proc: BinProcessor;
  channels: number;
  bins: number;
  beams: RemoteBeam[];
  nextSeq: number;
  snap: Float64Array;
  conv: Float64Array;
  mvdr: Float64Array;
  beamOut: Float64Array;
  weights: Float64Array;
  out: Uint8Array;
  busyMs: number;
  hops: number;
  scans: number;
  gaps: number;
  lastHopMs: number;
}

function sizeBuffers(a: Assignment): void {
  const D = a.proc.directions;
  const W = 2 * a.channels * a.bins;
  a.conv = new Float64Array(D);
  a.mvdr = new Float64Array(D);
  a.beamOut = new Float64Array(MAX_BEAMS * (D + 1));
  a.weights = new Float64Array(MAX_BEAMS * W);
  // Aligned: the part's float64 sections are written in place.
  a.out = new Uint8Array(new ArrayBuffer(partBytes(D, MAX_BEAMS, W)));
}

export class RemoteWorker {
  readonly id: string;
  readonly name: string;
  #o: RemoteWorkerOptions;
  #nc: NatsConnection | null = null;
  #subs: Subscription[] = [];
  #timer: NodeJS.Timeout | null = null;
  #current = new Map<string, Assignment>();
  #staged = new Map<string, Assignment>();
  #scratch = new AlignedScratch();
  #closed = false;
  /** Messages dropped, by reason (bad bytes, unknown engine, old epoch, …). */
  readonly dropped: Record<string, number> = {};
  oldEpochMessages = 0;
  gaps = 0;
  partsSent = 0;
  bytesIn = 0;
  bytesOut = 0;
  plansBuilt = 0;
  plansRefused = 0;
  #busyMs = 0;
  #binHops = 0;

  private constructor(o: RemoteWorkerOptions) {
    this.#o = o;
    this.id = o.id ?? randomBytes(6).toString('hex');
    this.name = o.name;
  }

  static async start(o: RemoteWorkerOptions): Promise<RemoteWorker> {
    assertLittleEndian();
    const w = new RemoteWorker(o);
    await w.#connect();
    return w;
  }

  #log(line: string): void {
    this.#o.log?.(`worker ${this.name} (${this.id}): ${line}`);
  }

  #drop(reason: string): void {
    this.dropped[reason] = (this.dropped[reason] ?? 0) + 1;
  }

  async #connect(): Promise<void> {
    const nc = await connect(brokerOptions(this.#o.natsUrl, this.#o.token, `nullsteer worker ${this.name}`));
    this.#nc = nc;
    const sub = (subject: string, f: (m: Msg) => void | Promise<void>) => {
      this.#subs.push(
        nc.subscribe(subject, {
          callback: (err, m) => {
            if (err || this.#closed) return;
            try {
              const r = f(m);
              if (r instanceof Promise) r.catch((e) => this.#log(`error: ${publicText(e)}`));
            } catch (e) {
              this.#drop('error');
              this.#log(`error: ${publicText(e)}`);
            }
          },
        }),
      );
    };
    sub(workerSubject(this.id, 'plan'), (m) => this.#onPlan(m));
    sub(workerSubject(this.id, 'ctrl'), (m) => this.#onCtrl(m));
    sub(hopsSubject(this.id, '*'), (m) => this.#onHops(m));
    this.#hello(false);
    this.#timer = setInterval(() => this.#tick(), this.#o.heartbeatMs ?? HEARTBEAT_MS);
    this.#timer.unref();
    this.#log(`serving bins on ${this.#o.natsUrl}`);
  }

  /** Bin-hops per second of busy time so far (null before any work). */
  get throughputBinsPerS(): number | null {
    return this.#busyMs > 50 ? this.#binHops / (this.#busyMs / 1000) : null;
  }

  #hello(leaving: boolean): void {
    const m: HelloMessage = { v: 1, type: 'hello', id: this.id, name: this.name, throughputBinsPerS: this.throughputBinsPerS, engines: this.#current.size, leaving };
    try {
      this.#nc?.publish(HELLO_SUBJECT, encodeJson(m));
    } catch {
      this.#drop('publish');
    }
  }

  #tick(): void {
    const now = performance.now();
    for (const [k, a] of this.#current) {
      if (now - a.lastHopMs > IDLE_RELEASE_MS) {
        this.#current.delete(k);
        this.#log(`released the plan of engine ${k} (no hop for ${IDLE_RELEASE_MS / 1000} s)`);
      }
    }
    this.#hello(false);
  }

  async #onPlan(m: Msg): Promise<void> {
    const reply = (r: PlanReply) => {
      try {
        m.respond(encodeJson(r));
      } catch {
        this.#drop('publish');
      }
    };
    this.bytesIn += m.data.byteLength;
    const parsed = parsePlan(m.data);
    if (!parsed.ok) {
      this.#drop(`plan-${parsed.reason}`);
      reply({ v: 1, type: 'plan-reply', epoch: 0, ok: false, message: `plan refused: ${parsed.reason}: ${parsed.detail}` });
      return;
    }
    const p = parsed.value;
    if (!this.#current.has(p.engine) && this.#current.size >= MAX_ENGINES) {
      this.plansRefused++;
      reply({ v: 1, type: 'plan-reply', epoch: p.epoch, ok: false, message: `this worker already serves ${MAX_ENGINES} engines` });
      return;
    }
    let a: Assignment;
    try {
      a = await this.#build(p);
    } catch (e) {
      this.plansRefused++;
      reply({ v: 1, type: 'plan-reply', epoch: p.epoch, ok: false, message: publicText(e).split('\n')[0].slice(0, 300) });
      return;
    }
    // One staged plan per engine: a newer one replaces it. It takes over with its epoch's first batch.
    this.#staged.set(p.engine, a);
    this.plansBuilt++;
    reply({ v: 1, type: 'plan-reply', epoch: p.epoch, ok: true });
  }

  async #build(p: RemotePlan): Promise<Assignment> {
    const M = p.positions.length;
    const B = p.freqsHz.length;
    if (p.grid.nAz * p.grid.nEl > PLAN_LIMITS.maxDirections) throw new RangeError('grid too large');
    const proc = await BinProcessor.create({ positions: p.positions, freqsHz: Float64Array.from(p.freqsHz), grid: gridFromMessage(p.grid), speedOfSoundMps: p.speedOfSoundMps, snapshotScale: p.snapshotScale, fast: p.fast });
    proc.setMask(p.active);
    const a = { engine: p.engine, epoch: p.epoch, part: p.part, proc, channels: M, bins: B, beams: p.beams, nextSeq: p.firstSeq, snap: new Float64Array(2 * M * B), busyMs: 0, hops: 0, scans: 0, gaps: 0, lastHopMs: performance.now() } as Assignment;
    sizeBuffers(a);
    return a;
  }

  /** The plan a message of (engine, epoch) is for: the current one, or the staged one (which then takes over). */
  #planFor(engine: string, epoch: number, takeOver: boolean): Assignment | null {
    const cur = this.#current.get(engine);
    if (cur && cur.epoch === epoch) return cur;
    const st = this.#staged.get(engine);
    if (st && st.epoch === epoch) {
      if (!takeOver) return st;
      this.#staged.delete(engine);
      this.#current.set(engine, st);
      return st;
    }
    if ((cur && epoch < cur.epoch) || (st && epoch < st.epoch)) {
      this.oldEpochMessages++;
      this.#drop('old-epoch');
    } else this.#drop('unknown-plan');
    return null;
  }

  async #onCtrl(m: Msg): Promise<void> {
    this.bytesIn += m.data.byteLength;
    const parsed = parseCtrl(m.data);
    if (!parsed.ok) return this.#drop(`ctrl-${parsed.reason}`);
    const c = parsed.value;
    if (c.type === 'release') {
      // Any plan of that engine up to this epoch goes.
      const cur = this.#current.get(c.engine);
      if (cur && cur.epoch <= c.epoch) this.#current.delete(c.engine);
      const st = this.#staged.get(c.engine);
      if (st && st.epoch <= c.epoch) this.#staged.delete(c.engine);
      return;
    }
    const a = this.#planFor(c.engine, c.epoch, false);
    if (!a) return;
    switch (c.type) {
      case 'mask':
        if (c.active.length !== a.channels) return this.#drop('ctrl-field');
        a.proc.setMask(c.active);
        return;
      case 'beams':
        a.beams = c.beams;
        return;
      case 'grid':
        await a.proc.setGrid(gridFromMessage(c.grid));
        sizeBuffers(a);
        return;
    }
  }

  #onHops(m: Msg): void {
    this.bytesIn += m.data.byteLength;
    const engine = m.subject.slice(m.subject.lastIndexOf('.') + 1);
    const parsed = parseHopBatch(this.#scratch.align(m.data), { maxChannels: PLAN_LIMITS.maxChannels, maxBins: PLAN_LIMITS.maxBins });
    if (!parsed.ok) return this.#drop(`hops-${parsed.reason}`);
    const b = parsed.value;
    const a = this.#planFor(engine, b.epoch, true);
    if (!a) return;
    if (b.part !== a.part || b.channels !== a.channels || b.bins !== a.bins) return this.#drop('hops-shape');
    if (!metaValid(b.meta, b.hops)) return this.#drop('hops-field');
    if (b.firstSeq < a.nextSeq) return this.#drop('hops-repeated');
    if (b.firstSeq > a.nextSeq) {
      // Hops went missing: the recursion cannot be continued honestly; start over.
      a.proc.reset();
      a.gaps++;
      this.gaps++;
      this.#log(`engine ${engine}: hops ${a.nextSeq}–${b.firstSeq - 1} missing; covariance restarted`);
    }
    a.nextSeq = b.firstSeq + b.hops;
    a.lastHopMs = performance.now();
    const n = 2 * a.channels * a.bins;
    for (let h = 0; h < b.hops; h++) {
      const t0 = performance.now();
      const o = h * HOP_META_DOUBLES;
      const flags = b.meta[o + 2];
      const snap = a.snap;
      const base = h * n;
      for (let i = 0; i < n; i++) snap[i] = b.snaps[base + i];
      if ((flags & FLAG_RESET) !== 0) a.proc.reset();
      a.proc.hop(snap, b.meta[o + 1]);
      a.hops++;
      const scanBits = flags & 7;
      if ((scanBits & 3) !== 0) {
        const loading = loadingAt(b.meta, o);
        const D = a.proc.directions;
        a.conv.fill(0);
        a.mvdr.fill(0);
        a.proc.scan(scanBits, loading, a.conv, a.mvdr);
        const beams = (flags & FLAG_BEAMS) !== 0 ? a.beams : [];
        const W = 2 * a.channels * a.bins;
        if (beams.length > 0) a.proc.scanBeams(beams, loading, a.beamOut, a.weights, W);
        a.scans++;
        const scanMs = performance.now() - t0;
        a.busyMs += scanMs;
        const bytes = writePart(
          a.out,
          { epoch: a.epoch, part: a.part, scanSeq: b.meta[o + 3], directions: D, flags, beamIds: beams.map((x) => x.id), weightsPerBeam: beams.length > 0 ? W : 0, scanMs, busyMs: a.busyMs, hops: a.hops, scans: a.scans, singular: a.proc.singularBins, nonFinite: a.proc.nonFiniteBins, restarts: a.proc.covarianceResets + a.gaps },
          a.conv,
          a.mvdr,
          a.beamOut,
          beams.length > 0 ? a.weights : null,
          W,
        );
        try {
          // A copy: the client holds the bytes until its next flush, and a.out is reused.
          this.#nc?.publish(partsSubject(a.engine), bytes.slice());
          this.partsSent++;
          this.bytesOut += bytes.byteLength;
        } catch {
          this.#drop('publish');
        }
      } else a.busyMs += performance.now() - t0;
      this.#busyMs += performance.now() - t0;
      this.#binHops += a.bins;
    }
  }

  status(): Record<string, unknown> {
    return {
      id: this.id,
      name: this.name,
      engines: this.#current.size,
      plansBuilt: this.plansBuilt,
      plansRefused: this.plansRefused,
      partsSent: this.partsSent,
      bytesIn: this.bytesIn,
      bytesOut: this.bytesOut,
      gaps: this.gaps,
      oldEpochMessages: this.oldEpochMessages,
      dropped: { ...this.dropped },
      throughputBinsPerS: this.throughputBinsPerS,
    };
  }

  async close(): Promise<void> {
    if (this.#closed) return;
    this.#hello(true);
    this.#closed = true;
    if (this.#timer) clearInterval(this.#timer);
    const nc = this.#nc;
    this.#nc = null;
    if (nc) await nc.drain().catch(() => nc.close());
  }
}

/** Every hop's meta of a batch is what an engine writes: λ in (0, 1), known flags and loading. */
function metaValid(meta: Float64Array, hops: number): boolean {
  for (let h = 0; h < hops; h++) {
    const o = h * HOP_META_DOUBLES;
    const lambda = meta[o + 1];
    const flags = meta[o + 2];
    const seq = meta[o + 3];
    const mode = meta[o + 4];
    if (!(lambda > 0 && lambda < 1)) return false;
    if (!Number.isInteger(flags) || flags < 0 || flags > 31) return false;
    if (!Number.isSafeInteger(seq) || seq < 0) return false;
    if (mode !== LOAD_RELATIVE && mode !== LOAD_FIXED && mode !== LOAD_WNG) return false;
    if (!Number.isFinite(meta[o + 5]) || !Number.isFinite(meta[o + 6]) || meta[o + 5] < -1e6 || meta[o + 6] < 0) return false;
  }
  return true;
}
