import { mkdtempSync, readFileSync, writeFileSync, existsSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { formatArrayFile, updateArrayFile } from '../../server/config/array-file-update.ts';
import { ConfigError } from '../../server/config/validate.ts';

function arrayFile(extra: Record<string, unknown> = {}): string {
  const dir = mkdtempSync(join(tmpdir(), 'ns-arr-'));
  const path = join(dir, 'line.json');
  writeFileSync(path, JSON.stringify({ name: 'fence line', note: 'kept', positions: [[0, 0, 0], [0.1, 0, 0]], ...extra }, null, 2));
  return path;
}

describe('updateArrayFile', () => {
  it('replaces only the named fields and keeps unknown ones and their order', async () => {
    const path = arrayFile();
    const g = await updateArrayFile(path, { calibration: { gainDb: [0, 1.5], delayUs: [0, -12] } });
    expect(g.calibration).toEqual({ gainDb: [0, 1.5], delayUs: [0, -12] });
    const text = readFileSync(path, 'utf8');
    const json = JSON.parse(text);
    expect(Object.keys(json)).toEqual(['name', 'note', 'positions', 'calibration']);
    expect(json.note).toBe('kept');
    expect(text).toContain('[0.1, 0, 0]');
    const g2 = await updateArrayFile(path, { calibration: undefined });
    expect(g2.calibration).toBeUndefined();
    expect(JSON.parse(readFileSync(path, 'utf8')).calibration).toBeUndefined();
  });

  it('leaves the file untouched when the result does not validate', async () => {
    const path = arrayFile();
    const before = readFileSync(path, 'utf8');
    await expect(updateArrayFile(path, { calibration: { gainDb: [0] } })).rejects.toBeInstanceOf(ConfigError);
    expect(readFileSync(path, 'utf8')).toBe(before);
    expect(existsSync(`${path}.tmp`)).toBe(false);
  });

  it('serialises concurrent updates so neither is lost', async () => {
    const path = arrayFile();
    await Promise.all([updateArrayFile(path, { a: 1 }), updateArrayFile(path, { b: 2 }), updateArrayFile(path, { c: 3 })]);
    const json = JSON.parse(readFileSync(path, 'utf8'));
    expect([json.a, json.b, json.c]).toEqual([1, 2, 3]);
  });

  it('keeps short number lists on one line', () => {
    expect(formatArrayFile({ p: [[1, -2.5e-3, 3]] })).toBe('{\n  "p": [\n    [1, -0.0025, 3]\n  ]\n}\n');
  });
});
