/**
 * The server's figures for `GET /metrics`, in the Prometheus text exposition format (version
 * 0.0.4), rendered by the `prom-client` library from a Registry of its own (never the library's
 * global one, so two services in one process, as in the tests, keep their figures apart).
 *
 * Where the values come from, so that nothing is counted twice:
 *   - ingest, engine and recording figures are read at each scrape from ONE snapshot of the
 *     service's status (the `status` function given to the constructor, the same one
 *     `GET /api/status` answers with), through the metrics' collect callbacks;
 *   - the row latency histogram is fed by `observeRowLatency()` for every row the engine emits
 *     (the engine keeps only a ring of recent latencies, from which no cumulative histogram can
 *     be formed);
 *   - per-sector 1-s Leq and events by rule are pushed by the monitor (`setSectorLeq`,
 *     `countEvent`);
 *   - webhook failures are read at each scrape from the `webhookFailures` callback.
 *
 * Label values are bounded: reasons come from the ingest's closed lists; sector and rule names
 * come from the closed schemas of sectors and rules and at most MAX_SECTOR_LABELS sectors and
 * MAX_RULE_LABELS rules are kept as series; beyond that a new name is not added (counted in
 * `nullsteer_metrics_label_values_refused_total`) until one is removed.
 *
 * Levels are indicative only (no class-rated meter, no traceable calibration): dBFS unless the
 * array is calibrated, then dB SPL.
 */
import { Counter, Gauge, Histogram, Registry } from 'prom-client';
import { INGEST_REJECT_REASONS, STREAM_REJECT_REASONS } from '../ingest/ingest-hub.ts';

/** The content type of the text exposition format, version 0.0.4. */
export const METRICS_CONTENT_TYPE = 'text/plain; version=0.0.4; charset=utf-8';

/** At most this many sectors have a Leq series (sectors are few: one per watched direction). */
export const MAX_SECTOR_LABELS = 64;
/** At most this many rules have an events series. */
export const MAX_RULE_LABELS = 64;
/** A sector or rule name used as a label value: at most this many characters. */
export const MAX_LABEL_CHARS = 64;

/**
 * Upper bounds of the row latency histogram, seconds. A row's latency runs from the last sample
 * of its hop reaching the engine to the row being ready (engine.ts `latencyMs`). Measured on this
 * 2-core machine loaded by other work (load average 8): the 4-channel test array, median 0.39 ms,
 * p99 69 ms; the default 24-channel ring, median 4.3 ms, p99 99 ms. Hence 0.25 ms at the bottom
 * (small arrays), steps of about 2–2.5× (a quantile estimate within a factor 2.5 anywhere in the
 * range); a row is due every 1/spectrumRateHz (0.1 s at 10 Hz), so the 0.1 s bound is the edge of
 * keeping up; the top bounds (0.25 s to 5 s) show the stalls of an overloaded or swapping machine,
 * where shedding acts. 14 bounds (+Inf, _sum and _count besides): 17 series.
 */
export const ROW_LATENCY_BUCKETS_S = [0.00025, 0.0005, 0.001, 0.002, 0.005, 0.01, 0.02, 0.05, 0.1, 0.25, 0.5, 1, 2.5, 5] as const;

/** Frames lost or discarded after decoding, by reason (label `reason`). */
export const LOSS_REASONS = ['lost', 'late', 'duplicated', 'kernel_dropped'] as const;
/** Refused messages, by reason (label `reason`): the ingest's closed lists. */
export const REJECT_REASONS: readonly string[] = [...new Set<string>([...INGEST_REJECT_REASONS, ...STREAM_REJECT_REASONS])];

export interface ServiceMetricsOptions {
  /** The service's status (as `GET /api/status` answers); called once per scrape. */
  status: () => Record<string, unknown>;
  /** Webhook deliveries given up (after their retries), a count that only grows; absent: 0. */
  webhookFailures?: () => number;
}

/** The figures one scrape reads from a status snapshot (missing parts read as 0). */
export interface StatusFigures {
  framesAccepted: number;
  samplesAccepted: number;
  messages: number;
  rejects: Record<string, number>;
  losses: Record<(typeof LOSS_REASONS)[number], number>;
  gapSamples: number;
  engineLoad: number;
  shedStep: number;
  rows: number;
  hops: number;
  hopsSkipped: number;
  workerRestarts: number;
  recording: boolean;
  uptimeS: number;
}

const num = (v: unknown): number => (typeof v === 'number' && Number.isFinite(v) ? v : 0);
const obj = (v: unknown): Record<string, unknown> => (typeof v === 'object' && v !== null && !Array.isArray(v) ? (v as Record<string, unknown>) : {});

