/**
 * The dashboard's export text and file names (client/src/lib/export.ts). Expected strings are
 * written out by hand from the format the functions document; numbers from JavaScript's own
 * toFixed / toPrecision definitions (ECMA-262 Number.prototype.toFixed, toPrecision).
 */
import { describe, expect, it } from 'vitest';
import { csvAngle, csvDb, historyPngName, historyReportImage, historyReportRows, SPECTRUM_CSV_HEADER, spectrumCsv, spectrumCsvName, utcStamp, type HistoryReportRequest, type HistorySource } from '../../client/src/lib/export.ts';
import { COLORMAP_RGB, COLORMAP_SIZE } from '../../shared/colormap.ts';

describe('file names', () => {
  it('stamps the UTC time in ISO 8601 basic form to the second', () => {
    const d = new Date(Date.UTC(2026, 11, 2, 14, 30, 0, 999));
    expect(utcStamp(d)).toBe('20261202T143000Z');
    expect(historyPngName(d)).toBe('nullsteer-history-20261202T143000Z.png');
    expect(spectrumCsvName(d)).toBe('nullsteer-spectrum-20261202T143000Z.csv');
  });

  it('pads every field and uses UTC whatever the local zone', () => {
    expect(utcStamp(new Date('2027-01-05T03:04:05.000+05:00'))).toBe('20270104T220405Z');
    expect(utcStamp(new Date(0))).toBe('19700101T000000Z');
  });
});

describe('number fields', () => {
  it('angles with three decimals, levels with seven significant digits', () => {
    expect(csvAngle(35)).toBe('35.000');
    expect(csvAngle(-12.5)).toBe('-12.500');
    expect(csvAngle(359.0004)).toBe('359.000');
    expect(csvAngle(-0)).toBe('0.000');
    expect(csvDb(-12.345678)).toBe('-12.34568');
    expect(csvDb(3)).toBe('3.000000');
    expect(csvDb(-0)).toBe('0.000000');
    expect(csvDb(-123.4567891)).toBe('-123.4568');
  });

  it('keeps float32 levels to their precision', () => {
    const f = new Float32Array([-12.345678]);
    // float32(-12.345678) = -12.345678329467773 (IEEE 754 binary32; Python struct.pack('<f') agrees).
    expect(f[0]).toBe(-12.345678329467773);
    expect(csvDb(f[0])).toBe('-12.34568');
  });

  it('writes non-finite values as numpy and pandas read them', () => {
    expect(csvDb(-Infinity)).toBe('-inf');
    expect(csvDb(Infinity)).toBe('inf');
    expect(csvDb(Number.NaN)).toBe('nan');
  });
});

