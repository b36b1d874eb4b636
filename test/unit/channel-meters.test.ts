import { describe, expect, it } from 'vitest';
import { ChannelMeters } from '../../server/engine/channel-meters.ts';

describe('ChannelMeters', () => {
  it('reads a full-scale sine at −3.01 dBFS rms and 0 dBFS peak; finds dead and clipped channels', () => {
    const fs = 48000;
    const n = 12000;
    const m = new ChannelMeters(4, fs, 0.25);
    const data = new Float32Array(4 * n);
    for (let i = 0; i < n; i++) {
      const s = Math.sin((2 * Math.PI * 1000 * i) / fs); // 1 kHz: whole cycles in the window
      data[i] = s; // ch 0: full-scale sine, rms 1/√2 = −3.01 dBFS (common practice)
      data[n + i] = 0.1 * s; // ch 1: −23.01 dBFS
      data[2 * n + i] = 0; // ch 2: dead
      data[3 * n + i] = Math.max(-1, Math.min(1, 2 * s)); // ch 3: clipped
    }
    m.push(data, n);
    const l = m.levels();
    expect(l[0].levelDbfs).toBeCloseTo(-3.0103, 3);
    expect(l[0].peakDbfs).toBeCloseTo(0, 3);
    expect(l[1].levelDbfs).toBeCloseTo(-23.0103, 3);
    expect(l[2].dead).toBe(true);
    expect(l[0].dead || l[1].dead || l[3].dead).toBe(false);
    expect(l[3].clipped).toBeGreaterThan(n / 3);
    expect(l[0].clipped).toBeGreaterThan(0); // the sine's crests reach 0.999 too
    expect(l[1].clipped).toBe(0);
    m.reset();
    expect(m.levels()[3].clipped).toBe(0);
  });
});
