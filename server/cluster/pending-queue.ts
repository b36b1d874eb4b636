/**
 * The edge's durable entries (peak and journal messages) waiting for JetStream to acknowledge them.
 * Every entry gets the next number of the edge's own sequence when it is queued; entries leave in
 * that order and are removed only when JetStream acknowledged them (or when dropped for room).
 *
 * Bound: at most `maxEntries` entries, counting those sent and not yet acknowledged. Policy when
 * full: the oldest queued PEAK entry is dropped first; only when no peak entry is left to drop is
 * the oldest queued journal entry dropped. Entries in flight are never dropped (JetStream may
 * already hold them). Every drop is counted by kind: nothing is lost silently.
 */

/** Monitoring events (`events`) are held like journal entries: peaks are dropped first. */
export type DurableKind = 'peaks' | 'journal' | 'events';

export interface DurableEntry {
  /** The edge's sequence number: 1, 2, … in the order entries were queued. */
  readonly seq: number;
  readonly kind: DurableKind;
  readonly subject: string;
  readonly data: Uint8Array;
}

/** FIFO over an array with a moving head (shift is O(1) amortised). */
class Fifo<T extends { seq: number }> {
  #a: T[] = [];
  #head = 0;
  get length(): number {
    return this.#a.length - this.#head;
  }
  peek(): T | undefined {
    return this.#a[this.#head];
  }
  push(v: T): void {
    this.#a.push(v);
  }
  shift(): T | undefined {
    if (this.#head >= this.#a.length) return undefined;
    const v = this.#a[this.#head];
    this.#a[this.#head++] = undefined as unknown as T;
    if (this.#head > 1024 && this.#head * 2 > this.#a.length) {
      this.#a = this.#a.slice(this.#head);
      this.#head = 0;
    }
    return v;
  }
  /** Put an entry back in sequence order (it belongs near the front: it was taken from there). */
  putBack(v: T): void {
    let i = this.#head;
    while (i < this.#a.length && this.#a[i].seq < v.seq) i++;
    if (i === this.#head && this.#head > 0) this.#a[--this.#head] = v;
    else this.#a.splice(i, 0, v);
  }
}

export interface PendingCounts {
  /** Entries held: queued and in flight. */
  pending: number;
  inFlight: number;
  /** Dropped for room since start, by kind. */
  dropped: { peaks: number; journal: number; events: number };
  /** Acknowledged by JetStream since start, by kind. */
  acked: { peaks: number; journal: number; events: number };
  /** Sequence number of the latest entry queued (0: none yet). */
  lastSeq: number;
}

export class PendingQueue {
  readonly maxEntries: number;
  readonly #peaks = new Fifo<DurableEntry>();
  readonly #journal = new Fifo<DurableEntry>();
  readonly #inFlight = new Set<DurableEntry>();
  #seq = 0;
  readonly dropped = { peaks: 0, journal: 0, events: 0 };
  readonly acked = { peaks: 0, journal: 0, events: 0 };

  /** @param maxEntries ≥ 1 (cluster.pendingMaxEntries) */
  constructor(maxEntries: number) {
    if (!Number.isInteger(maxEntries) || maxEntries < 1) throw new RangeError(`maxEntries must be an integer ≥ 1, got ${maxEntries}`);
    this.maxEntries = maxEntries;
  }

  /** Entries held (queued and in flight). */
  get size(): number {
    return this.#peaks.length + this.#journal.length + this.#inFlight.size;
  }
  get inFlight(): number {
    return this.#inFlight.size;
  }
  /** Entries waiting to be sent (not in flight). */
  get queued(): number {
    return this.#peaks.length + this.#journal.length;
  }

  /**
   * Queue an entry under the next sequence number, making room first by the policy above.
   * @returns the entry, or null when it could not be held (every held entry is in flight; counted as dropped)
   */
  push(kind: DurableKind, subject: string, data: Uint8Array): DurableEntry | null {
    const e: DurableEntry = { seq: ++this.#seq, kind, subject, data };
    while (this.size >= this.maxEntries) {
      const victim = this.#peaks.shift() ?? this.#journal.shift();
      if (!victim) {
        this.dropped[kind]++;
        return null;
      }
      this.dropped[victim.kind]++;
    }
    (kind === 'peaks' ? this.#peaks : this.#journal).push(e);
    return e;
  }

  /** The oldest queued entry, moved to in flight (null when none is queued). */
  take(): DurableEntry | null {
    const p = this.#peaks.peek();
    const j = this.#journal.peek();
    const from = p && (!j || p.seq < j.seq) ? this.#peaks : j ? this.#journal : null;
    if (!from) return null;
    const e = from.shift()!;
    this.#inFlight.add(e);
    return e;
  }

  /** JetStream acknowledged `e`: it leaves the queue. */
  ack(e: DurableEntry): void {
    if (this.#inFlight.delete(e)) this.acked[e.kind]++;
  }

  /** Sending `e` failed (no ack): it goes back to its place, to be sent again first. */
  fail(e: DurableEntry): void {
    if (!this.#inFlight.delete(e)) return;
    (e.kind === 'peaks' ? this.#peaks : this.#journal).putBack(e);
  }

  counts(): PendingCounts {
    return { pending: this.size, inFlight: this.#inFlight.size, dropped: { ...this.dropped }, acked: { ...this.acked }, lastSeq: this.#seq };
  }
}
