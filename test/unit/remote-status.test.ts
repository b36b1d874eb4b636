/**
 * The remote bin workers as the dashboard reads them (client/src/lib/remote-status.ts): status
 * `engine.remote` in the shape issue 17 fixes for GET /api/status (name, id, bins, firstBin,
 * throughputBinsPerS, lastAnswerAgeMs, bytesPerS, state per worker; broker, mode, localThreads,
 * partialRows, lateParts, oldEpochMessages, dropped, replans, lastReplan), read defensively; the
 * table's cell texts; and when the status strip's badge is lit.
 */
import { describe, expect, it } from 'vitest';
import { droppedText, fmtAnswerAge, fmtBinRange, fmtByteRate, fmtRate, MAX_REMOTE_WORKER_ROWS, remoteBadge, summariseRemote } from '../../client/src/lib/remote-status.ts';

/** A status document with the remote section of issue 17 (values made up, shape as specified). */
function status(remote: unknown): Record<string, unknown> {
  return { engine: { workers: 2, load: 0.3, remote } };
}

const REMOTE = {
  enabled: true,
  broker: 'connected',
  mode: 'remote',
  localThreads: 2,
  workers: [
    { name: 'rack-a', id: 'w-1f3a', bins: 64, firstBin: 10, throughputBinsPerS: 12_400, lastAnswerAgeMs: 38, bytesPerS: 1_250_000, state: 'active' },
    { name: 'rack-b', id: 'w-77c0', bins: 32, firstBin: 74, throughputBinsPerS: 850, lastAnswerAgeMs: null, bytesPerS: 0, state: 'joining' },
  ],
  partialRows: 3,
  lateParts: 5,
  oldEpochMessages: 2,
  dropped: { deadline: 4, malformed: 1 },
  replans: 7,
  lastReplan: { at: '2026-12-04T05:00:00.000Z', reason: 'worker rack-c lost' },
};

describe('remote workers from GET /api/status', () => {
  it('reads every field of engine.remote', () => {
    const r = summariseRemote(status(REMOTE));
    expect(r).toEqual({
      enabled: true,
      broker: 'connected',
      mode: 'remote',
      localThreads: 2,
      workers: REMOTE.workers,
      partialRows: 3,
      lateParts: 5,
      oldEpochMessages: 2,
      dropped: { deadline: 4, malformed: 1 },
      droppedTotal: 5,
      replans: 7,
      lastReplan: { at: '2026-12-04T05:00:00.000Z', reason: 'worker rack-c lost' },
    });
  });

  it('is null when the engine has no remote workers (absent or null), or no engine is reported', () => {
    expect(summariseRemote(status(undefined))).toBeNull();
    expect(summariseRemote(status(null))).toBeNull();
    expect(summariseRemote({ engine: { workers: 2 } })).toBeNull();
    expect(summariseRemote({})).toBeNull();
    expect(summariseRemote(status([]))).toBeNull();
    expect(summariseRemote(status('remote'))).toBeNull();
  });

  it('never guesses: mistyped fields are null, bad worker entries are left out, unknown words kept or dropped', () => {
    const r = summariseRemote(
      status({
        enabled: 'yes',
        broker: 'sleeping',
        mode: 'cloud',
        localThreads: '2',
        workers: [null, 7, { name: 3, bins: Number.NaN, firstBin: 5, throughputBinsPerS: Infinity, lastAnswerAgeMs: 'old', bytesPerS: -1, state: 'draining' }],
        partialRows: null,
        dropped: { a: 1, b: 'x', c: 2 },
        lastReplan: 'today',
      }),
    )!;
    expect(r.enabled).toBeNull();
    expect(r.broker).toBeNull();
    expect(r.mode).toBeNull();
    expect(r.localThreads).toBeNull();
    expect(r.workers).toEqual([{ name: null, id: null, bins: null, firstBin: 5, throughputBinsPerS: null, lastAnswerAgeMs: null, bytesPerS: -1, state: 'draining' }]);
    expect(r.partialRows).toBeNull();
    expect(r.lateParts).toBeNull();
    expect(r.dropped).toEqual({ a: 1, c: 2 });
    expect(r.droppedTotal).toBe(3);
    expect(r.replans).toBeNull();
    expect(r.lastReplan).toBeNull();
    // workers not a list: none.
    expect(summariseRemote(status({ workers: { a: 1 } }))!.workers).toEqual([]);
  });

  it('takes at most MAX_REMOTE_WORKER_ROWS workers from one document', () => {
    const many = Array.from({ length: MAX_REMOTE_WORKER_ROWS + 10 }, (_, i) => ({ name: `w${i}`, id: String(i), bins: 1, firstBin: i }));
    const r = summariseRemote(status({ workers: many }))!;
    expect(r.workers.length).toBe(MAX_REMOTE_WORKER_ROWS);
    expect(r.workers[0].name).toBe('w0');
  });
});

describe('remote workers table cells', () => {
  it('writes bins as first–last inclusive', () => {
    expect(fmtBinRange(10, 64)).toBe('10–73');
    expect(fmtBinRange(74, 1)).toBe('74–74');
    expect(fmtBinRange(0, 0)).toBe('—');
    expect(fmtBinRange(null, 4)).toBe('—');
    expect(fmtBinRange(4, null)).toBe('—');
  });

  it('writes throughput, answer age and bytes per second shortly, "—" or "never" when unknown', () => {
    expect(fmtRate(850)).toBe('850');
    expect(fmtRate(9_999.6)).toBe('10000');
    expect(fmtRate(12_400)).toBe('12.4 k');
    expect(fmtRate(1_250_000)).toBe('1.25 M');
    expect(fmtRate(null)).toBe('—');
    expect(fmtRate(-1)).toBe('—');
    expect(fmtAnswerAge(38)).toBe('38 ms');
    expect(fmtAnswerAge(2_340)).toBe('2.3 s');
    expect(fmtAnswerAge(125_000)).toBe('125 s');
    expect(fmtAnswerAge(null)).toBe('never');
    expect(fmtAnswerAge(-5)).toBe('—');
    expect(fmtByteRate(1_250_000)).toBe('1.3 MB');
    expect(fmtByteRate(812)).toBe('812 B');
    expect(fmtByteRate(0)).toBe('0 B');
    expect(fmtByteRate(null)).toBe('—');
    expect(droppedText({ deadline: 4, malformed: 1, other: 0 })).toBe('deadline 4 · malformed 1');
    expect(droppedText({})).toBe('none');
  });
});

describe('the status strip badge', () => {
  const r = summariseRemote(status(REMOTE))!;
  const fallback = summariseRemote(status({ ...REMOTE, mode: 'local-fallback', workers: [], broker: 'reconnecting' }))!;

  it('is off while rows are whole and the remote workers are in the plan, or without remote workers', () => {
    expect(remoteBadge(r, false)).toBeNull();
    expect(remoteBadge(null, false)).toBeNull();
  });

  it('says partial rows, local fallback, or both', () => {
    expect(remoteBadge(r, true)?.text).toBe('partial rows');
    expect(remoteBadge(null, true)?.text).toBe('partial rows');
    expect(remoteBadge(fallback, false)?.text).toBe('local fallback');
    const both = remoteBadge(fallback, true)!;
    expect(both.text).toBe('partial rows · local fallback');
    expect(both.title).toMatch(/did not answer in time/);
    expect(both.title).toMatch(/2 local thread/);
    expect(both.title).toMatch(/broker reconnecting/);
  });
});