/**
 * Pick the figures out of a status snapshot (server/service.ts `status()`): streams (network
 * ingest or the simulator), the hub-wide refusals (which also hold those of forgotten streams),
 * the UDP listener's kernel drops, the engine, the recorder. Pure; unknown shapes read as 0.
 */
export function statusFigures(st: Record<string, unknown>): StatusFigures {
  const streams = Array.isArray(st.streams) ? st.streams.map(obj) : [];
  const ingest = obj(st.ingest);
  const hubRejected = obj(ingest.rejected);
  const rejects: Record<string, number> = {};
  for (const r of REJECT_REASONS) rejects[r] = num(hubRejected[r]) + streams.reduce((n, s) => n + num(obj(s.rejected)[r]), 0);
  const sum = (k: string) => streams.reduce((n, s) => n + num(s[k]), 0);
  const engine = obj(st.engine);
  const udp = obj(obj(st.listeners).udp);
  return {
    // The simulator's stream counts blocks, a network stream accepted frames.
    framesAccepted: streams.reduce((n, s) => n + num(s.framesAccepted ?? s.blocks), 0),
    samplesAccepted: sum('samplesAccepted'),
    messages: num(ingest.messages),
    rejects,
    losses: { lost: sum('framesLost'), late: sum('framesLate'), duplicated: sum('framesDuplicated'), kernel_dropped: num(udp.kernelDrops) },
    gapSamples: sum('gapSamples'),
    engineLoad: num(engine.load),
    shedStep: num(obj(engine.shed).step),
    rows: num(engine.rows),
    hops: num(engine.hops),
    hopsSkipped: num(engine.hopsSkipped),
    workerRestarts: num(engine.workerRestarts),
    recording: obj(st.recording).recording === true,
    uptimeS: num(st.uptimeS),
  };
}

export class ServiceMetrics {
  /** The registry of this service only. */
  readonly registry = new Registry();
  readonly #opts: ServiceMetricsOptions;
  /** The snapshot of the scrape in progress (taken once in `render()`, read by every collect). */
  #figures: StatusFigures | null = null;
  readonly #rowLatency: Histogram;
  readonly #sectorLeq: Gauge;
  readonly #events: Counter;
  readonly #refused: Counter;
  readonly #sectors = new Set<string>();
  readonly #rules = new Set<string>();