describe('spectrumCsv', () => {
  it('one line per direction, elevation outer and azimuth inner, after the comments and header', () => {
    const text = spectrumCsv({
      azimuthDeg: [0, 90, 180],
      elevationDeg: [0, 30],
      conventionalDb: new Float32Array([-1, -2, -3, -4, -5, -6]),
      mvdrDb: [-10.5, -20.25, -30.125, -40, -50, -60],
      sampleIndex: 480000,
      startSampleIndex: 96000,
      sampleRateHz: 48000,
      seq: 7,
      emittedAtMs: Date.UTC(2026, 11, 2, 14, 30, 0, 250),
      normalised: false,
    });
    expect(text).toBe(
      [
        '# nullsteer direction spectrum',
        '# sample_index: 480000',
        "# time_s from: the history's start, stream sample 96000",
        '# sample_rate_hz: 48000',
        '# row_seq: 7',
        '# emitted_at: 2026-12-02T14:30:00.250Z',
        '# normalised_per_bin: false',
        'time_s,stream_time_s,sample_index,azimuth_deg,elevation_deg,conventional_db,mvdr_db',
        // (480000 − 96000) / 48000 = 8 s from the history's start; 480000 / 48000 = 10 s stream time.
        '8,10,480000,0.000,0.000,-1.000000,-10.50000',
        '8,10,480000,90.000,0.000,-2.000000,-20.25000',
        '8,10,480000,180.000,0.000,-3.000000,-30.12500',
        '8,10,480000,0.000,30.000,-4.000000,-40.00000',
        '8,10,480000,90.000,30.000,-5.000000,-50.00000',
        '8,10,480000,180.000,30.000,-6.000000,-60.00000',
        '',
      ].join('\n'),
    );
  });

  it('leaves the field of a method not computed empty, and omits what is not known', () => {
    const text = spectrumCsv({ azimuthDeg: [10, 20], elevationDeg: [0], conventionalDb: null, mvdrDb: [-3.5, -Infinity] });
    expect(text).toBe(['# nullsteer direction spectrum', SPECTRUM_CSV_HEADER, ',,,10.000,0.000,,-3.500000', ',,,20.000,0.000,,-inf', ''].join('\n'));
    const none = spectrumCsv({ azimuthDeg: [10], elevationDeg: [0], conventionalDb: null, mvdrDb: null });
    expect(none.split('\n').slice(1)).toEqual([SPECTRUM_CSV_HEADER, ',,,10.000,0.000,,', '']);
    // Sample index known, history start not: stream time only, the rate from the derived figures.
    const noStart = spectrumCsv({ azimuthDeg: [10], elevationDeg: [0], conventionalDb: null, mvdrDb: [-1], sampleIndex: 12_288, derived: { sampleRateHz: 48000 } as never }).split('\n');
    expect(noStart.slice(1, 4)).toEqual(['# sample_index: 12288', '# time_s from: not known (no history start)', '# sample_rate_hz: 48000']);
    // 12288 / 48000 = 0.256 s.
    expect(noStart[noStart.length - 2]).toBe(',0.256,12288,10.000,0.000,,-1.000000');
  });

  it('gives the parameters as one compact JSON comment each, which parses back', () => {
    const params = {
      lambda: 0.99,
      loading: { mode: 'relative' as const, ratio: 0.01 },
      bandHz: [1000, 6000] as [number, number],
      grid: { azimuthDeg: { startDeg: 0, stopDeg: 359, stepDeg: 1 } },
      methods: ['mvdr' as const],
      spectrumRateHz: 20,
      normalise: false,
      fftSize: 512,
    };
    const derived = { tauS: 0.5333333333333333, hopSamples: 256, sampleRateHz: 48000, directions: 360, bins: 54 } as never;
    const lines = spectrumCsv({ azimuthDeg: [0], elevationDeg: [0], conventionalDb: null, mvdrDb: [0], params, derived }).split('\n');
    expect(lines[1]).toBe('# params: {"lambda":0.99,"loading":{"mode":"relative","ratio":0.01},"bandHz":[1000,6000],"grid":{"azimuthDeg":{"startDeg":0,"stopDeg":359,"stepDeg":1}},"methods":["mvdr"],"spectrumRateHz":20,"normalise":false,"fftSize":512}');
    expect(JSON.parse(lines[1].slice('# params: '.length))).toEqual(params);
    expect(JSON.parse(lines[2].slice('# derived: '.length))).toEqual(derived);
    expect(lines.slice(3)).toEqual([SPECTRUM_CSV_HEADER, ',,,0.000,0.000,,0.000000', '']);
  });

  it('refuses a spectrum whose length is not nAz·nEl', () => {
    expect(() => spectrumCsv({ azimuthDeg: [0, 1], elevationDeg: [0, 1], conventionalDb: [0, 0, 0], mvdrDb: null })).toThrow(new RangeError('conventionalDb: 3 values for a 2×2 grid (4 expected)'));
  });
});

/**
 * A history ring as client/src/lib/history.ts keeps it: capacity 8, 10 rows pushed (rows 2–9 held),
 * 4 azimuths; row n has sample index 1000 + 2400·n (20 rows/s at 48 kHz) and arrived at 100·n ms
 * (late and bunched: arrival is not the rows' time).
 */
function fakeHistory(withSampleIndex: boolean): HistorySource {
  const cap = 8;
  const nAz = 4;
  const count = 10;
  const levels = { mvdr: new Float32Array(cap * nAz), conventional: new Float32Array(cap * nAz).fill(Number.NaN) };
  const rowMaxDb = { mvdr: new Float32Array(cap), conventional: new Float32Array(cap).fill(-Infinity) };
  const sampleIndex = new Float64Array(cap);
  const arrivalMs = new Float64Array(cap);
  for (let n = count - cap; n < count; n++) {
    const s = n % cap;
    // Row n: −20 dB everywhere but azimuth column n % 4 at −5 dB (the row's maximum).
    for (let a = 0; a < nAz; a++) levels.mvdr[s * nAz + a] = a === n % nAz ? -5 : -20;
    rowMaxDb.mvdr[s] = -5;
    sampleIndex[s] = 1000 + 2400 * n;
    arrivalMs[s] = 100 * n;
  }
  return { nAz, azimuthDeg: [0, 90, 180, 270], levels, rowMaxDb, arrivalMs, ...(withSampleIndex ? { sampleIndex } : {}), count, oldest: count - cap, slot: (n: number) => n % cap };
}

const PARAMS = { lambda: 0.99, loading: { mode: 'relative' as const, ratio: 0.01 }, bandHz: [300, 6000] as [number, number], grid: { azimuthDeg: { startDeg: 0, stopDeg: 270, stepDeg: 90 } }, methods: ['mvdr' as const], spectrumRateHz: 20, normalise: false, fftSize: 512 };

