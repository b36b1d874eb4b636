/**
 * The block bus keeps every subscriber fed when one fails, counts the failures per subscriber for
 * status, and keeps the log readable: a subscriber that throws on every block (with a different
 * message each time, as an engine fault naming its sample would) is reported once, then at most
 * once per interval with a count.
 */
import { afterEach, describe, expect, it } from 'vitest';
import { BlockBus } from '../../server/ingest/block-bus.ts';
import type { Block } from '../../shared/types.ts';

const block = (k: number): Block => ({ streamId: 1, sampleIndex: k * 480, sampleRateHz: 48000, channels: 2, frames: 480, data: new Float32Array(960), gap: false, discontinuity: false });

const warnings: string[] = [];
const onWarning = (w: Error) => warnings.push(w.message);
afterEach(() => {
  process.off('warning', onWarning);
  warnings.length = 0;
});

describe('block bus', () => {
  it('a subscriber failing on 1 000 blocks is logged once, counted 1 000 times, and the others get every block', async () => {
    process.on('warning', onWarning);
    const bus = new BlockBus();
    let got = 0;
    bus.subscribe(() => {
      throw new Error(`stage broke at ${Math.random()}`);
    }, 'flaky');
    bus.subscribe(() => got++, 'counter');
    for (let k = 0; k < 1000; k++) bus.publish(block(k));
    await new Promise((r) => setImmediate(r)); // process warnings are emitted on the next tick
    expect(got).toBe(1000);
    expect(warnings.filter((w) => w.startsWith('block subscriber')).length).toBe(1);
    expect(warnings[0]).toMatch(/^block subscriber flaky failed at sample 0: stage broke at /);
    const st = bus.status();
    expect(st.subscriberErrors).toBe(1000);
    expect(st.subscribers.flaky).toMatchObject({ errors: 1000, lastErrorSample: 999 * 480 });
    expect(st.subscribers.counter).toBeUndefined();
    expect(st).toMatchObject({ blocks: 1000, samples: 480_000, nextSample: 480_000 });
  });

  it('after the interval the next failure is reported with the count of those not logged', () => {
    let t = 0;
    const log: string[] = [];
    const bus = new BlockBus({ warn: (m) => log.push(m), warnIntervalMs: 10_000, now: () => t });
    bus.subscribe(() => {
      throw new Error('no room\n    at somewhere (/abs/path/file.ts:1:1)');
    }, 'engine');
    for (let k = 0; k < 5; k++) bus.publish(block(k));
    t = 10_000;
    bus.publish(block(5));
    expect(log).toEqual(['block subscriber engine failed at sample 0: no room', 'block subscriber engine failed at sample 2400: no room (4 more failure(s) since the last report)']);
    // Only the first line of the message is kept: no stack, no path.
    expect(bus.status().subscribers.engine).toEqual({ errors: 6, lastError: 'no room', lastErrorSample: 2400 });
  });
});
