/** Number tidying (shared/numbers.ts): rounding noise goes, real digits stay. */
import { describe, expect, it } from 'vitest';
import { plainNumber, tidy } from '../../shared/numbers.ts';

describe('tidy and plainNumber', () => {
  it('remove floating-point noise (IEEE 754 doubles carry ~16 significant digits; 12 are kept)', () => {
    expect(tidy(1.9999999999999707)).toBe(2);
    expect(tidy(0.1 + 0.2)).toBe(0.3);
    expect(tidy(256 / (48000 * (1 - (1 - 256 / 96000))))).toBe(2);
    expect(tidy(0.123456789012)).toBe(0.123456789012); // 12 real digits stay
    expect(tidy(0)).toBe(0);
    expect(tidy(Number.NaN)).toBeNaN();
    expect(plainNumber(0.10666666666666667, 4)).toBe('0.1067');
    expect(plainNumber(1e-7)).toBe('1e-7');
    expect(plainNumber(48000)).toBe('48000');
  });
});
