/**
 * The report caption (shared/report-caption.ts) and the exported tables' time columns
 * (shared/time-columns.ts). Expected strings are written out by hand from the documented formats;
 * UTC fields from Date.UTC (ECMA-262), the τ value 1.9999999999999707 is the noisy 2 s the issue
 * quotes (τ computed back from λ).
 */
import { describe, expect, it } from 'vitest';
import { captionFields, loadingText, reportCaption, utcSpan } from '../../shared/report-caption.ts';
import { csvSeconds, TIME_COLUMNS_HEADER, timeColumns } from '../../shared/time-columns.ts';

const BASE = {
  arrayName: 'ring 8',
  method: 'mvdr' as const,
  bandHz: [300, 6000] as const,
  tauS: 1.9999999999999707,
  lambda: 0.99733,
  loading: { mode: 'relative' as const, ratio: 0.01 },
  utcStartMs: Date.UTC(2026, 11, 3, 14, 30, 0, 250),
  utcEndMs: Date.UTC(2026, 11, 3, 14, 31, 5, 900),
};

describe('report caption', () => {
  it('names array, method, band, τ (with λ), loading and the UTC span, in that order', () => {
    expect(captionFields(BASE)).toEqual(['array ring 8', 'MVDR', 'band 300–6000 Hz', 'τ 2 s (λ 0.99733)', 'loading 0.01·tr(R)/M', '2026-12-03 14:30:00–14:31:05 UTC']);
    expect(reportCaption(BASE)).toBe('array ring 8 · MVDR · band 300–6000 Hz · τ 2 s (λ 0.99733) · loading 0.01·tr(R)/M · 2026-12-03 14:30:00–14:31:05 UTC');
  });

  it('writes conventional, τ without λ, a short τ tidily, and says when UTC is not known', () => {
    const f = captionFields({ ...BASE, method: 'conventional', tauS: 0.15000000000000002, lambda: null, utcStartMs: null });
    expect(f[1]).toBe('conventional');
    expect(f[3]).toBe('τ 0.15 s');
    expect(f[5]).toBe('UTC not known');
  });

  it('describes each loading mode', () => {
    expect(loadingText({ mode: 'relative', ratio: 0.01 })).toBe('loading 0.01·tr(R)/M');
    expect(loadingText({ mode: 'relative-db', db: -20 })).toBe('loading −20 dB re tr(R)/M');
    expect(loadingText({ mode: 'fixed', delta: 0.001 })).toBe('loading δ 0.001');
    expect(loadingText({ mode: 'wng', floorDb: 3 })).toBe('loading WNG floor 3 dB');
  });

  it('gives the date once within a day and twice across midnight', () => {
    expect(utcSpan(Date.UTC(2026, 11, 3, 23, 59, 30), Date.UTC(2026, 11, 4, 0, 0, 30))).toBe('2026-12-03 23:59:30–2026-12-04 00:00:30 UTC');
    expect(utcSpan(Date.UTC(2027, 0, 5, 3, 4, 5), Date.UTC(2027, 0, 5, 3, 4, 9))).toBe('2027-01-05 03:04:05–03:04:09 UTC');
    expect(utcSpan(null, 0)).toBeNull();
    expect(utcSpan(Number.NaN, 0)).toBeNull();
  });
});

describe('time columns', () => {
  it('header and fields: time from the start, stream time, sample index', () => {
    expect(TIME_COLUMNS_HEADER).toBe('time_s,stream_time_s,sample_index');
    // 96256 / 48000 = 2.005333…, (96256 − 48000) / 48000 = 1.005333… (to the microsecond).
    expect(timeColumns(96256, 48000, 48000)).toBe('1.005333,2.005333,96256');
    expect(timeColumns(120000, 0, 48000)).toBe('2.5,2.5,120000');
  });

  it('seconds without floating-point noise or trailing zeros', () => {
    expect(csvSeconds(1.9999999999999707)).toBe('2');
    expect(csvSeconds(0.1 + 0.2)).toBe('0.3');
    expect(csvSeconds(-0.0000001)).toBe('0');
    expect(csvSeconds(256 / 48000)).toBe('0.005333');
    expect(csvSeconds(Number.NaN)).toBe('');
  });
});
