/** Which channels the scan uses when a merged array's member is absent (engine/input-mask.ts). */
import { describe, expect, it } from 'vitest';
import { InputMask } from '../../server/engine/input-mask.ts';

describe('InputMask', () => {
  it('leaves an absent member\'s channels out for the span and holdSamples after, and keeps the operator\'s mask', () => {
    const applied: boolean[][] = [];
    const m = new InputMask(4, 1000, (a) => applied.push(a));
    const absent = Uint8Array.of(0, 0, 1, 1);
    m.observe(0, 500, null);
    expect(applied).toEqual([]); // nothing changed, nothing applied
    m.observe(500, 500, absent); // channels 2 and 3 absent for [500, 1000)
    expect(applied.at(-1)).toEqual([true, true, false, false]);
    expect(m.inputOut).toEqual([2, 3]);
    m.setUser([false, true, true, true]); // the operator masks channel 0 meanwhile
    expect(applied.at(-1)).toEqual([false, true, false, false]);
    m.observe(1000, 500, null); // back, but within the hold (until 2000)
    m.observe(1500, 499, null);
    expect(applied.at(-1)).toEqual([false, true, false, false]);
    m.observe(2000, 500, null); // hold over
    expect(applied.at(-1)).toEqual([false, true, true, true]);
    expect(m.inputOut).toEqual([]);
    expect(m.absentBlocks).toBe(1);
    expect(m.absentChannelSamples).toBe(1000);
  });

  it('never leaves every channel out: an all-absent span keeps the previous set', () => {
    const applied: boolean[][] = [];
    const m = new InputMask(2, 0, (a) => applied.push(a));
    m.observe(0, 100, Uint8Array.of(1, 1));
    expect(applied).toEqual([]);
    m.observe(100, 100, Uint8Array.of(1, 0));
    expect(applied).toEqual([[false, true]]);
  });
});
