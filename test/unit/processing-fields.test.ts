/**
 * shared/processing-fields.ts: the one table of the processing panel's labels and ranges. Checked
 * against the configuration schema (every panel field with a configuration leaf has exactly its
 * range), against the live checks (server/engine/params.ts accepts both ends of each range and
 * refuses just beyond them), and the mapping of the server's refusals to the panel's words.
 */
import { describe, expect, it } from 'vitest';
import { schemaLeaves } from '../../server/config/schema.ts';
import { patchParams, type ProcessingParams } from '../../server/engine/params.ts';
import { checkField, fieldName, inRange, PROCESSING_FIELDS, PROCESSING_LIMITS, refusalMessage } from '../../shared/processing-fields.ts';

const base: ProcessingParams = {
  lambda: 0.99,
  loading: { mode: 'relative', ratio: 0.01 },
  bandHz: [300, 6000],
  grid: { azimuthDeg: { startDeg: 0, stopDeg: 180, stepDeg: 1 } },
  methods: ['mvdr', 'conventional'],
  spectrumRateHz: 20,
  normalise: false,
  fftSize: 512,
};
// fs 400 kHz so the band's upper limit (fs/2) does not cut into the configuration's 192 kHz.
const ctx = { sampleRateHz: 400000, hop: 256 };

/** The live patch that sets one panel field to v. */
const PATCHES: Record<string, (v: number) => Record<string, unknown>> = {
  tauS: (v) => ({ tauS: v }),
  lambda: (v) => ({ lambda: v }),
  'loading.ratio': (v) => ({ loading: { mode: 'relative', ratio: v } }),
  'loading.db': (v) => ({ loading: { mode: 'relative-db', db: v } }),
  'loading.delta': (v) => ({ loading: { mode: 'fixed', delta: v } }),
  'loading.floorDb': (v) => ({ loading: { mode: 'wng', floorDb: v } }),
  'loading.maxRatio': (v) => ({ loading: { mode: 'wng', floorDb: 0, maxRatio: v } }),
  'bandHz.low': (v) => ({ bandHz: [v, 192000] }),
  'bandHz.high': (v) => ({ bandHz: [0, v] }),
  'grid.azimuthDeg.stepDeg': (v) => ({ grid: { azimuthDeg: { startDeg: 0, stopDeg: 90, stepDeg: v } } }),
  'grid.elevationDeg.stepDeg': (v) => ({ grid: { azimuthDeg: { startDeg: 0, stopDeg: 10, stepDeg: 1 }, elevationDeg: { startDeg: 0, stopDeg: 0.5, stepDeg: v } } }),
  spectrumRateHz: (v) => ({ spectrumRateHz: v }),
};