function request(h: HistorySource, over: Partial<HistoryReportRequest> = {}): HistoryReportRequest {
  return { history: h, method: 'mvdr', range: { mode: 'auto', spanDb: 30 }, topRow: 9, spanS: 0.2, sampleRateHz: 48000, params: PARAMS, tauS: 0.5333333333333333, arrayName: 'ring 8', newest: { sampleIndex: 1000 + 2400 * 9, emittedAtMs: Date.UTC(2026, 11, 3, 14, 30, 10) }, ...over };
}

describe('history report export', () => {
  it('takes the rows of the view span up to its top row, timed by their sample indices', () => {
    const sel = historyReportRows(request(fakeHistory(true)));
    // Rows 9, 8, 7, 6 are within 0.2 s of row 9 (2400 samples = 0.05 s apart); row 5 is 0.2 s back.
    expect(sel.rows).toEqual([6, 7, 8, 9]);
    expect(sel.fromSampleIndex).toBe(true);
    expect(sel.timeS.map((t) => Number(t.toFixed(9)))).toEqual([0, 0.05, 0.1, 0.15]);
    // The newest row (9) was emitted at 14:30:10 UTC; row 6 is 0.15 s earlier.
    expect(sel.utcEndMs).toBe(Date.UTC(2026, 11, 3, 14, 30, 10));
    expect(sel.utcStartMs).toBeCloseTo(Date.UTC(2026, 11, 3, 14, 30, 9, 850), 6);
    // Paused two rows back: the top row is 7, its UTC moved back by 2 × 0.05 s.
    const back = historyReportRows(request(fakeHistory(true), { topRow: 7, spanS: 100 }));
    expect(back.rows).toEqual([2, 3, 4, 5, 6, 7]);
    expect(back.utcEndMs).toBeCloseTo(Date.UTC(2026, 11, 3, 14, 30, 9, 900), 6);
  });

  it('falls back to arrival times when the ring keeps no sample index', () => {
    const sel = historyReportRows(request(fakeHistory(false), { spanS: 0.25 }));
    expect(sel.fromSampleIndex).toBe(false);
    // Arrivals 100 ms apart: rows 8 and 9 are within 0.25 s, row 7 is 0.2 s back (inside), row 6 0.3 s.
    expect(sel.rows).toEqual([7, 8, 9]);
    expect(sel.timeS.map((t) => Number(t.toFixed(9)))).toEqual([0, 0.1, 0.2]);
  });

  it('draws the rows oldest on top, coloured as the dashboard colours them, with axes and caption', () => {
    const img = historyReportImage(request(fakeHistory(true)))!;
    const R = img.layout.raster;
    expect([R.w, R.h]).toEqual([4, 4]);
    expect(img.width).toBeGreaterThan(R.w + 40);
    expect(img.height).toBeGreaterThan(R.h + 40);
    const top = COLORMAP_SIZE - 1;
    // Auto range: each row's maximum (−5 dB) takes the scale's top entry, −20 dB is 15 of 30 dB down:
    // colorize's index ((v − lo)·255/30) | 0 = (15·8.5) | 0 = 127.
    const px = (x: number, y: number) => {
      const o = ((R.y + y) * img.width + R.x + x) * 4;
      return [img.data[o], img.data[o + 1], img.data[o + 2], img.data[o + 3]];
    };
    const entry = (k: number) => [COLORMAP_RGB[3 * k], COLORMAP_RGB[3 * k + 1], COLORMAP_RGB[3 * k + 2], 255];
    for (let y = 0; y < 4; y++) {
      const n = 6 + y; // oldest exported row first
      for (let x = 0; x < 4; x++) expect(px(x, y), `row ${n} column ${x}`).toEqual(entry(x === n % 4 ? top : 127));
    }
    expect(img.layout.captionLines.join(' · ')).toBe('array ring 8 · MVDR · band 300–6000 Hz · τ 0.5333 s (λ 0.99) · loading 0.01·tr(R)/M · 2026-12-03 14:30:09–14:30:10 UTC');
    expect(img.layout.titles.map((t) => t.text)).toContain('dB re row max');
    expect(img.layout.dbTicks[0].label).toBe('−30');
    // Manual range: absolute dB on the bar.
    const manual = historyReportImage(request(fakeHistory(true), { range: { mode: 'manual', lowDb: -40, highDb: 0 } }))!;
    expect(manual.layout.titles.map((t) => t.text)).toContain('dB');
    expect(historyReportImage(request({ ...fakeHistory(true), count: 0, oldest: 0 }))).toBeNull();
  });
});
