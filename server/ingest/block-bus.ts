/**
 * The one block stream the rest of the server consumes, whichever source feeds it. Keeps the
 * timeline's figures (samples, gaps, discontinuities) for status and lets stages subscribe.
 *
 * A subscriber that throws keeps its subscription and never stops the others from getting the
 * block: its failures are counted per subscriber with the last one's message and sample index
 * (status), and logged at most once per `warnIntervalMs` per subscriber (the first at once, later
 * ones as a count), so a subscriber failing on every block cannot flood the log.
 */
import type { Block, BlockSink } from '../../shared/types.ts';
import { publicText } from '../public-text.ts';

export interface SubscriberHealth {
  errors: number;
  /** First line of the latest failure's message. */
  lastError: string | null;
  /** Sample index of the block it failed on last. */
  lastErrorSample: number | null;
}

export interface TimelineStatus {
  blocks: number;
  samples: number;
  gapSamples: number;
  discontinuities: number;
  firstSample: number | null;
  nextSample: number | null;
  /** Failures of all subscribers together. */
  subscriberErrors: number;
  /** Per named subscriber (only those that failed at least once). */
  subscribers: Record<string, SubscriberHealth>;
}

export const SUBSCRIBER_WARN_INTERVAL_MS = 10_000;

interface Sub {
  name: string;
  sink: BlockSink;
  health: SubscriberHealth;
  lastWarnMs: number;
  unreported: number;
}

export class BlockBus {
  readonly #subs = new Set<Sub>();
  readonly #t = { blocks: 0, samples: 0, gapSamples: 0, discontinuities: 0, firstSample: null as number | null, nextSample: null as number | null, subscriberErrors: 0 };
  readonly #warn: (message: string) => void;
  readonly #warnIntervalMs: number;
  readonly #now: () => number;

  constructor(opts: { warn?: (message: string) => void; warnIntervalMs?: number; now?: () => number } = {}) {
    this.#warn = opts.warn ?? ((m) => process.emitWarning(m));
    this.#warnIntervalMs = opts.warnIntervalMs ?? SUBSCRIBER_WARN_INTERVAL_MS;
    this.#now = opts.now ?? (() => performance.now());
  }

  /** The sink to hand to a source. */
  readonly publish: BlockSink = (block: Block) => {
    const t = this.#t;
    t.blocks++;
    t.samples += block.frames;
    if (block.gap) t.gapSamples += block.frames;
    if (block.discontinuity) t.discontinuities++;
    if (t.firstSample === null) t.firstSample = block.sampleIndex;
    t.nextSample = block.sampleIndex + block.frames;
    for (const s of this.#subs) {
      try {
        s.sink(block);
      } catch (e) {
        this.#failed(s, e, block.sampleIndex);
      }
    }
  };

  #failed(s: Sub, e: unknown, sampleIndex: number): void {
    this.#t.subscriberErrors++;
    const h = s.health;
    h.errors++;
    h.lastError = publicText(e instanceof Error ? e.message : e);
    h.lastErrorSample = sampleIndex;
    const now = this.#now();
    if (h.errors === 1 || now - s.lastWarnMs >= this.#warnIntervalMs) {
      const more = s.unreported > 0 ? ` (${s.unreported} more failure(s) since the last report)` : '';
      this.#warn(`block subscriber ${s.name} failed at sample ${sampleIndex}: ${h.lastError}${more}`);
      s.lastWarnMs = now;
      s.unreported = 0;
    } else s.unreported++;
  }

  /** @param name how status and the log call it */
  subscribe(sink: BlockSink, name = 'subscriber'): () => void {
    const s: Sub = { name, sink, health: { errors: 0, lastError: null, lastErrorSample: null }, lastWarnMs: -Infinity, unreported: 0 };
    this.#subs.add(s);
    return () => this.#subs.delete(s);
  }

  status(): TimelineStatus {
    const subscribers: Record<string, SubscriberHealth> = {};
    for (const s of this.#subs) if (s.health.errors > 0) subscribers[s.name] = { ...s.health };
    return { ...this.#t, subscribers };
  }
}
