/**
 * The queue of parameter changes: in order, a failure does not block the next, and no change waits
 * forever: at its deadline it is answered 503 ERR_HTTP_CHANGE_TIMEOUT (whether still waiting, then
 * never run, or still running) and the queue moves on.
 */
import { describe, expect, it, vi } from 'vitest';
import { HttpError } from '../../server/http/errors.ts';
import { createSerial } from '../../server/http/serial.ts';

const never = () => new Promise<never>(() => {});

describe('serial change queue', () => {
  it('runs changes one at a time in arrival order; a failure does not block the next', async () => {
    const serial = createSerial(5_000);
    const order: string[] = [];
    const a = serial(async () => {
      await new Promise((r) => setTimeout(r, 20));
      order.push('a');
      throw new Error('a failed');
    });
    const b = serial(async () => {
      order.push('b');
      return 2;
    });
    await expect(a).rejects.toThrow('a failed');
    expect(await b).toBe(2);
    expect(order).toEqual(['a', 'b']);
  });

  it('a change that never finishes is answered at its deadline; one that waited past its own deadline never runs; the queue moves on', async () => {
    // Fake clock and timers: what is asserted is the order of events, not how fast a machine is.
    vi.useFakeTimers({ toFake: ['setTimeout', 'clearTimeout', 'performance'] });
    try {
      const stats = { timedOut: 0 };
      const serial = createSerial(200, stats);
      const stuck = serial(never);
      let ranLate = false;
      // Queued at the same moment behind `stuck`: its 200 ms pass while it waits.
      const late = serial(async () => {
        ranLate = true;
      });
      const settled = Promise.allSettled([stuck, late]);
      await vi.advanceTimersByTimeAsync(200);
      const [a, b] = await settled;
      expect(a.status).toBe('rejected');
      const err = (a as PromiseRejectedResult).reason;
      expect(err).toBeInstanceOf(HttpError);
      expect((err as HttpError).toJSON()).toEqual({ error: { code: 'ERR_HTTP_CHANGE_TIMEOUT', message: 'the change was not applied within 200 ms (it waited behind earlier changes or is still being applied); check GET /api/processing and the journal', statusCode: 503 } });
      expect(b.status).toBe('rejected');
      expect((b as PromiseRejectedResult).reason).toMatchObject({ code: 'ERR_HTTP_CHANGE_TIMEOUT' });
      expect(ranLate).toBe(false);
      // The queue moved on: a change queued now runs and answers.
      expect(await serial(async () => 'ok')).toBe('ok');
      expect(stats.timedOut).toBe(2);
    } finally {
      vi.useRealTimers();
    }
  });
});