describe('the processing panel\'s ranges', () => {
  it('every panel field with a configuration leaf has exactly the schema\'s range', () => {
    const leaves = new Map(schemaLeaves().map((l) => [l.path, l.spec]));
    let checked = 0;
    for (const [path, f] of Object.entries(PROCESSING_FIELDS)) {
      if (!f.configPath) continue;
      const spec = leaves.get(f.configPath) as { min: number; max: number } | undefined;
      expect(spec, f.configPath).toBeDefined();
      expect([f.range!.min, f.range!.max], path).toEqual([spec!.min, spec!.max]);
      expect(f.range!.minOpen ?? false).toBe(false); // the schema's ranges are closed
      checked++;
    }
    expect(checked).toBe(6); // τ, loading ratio, band low, band high, azimuth step, spectrum rate
  });

  it('every processing leaf of the configuration is a panel field', () => {
    const configured = new Set(Object.values(PROCESSING_FIELDS).map((f) => f.configPath).filter(Boolean));
    for (const l of schemaLeaves()) if (l.path.startsWith('processing.')) expect(configured.has(l.path), l.path).toBe(true);
  });

  it('the live checks accept both ends of every range and refuse just beyond them', () => {
    for (const [path, f] of Object.entries(PROCESSING_FIELDS)) {
      if (!f.range) continue;
      const patch = PATCHES[path];
      expect(patch, path).toBeDefined();
      const { min, max, minOpen, maxOpen } = f.range;
      const eps = (x: number) => Math.max(Math.abs(x) * 1e-9, 1e-12);
      // Band low's upper end is reachable only as a limit: low < high ≤ 192 kHz.
      const inside = [minOpen ? min + eps(min) : min, maxOpen ? max - eps(max) : path === 'bandHz.low' ? max - 1 : max];
      const outside = [min - (minOpen ? 0 : Math.max(eps(min), 1e-6 * Math.max(1, Math.abs(min)))), max + (maxOpen ? 0 : Math.max(eps(max), 1e-6 * Math.max(1, Math.abs(max))))];
      for (const v of inside) {
        expect(inRange(v, f.range)).toBe(true);
        expect(() => patchParams(base, patch(v), ctx), `${path} = ${v}`).not.toThrow();
      }
      for (const v of outside) {
        expect(inRange(v, f.range)).toBe(false);
        expect(checkField(path, v)).toMatch(new RegExp(`^${fieldName(path).replace(/[()]/g, '\\$&')}: `));
        expect(() => patchParams(base, patch(v), ctx), `${path} = ${v}`).toThrow();
      }
    }
  });

  it('the panel\'s own check writes the refusal in the panel\'s words', () => {
    expect(checkField('tauS', 5000)).toBe('time constant τ: 5000 out of range; allowed 0.01–3600 s');
    expect(checkField('lambda', 1)).toBe('forgetting factor λ: 1 out of range; allowed (0, 1)');
    expect(checkField('tauS', 2)).toBeNull();
    expect(PROCESSING_LIMITS.tauS).toEqual({ min: 0.01, max: 3600 });
  });
});

describe('refusal messages in the panel\'s words', () => {
  it('the server\'s refusals name the field as the panel shows it', () => {
    const refusal = (patch: unknown): string => {
      try {
        patchParams(base, patch, { sampleRateHz: 48000, hop: 256 });
      } catch (e) {
        return refusalMessage((e as Error).message);
      }
      throw new Error('not refused');
    };
    expect(refusal({ tauS: 0.001 })).toBe('time constant τ: 0.001 out of range; allowed 0.01–3600 s');
    expect(refusal({ fftSize: 4096, tauS: 0.02 })).toBe('time constant τ: 0.02 out of range; allowed more than one hop (0.0426667 s at FFT size 4096) up to 3600 s');
    expect(refusal({ lambda: 1 })).toBe('forgetting factor λ: 1 out of range; allowed a number in (0, 1)');
    expect(refusal({ loading: { mode: 'relative', ratio: -1 } })).toBe('diagonal loading (ratio to tr(R)/M): must be in 0…1000000, got -1');
    expect(refusal({ loading: { mode: 'fixed', delta: 1, ratio: 2 } })).toBe("diagonal loading (ratio to tr(R)/M): unknown field for mode 'fixed'; known: mode, delta");
    expect(refusal({ loading: { mode: 'wng', floorDb: 1000 } })).toBe('diagonal loading (WNG floor): must be in -100…100, got 1000');
    expect(refusal({ bandHz: [300, 30000] })).toBe('band: [300, 30000] out of range; allowed 0 ≤ low < high ≤ 24000');
    expect(refusal({ spectrumRateHz: 100 })).toBe('spectrum rate: 100 out of range; allowed 0.5–50');
    expect(refusal({ grid: { azimuthDeg: { startDeg: 0, stopDeg: 180, stepDeg: 0 } } })).toBe('azimuth step: 0 out of range; allowed 0.01–90');
    expect(refusal({ fftSize: 1000 })).toBe('FFT size: 1000 not allowed; allowed 256, 512, 1024, 2048, 4096');
    expect(refusal({ normalise: 'yes' })).toBe('normalise per bin: must be true or false');
  });
  it('messages naming no known field pass unchanged', () => {
    expect(refusalMessage('server unreachable (Failed to fetch)')).toBe('server unreachable (Failed to fetch)');
    expect(refusalMessage('(body): must be a JSON object')).toBe('(body): must be a JSON object');
    expect(refusalMessage('gainDb: 99 out of range')).toBe('gainDb: 99 out of range');
  });
});