  constructor(opts: ServiceMetricsOptions) {
    this.#opts = opts;
    const registers = [this.registry];
    const self = this;
    // Outside render() (registry.metrics() called directly) each collect reads a fresh snapshot.
    const fig = (): StatusFigures => self.#figures ?? statusFigures(self.#opts.status());
    /** A counter whose value is a count kept elsewhere: reset and set to it at each scrape. */
    const mirrored = (name: string, help: string, value: (f: StatusFigures) => number) =>
      new Counter({
        name,
        help,
        registers,
        collect() {
          this.reset();
          this.inc(value(fig()));
        },
      });
    const byReason = (name: string, help: string, reasons: readonly string[], value: (f: StatusFigures, reason: string) => number) =>
      new Counter({
        name,
        help,
        labelNames: ['reason'],
        registers,
        collect() {
          this.reset();
          const f = fig();
          for (const reason of reasons) this.inc({ reason }, value(f, reason));
        },
      });
    const gauge = (name: string, help: string, value: (f: StatusFigures) => number) =>
      new Gauge({
        name,
        help,
        registers,
        collect() {
          this.set(value(fig()));
        },
      });

    mirrored('nullsteer_ingest_messages_total', 'Datagrams and WebSocket messages received by the network ingest, accepted or refused.', (f) => f.messages);
    mirrored('nullsteer_ingest_frames_total', 'Frames accepted into the timeline, summed over the streams status lists (simulator: blocks rendered).', (f) => f.framesAccepted);
    mirrored('nullsteer_ingest_samples_total', 'Samples per channel accepted, summed over the streams status lists.', (f) => f.samplesAccepted);
    byReason('nullsteer_ingest_rejects_total', 'Messages refused by the ingest, by reason (the ingest\'s closed list).', REJECT_REASONS, (f, r) => f.rejects[r] ?? 0);
    byReason('nullsteer_ingest_losses_total', 'Frames lost (never arrived), late (after their span was emitted) or duplicated, and UDP datagrams the kernel dropped, by reason.', LOSS_REASONS, (f, r) => f.losses[r as (typeof LOSS_REASONS)[number]]);
    mirrored('nullsteer_ingest_gap_samples_total', 'Samples per channel filled with zeros for gaps in the input.', (f) => f.gapSamples);
    gauge('nullsteer_engine_load_ratio', 'Busiest worker\'s busy time over wall time in the last window (1 = no headroom).', (f) => f.engineLoad);
    gauge('nullsteer_engine_shed_step', 'Load-shedding step in force (0 = none).', (f) => f.shedStep);
    mirrored('nullsteer_engine_rows_total', 'Spectrum rows the engine emitted.', (f) => f.rows);
    mirrored('nullsteer_engine_hops_total', 'STFT hops the engine processed.', (f) => f.hops);
    mirrored('nullsteer_engine_hops_skipped_total', 'Hops skipped by the engine (not scanned).', (f) => f.hopsSkipped);
    mirrored('nullsteer_engine_worker_restarts_total', 'Engine workers replaced after a failure.', (f) => f.workerRestarts);
    gauge('nullsteer_recording_active', '1 while a recording is running, else 0.', (f) => (f.recording ? 1 : 0));
    gauge('nullsteer_uptime_seconds', 'Seconds since the service started.', (f) => f.uptimeS);
    this.#rowLatency = new Histogram({
      name: 'nullsteer_engine_row_latency_seconds',
      help: 'From the last sample of a hop reaching the engine to its spectrum row being ready.',
      buckets: [...ROW_LATENCY_BUCKETS_S],
      registers,
    });
    this.#sectorLeq = new Gauge({
      name: 'nullsteer_sector_leq_1s_db',
      help: `Latest 1-s Leq per sector, indicative only (no class-rated meter, no traceable calibration): dBFS, or dB SPL when the array is calibrated. At most ${MAX_SECTOR_LABELS} sectors.`,
      labelNames: ['sector'],
      registers,
    });
    this.#events = new Counter({
      name: 'nullsteer_events_total',
      help: `Events started, by rule. At most ${MAX_RULE_LABELS} rules.`,
      labelNames: ['rule'],
      registers,
    });
    new Counter({
      name: 'nullsteer_webhook_failures_total',
      help: 'Webhook deliveries given up after their retries.',
      registers,
      collect() {
        this.reset();
        const n = self.#opts.webhookFailures?.();
        this.inc(typeof n === 'number' && Number.isFinite(n) && n > 0 ? n : 0);
      },
    });
    this.#refused = new Counter({
      name: 'nullsteer_metrics_label_values_refused_total',
      help: 'Sector or rule names not added as label values (over the cap, too long, or a level not a number).',
      labelNames: ['metric'],
      registers,
    });
    this.#refused.inc({ metric: 'sector' }, 0);
    this.#refused.inc({ metric: 'rule' }, 0);
  }

  /** The metrics in the text exposition format (one status snapshot for the whole scrape). */
  async render(): Promise<string> {
    this.#figures = statusFigures(this.#opts.status());
    try {
      return await this.registry.metrics();
    } finally {
      this.#figures = null;
    }
  }

  /** One spectrum row's latency (engine.ts `EngineRow.latencyMs`), ms. Not finite or negative: ignored. */
  observeRowLatency(latencyMs: number): void {
    if (Number.isFinite(latencyMs) && latencyMs >= 0) this.#rowLatency.observe(latencyMs / 1000);
  }

  /**
   * The monitor's latest 1-s Leq of `sector`, dB (dBFS, or dB SPL when calibrated; −Infinity for
   * silence is shown as -Inf). Returns false (and counts it) when the name is not kept: over
   * MAX_SECTOR_LABELS sectors, empty or longer than MAX_LABEL_CHARS, or the level is NaN.
   */
  setSectorLeq(sector: string, leqDb: number): boolean {
    if (typeof leqDb !== 'number' || Number.isNaN(leqDb)) {
      this.#refused.inc({ metric: 'sector' });
      return false;
    }
    if (!this.#admit(this.#sectors, MAX_SECTOR_LABELS, sector, 'sector')) return false;
    this.#sectorLeq.set({ sector }, leqDb);
    return true;
  }

  /** The sector was deleted: its series goes and its place under the cap is free. */
  removeSector(sector: string): void {
    if (this.#sectors.delete(sector)) this.#sectorLeq.remove({ sector });
  }

  /** One event of `rule` started. Returns false (and counts it) when the rule's name is not kept. */
  countEvent(rule: string): boolean {
    if (!this.#admit(this.#rules, MAX_RULE_LABELS, rule, 'rule')) return false;
    this.#events.inc({ rule });
    return true;
  }

  /** The rule was deleted: its series goes (its count with it) and its place under the cap is free. */
  removeRule(rule: string): void {
    if (this.#rules.delete(rule)) this.#events.remove({ rule });
  }

  #admit(names: Set<string>, cap: number, name: string, metric: 'sector' | 'rule'): boolean {
    if (names.has(name)) return true;
    if (typeof name !== 'string' || name.length === 0 || name.length > MAX_LABEL_CHARS || names.size >= cap) {
      this.#refused.inc({ metric });
      return false;
    }
    names.add(name);
    return true;
  }
}
