/**
 * RTP sequence-number extension (server/ingest/rtp/sequence.ts) against the rules of RFC 3550
 * Appendix A.1 (update_seq): MAX_DROPOUT = 3000, MAX_MISORDER = 100, cycles counted on a wrap,
 * bad_seq restarting the count after two packets in sequence.
 */
import { describe, expect, it } from 'vitest';
import { MAX_DROPOUT, RtpSequence } from '../../server/ingest/rtp/sequence.ts';

describe('RtpSequence (RFC 3550 A.1)', () => {
  it('extends across the 65535 → 0 wrap and counts it', () => {
    const s = new RtpSequence();
    expect(s.init(65534)).toBe(65534);
    expect([s.update(65535, 1), s.update(0, 1), s.update(1, 1)]).toEqual([65535, 65536, 65537]);
    expect(s.wraps).toBe(1);
    // Reordered from before the wrap, and a duplicate of the highest: below / equal, no new wrap.
    expect([s.update(65535, -2), s.update(1, 0)]).toEqual([65535, 65537]);
    expect(s.wraps).toBe(1);
  });

  it('takes a gap below MAX_DROPOUT; refuses a jump of MAX_DROPOUT or more unless the next packet follows it', () => {
    const s = new RtpSequence();
    s.init(100);
    expect(s.update(100 + MAX_DROPOUT - 1, MAX_DROPOUT - 1)).toBe(100 + MAX_DROPOUT - 1); // 2999 ahead: a gap
    const max = 100 + MAX_DROPOUT - 1;
    expect(s.update(max + MAX_DROPOUT, 1)).toBe(-1); // 3000 ahead: refused
    expect(s.badSeq).toBe(max + MAX_DROPOUT + 1);
    expect(s.update(max + 1, 1)).toBe(max + 1); // the old count goes on: fine
    // Two in sequence after a jump: the count restarts; the extended number goes on by the timestamp's packets.
    expect(s.update(40000, 2)).toBe(-1);
    expect(s.update(40001, 2)).toBe(max + 1 + 2);
    expect([s.restarts, s.maxSeq]).toEqual([1, 40001]);
    expect(s.update(40002, 1)).toBe(max + 4);
  });

  it('takes packets fewer than maxMisorder behind as reordered; further behind is a jump', () => {
    const s = new RtpSequence(100);
    s.init(5000);
    s.update(5200, 200);
    expect(s.update(5101, -99)).toBe(5101); // 99 behind
    expect(s.update(5100, -100)).toBe(-1); // 100 behind: udelta = 2^16 − MAX_MISORDER, A.1's "very large jump"
    const wide = new RtpSequence(1024);
    wide.init(5000);
    wide.update(5200, 200);
    expect(wide.update(5100, -100)).toBe(5100);
    expect(() => new RtpSequence(0)).toThrow(RangeError);
  });
});
