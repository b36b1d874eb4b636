/**
 * The dashboard's export text and file names (client/src/lib/export.ts). Expected strings are
 * written out by hand from the format the functions document; numbers from JavaScript's own
 * toFixed / toPrecision definitions (ECMA-262 Number.prototype.toFixed, toPrecision).
 */
import { describe, expect, it } from 'vitest';
import { csvAngle, csvDb, historyPngName, SPECTRUM_CSV_HEADER, spectrumCsv, spectrumCsvName, utcStamp } from '../../client/src/lib/export.ts';

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
      seq: 7,
      emittedAtMs: Date.UTC(2026, 11, 2, 14, 30, 0, 250),
      normalised: false,
    });
    expect(text).toBe(
      [
        '# nullsteer direction spectrum',
        '# sample_index: 480000',
        '# row_seq: 7',
        '# emitted_at: 2026-12-02T14:30:00.250Z',
        '# normalised_per_bin: false',
        'azimuth_deg,elevation_deg,conventional_db,mvdr_db',
        '0.000,0.000,-1.000000,-10.50000',
        '90.000,0.000,-2.000000,-20.25000',
        '180.000,0.000,-3.000000,-30.12500',
        '0.000,30.000,-4.000000,-40.00000',
        '90.000,30.000,-5.000000,-50.00000',
        '180.000,30.000,-6.000000,-60.00000',
        '',
      ].join('\n'),
    );
  });

  it('leaves the field of a method not computed empty, and omits what is not known', () => {
    const text = spectrumCsv({ azimuthDeg: [10, 20], elevationDeg: [0], conventionalDb: null, mvdrDb: [-3.5, -Infinity] });
    expect(text).toBe(['# nullsteer direction spectrum', SPECTRUM_CSV_HEADER, '10.000,0.000,,-3.500000', '20.000,0.000,,-inf', ''].join('\n'));
    const none = spectrumCsv({ azimuthDeg: [10], elevationDeg: [0], conventionalDb: null, mvdrDb: null });
    expect(none.split('\n').slice(1)).toEqual([SPECTRUM_CSV_HEADER, '10.000,0.000,,', '']);
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
    expect(lines.slice(3)).toEqual([SPECTRUM_CSV_HEADER, '0.000,0.000,,0.000000', '']);
  });

  it('refuses a spectrum whose length is not nAz·nEl', () => {
    expect(() => spectrumCsv({ azimuthDeg: [0, 1], elevationDeg: [0, 1], conventionalDb: [0, 0, 0], mvdrDb: null })).toThrow(new RangeError('conventionalDb: 3 values for a 2×2 grid (4 expected)'));
  });
});
