/** Preset files: save, list, get, delete, names, and corrupt files that leave the others usable. */
import { mkdtempSync, readdirSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { patchParams, type ProcessingParams } from '../../server/engine/params.ts';
import { PresetError, PresetStore } from '../../server/session/presets.ts';

const BASE: ProcessingParams = {
  lambda: 0.99,
  loading: { mode: 'relative', ratio: 0.01 },
  bandHz: [300, 6000],
  grid: { azimuthDeg: { startDeg: 0, stopDeg: 359, stepDeg: 1 } },
  methods: ['mvdr', 'conventional'],
  spectrumRateHz: 20,
  normalise: false,
  fftSize: 512,
};
const validate = (p: unknown) => {
  if (typeof p !== 'object' || p === null) throw new Error('params: not a JSON object');
  return patchParams(BASE, p, { sampleRateHz: 48000, hop: 256 });
};

describe('PresetStore', () => {
  it('saves, lists, reads back and deletes; files are complete JSON with no temporary left', () => {
    const dir = mkdtempSync(join(tmpdir(), 'nullsteer-presets-'));
    const s = new PresetStore(dir, validate);
    const short = s.save('short memory', { ...BASE, lambda: 0.95 }).preset;
    s.save('long-memory.v2', { ...BASE, lambda: 0.999 });
    expect(short.params.lambda).toBe(0.95);
    expect(readdirSync(dir).sort()).toEqual(['long-memory.v2.json', 'short memory.json']);
    expect(s.list()).toEqual([
      { name: 'long-memory.v2', savedAt: expect.any(String), valid: true },
      { name: 'short memory', savedAt: short.savedAt, valid: true },
    ]);
    expect(new PresetStore(dir, validate).get('long-memory.v2').params).toEqual({ ...BASE, lambda: 0.999 });
    s.delete('short memory');
    expect(s.list().map((p) => p.name)).toEqual(['long-memory.v2']);
    expect(() => s.delete('short memory')).toThrow(expect.objectContaining({ kind: 'not-found' }));
  });

  it('a name in use is refused unless overwrite is asked; a replacement reports the version it replaced', () => {
    const dir = mkdtempSync(join(tmpdir(), 'nullsteer-presets-'));
    const s = new PresetStore(dir, validate);
    const first = s.save('field day', { ...BASE, lambda: 0.95 });
    expect(first.replaced).toBeNull();
    const before = readFileSync(join(dir, 'field day.json'), 'utf8');
    for (const options of [undefined, {}, { overwrite: false }]) {
      expect(() => s.save('field day', { ...BASE, lambda: 0.999 }, options)).toThrow(
        expect.objectContaining({ kind: 'exists', presetName: 'field day', message: 'a preset named "field day" exists; save with overwrite to replace it' }),
      );
    }
    expect(readFileSync(join(dir, 'field day.json'), 'utf8')).toBe(before); // refused: the file untouched
    const second = s.save('field day', { ...BASE, lambda: 0.999 }, { overwrite: true });
    expect(second.replaced).toEqual({ savedAt: first.preset.savedAt });
    expect(s.get('field day').params.lambda).toBe(0.999);
    expect(readdirSync(dir)).toEqual(['field day.json']);
    // A file that does not validate takes the name too; overwrite replaces it (its savedAt unknown).
    writeFileSync(join(dir, 'broken.json'), '{ not json');
    expect(() => s.save('broken', BASE)).toThrow(expect.objectContaining({ kind: 'exists' }));
    expect(s.save('broken', BASE, { overwrite: true }).replaced).toEqual({ savedAt: null });
    expect(s.get('broken').params).toEqual(BASE);
    // Bad parameters are named first, whether or not the name is in use.
    expect(() => s.save('field day', { ...BASE, lambda: 1.5 })).toThrow(expect.objectContaining({ kind: 'invalid' }));
  });

  it('refuses bad names and bad parameters when saving', () => {
    const s = new PresetStore(mkdtempSync(join(tmpdir(), 'nullsteer-presets-')), validate);
    for (const name of ['', '../escape', 'a/b', '.hidden', 'x'.repeat(65), 'trailing.', 'nul\u0000']) {
      expect(() => s.save(name, BASE), JSON.stringify(name)).toThrow(PresetError);
    }
    expect(() => s.save('ok', { ...BASE, lambda: 1.5 })).toThrow(/^lambda: /);
  });

  it('a corrupt file is listed with its reason and cannot be read; the others stay usable', () => {
    const dir = mkdtempSync(join(tmpdir(), 'nullsteer-presets-'));
    const s = new PresetStore(dir, validate);
    s.save('good', BASE);
    writeFileSync(join(dir, 'truncated.json'), '{"name": "truncated", "savedAt": "2026-12-02T10:00:00Z", "par');
    writeFileSync(join(dir, 'renamed.json'), JSON.stringify({ name: 'other', savedAt: '2026-12-02T10:00:00Z', params: BASE }));
    writeFileSync(join(dir, 'out-of-range.json'), JSON.stringify({ name: 'out-of-range', savedAt: '2026-12-02T10:00:00Z', params: { ...BASE, spectrumRateHz: 500 } }));
    writeFileSync(join(dir, 'extra.json'), JSON.stringify({ name: 'extra', savedAt: '2026-12-02T10:00:00Z', params: BASE, note: 'hand-edited' }));
    const list = s.list();
    expect(list.map((p) => [p.name, p.valid])).toEqual([
      ['extra', false],
      ['good', true],
      ['out-of-range', false],
      ['renamed', false],
      ['truncated', false],
    ]);
    const err = (n: string) => (list.find((p) => p.name === n) as { error: string }).error;
    expect(err('truncated')).toMatch(/^not valid JSON/);
    // Closed schema, like a REST body: a field the format does not have makes the file invalid.
    expect(err('extra')).toBe('note: unknown field; known: name, savedAt, params');
    expect(() => s.get('extra')).toThrow(expect.objectContaining({ kind: 'invalid', message: 'note: unknown field; known: name, savedAt, params' }));
    expect(err('renamed')).toBe('names itself "other", not "renamed"');
    expect(err('out-of-range')).toMatch(/^spectrumRateHz: /);
    expect(() => s.get('truncated')).toThrow(expect.objectContaining({ kind: 'invalid' }));
    expect(s.get('good').params).toEqual(BASE);
  });
});
