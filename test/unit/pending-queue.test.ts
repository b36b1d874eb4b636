/**
 * The edge's pending queue of durable entries (server/cluster/pending-queue.ts): bounded, oldest
 * peak entries dropped first and journal entries last, in-flight entries never dropped, every drop
 * counted, entries leaving in sequence order and again in order after a failed send.
 */
import { describe, expect, it } from 'vitest';
import { PendingQueue } from '../../server/cluster/pending-queue.ts';

const b = new Uint8Array(1);

describe('pending queue', () => {
  it('numbers entries 1, 2, … and hands them out oldest first across both kinds', () => {
    const q = new PendingQueue(10);
    q.push('peaks', 'p', b);
    q.push('journal', 'j', b);
    q.push('peaks', 'p', b);
    expect([q.take()!.seq, q.take()!.seq, q.take()!.seq]).toEqual([1, 2, 3]);
    expect(q.take()).toBeNull();
    expect(q.size).toBe(3); // in flight until acknowledged
  });

  it('holds monitoring events like journal entries: peaks go first, then the oldest of events and journal', () => {
    const q = new PendingQueue(2);
    q.push('events', 'e', b); // 1
    q.push('peaks', 'p', b); // 2
    q.push('journal', 'j', b); // 3: drops peak 2
    expect(q.dropped).toEqual({ peaks: 1, journal: 0, events: 0 });
    q.push('journal', 'j', b); // 4: drops event 1, the oldest left
    expect(q.dropped).toEqual({ peaks: 1, journal: 0, events: 1 });
    const e = q.take()!;
    q.ack(e);
    expect(q.acked).toEqual({ peaks: 0, journal: 1, events: 0 });
  });

  it('keeps at most maxEntries: drops the oldest peak entries first, journal entries last, and counts each', () => {
    const q = new PendingQueue(4);
    q.push('journal', 'j', b); // 1
    q.push('peaks', 'p', b); // 2
    q.push('peaks', 'p', b); // 3
    q.push('journal', 'j', b); // 4
    q.push('peaks', 'p', b); // 5: drops 2
    expect(q.size).toBe(4);
    expect(q.dropped).toEqual({ peaks: 1, journal: 0, events: 0 });
    q.push('journal', 'j', b); // 6: drops 3
    q.push('journal', 'j', b); // 7: drops 5 (the last peak)
    expect(q.dropped).toEqual({ peaks: 3, journal: 0, events: 0 });
    q.push('journal', 'j', b); // 8: no peak left: drops journal 1
    expect(q.dropped).toEqual({ peaks: 3, journal: 1, events: 0 });
    const seqs: number[] = [];
    for (let e = q.take(); e; e = q.take()) seqs.push(e.seq);
    expect(seqs).toEqual([4, 6, 7, 8]);
    expect(q.counts()).toMatchObject({ pending: 4, inFlight: 4, lastSeq: 8 });
  });

  it('never drops an entry in flight; when everything held is in flight a new entry is refused and counted', () => {
    const q = new PendingQueue(2);
    q.push('peaks', 'p', b);
    q.push('peaks', 'p', b);
    q.take();
    q.take();
    expect(q.push('peaks', 'p', b)).toBeNull();
    expect(q.dropped.peaks).toBe(1);
    expect(q.size).toBe(2);
  });

  it('removes an entry only on its acknowledgement; a failed one goes back to its place and is sent first again', () => {
    const q = new PendingQueue(10);
    for (let i = 0; i < 4; i++) q.push(i === 1 ? 'journal' : 'peaks', 's', b);
    const a = q.take()!;
    const c = q.take()!;
    const d = q.take()!;
    q.ack(c);
    q.fail(d);
    q.fail(a);
    expect(q.size).toBe(3);
    expect(q.acked).toEqual({ peaks: 0, journal: 1, events: 0 });
    expect([q.take()!.seq, q.take()!.seq, q.take()!.seq]).toEqual([1, 3, 4]);
  });
});

describe('broker item of the status strip (client/src/lib/broker-status.ts)', () => {
  it('shows a configured broker’s state and pending entries; nothing when off or absent', async () => {
    const { summariseBroker } = await import('../../client/src/lib/broker-status.ts');
    expect(summariseBroker({ cluster: { state: 'reconnecting', pending: 12, dropped: 1, url: 'nats://127.0.0.1:4222', lastError: 'gone' } })).toEqual({ state: 'reconnecting', pending: 12, dropped: 1, url: 'nats://127.0.0.1:4222', lastError: 'gone' });
    expect(summariseBroker({ cluster: { state: 'off' } })).toBeNull();
    expect(summariseBroker({})).toBeNull();
  });
});
