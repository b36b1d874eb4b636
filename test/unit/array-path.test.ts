/**
 * Where an array file is looked for, and the error when it is nowhere: every path tried, none doubled
 * (a project-relative `config/arrays/x.json` given from another directory once became
 * `<project>/config/config/arrays/x.json`).
 */
import { mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join, resolve } from 'node:path';
import { describe, expect, it } from 'vitest';
import { arrayPathCandidates, loadArrayFile, loadConfig, PROJECT_CONFIG_DIR, resolveArrayPath } from '../../server/config/load.ts';
import { ConfigError } from '../../server/config/validate.ts';
import { analyzeCommand } from '../../server/tools/analyze.ts';

const elsewhere = mkdtempSync(join(tmpdir(), 'nullsteer-arraypath-'));

async function issueOf(p: Promise<unknown>): Promise<string> {
  try {
    await p;
  } catch (e) {
    expect(e).toBeInstanceOf(ConfigError);
    return (e as ConfigError).message;
  }
  throw new Error('expected a ConfigError');
}

describe('array file paths', () => {
  it('a relative path: cwd first, then config/; an absolute one as is', () => {
    expect(arrayPathCandidates('arrays/x.json', elsewhere)).toEqual([join(elsewhere, 'arrays/x.json'), join(PROJECT_CONFIG_DIR, 'arrays/x.json')]);
    expect(arrayPathCandidates('/abs/x.json', elsewhere)).toEqual(['/abs/x.json']);
    expect(resolveArrayPath('arrays/line-8.json', elsewhere)).toBe(join(PROJECT_CONFIG_DIR, 'arrays/line-8.json'));
    writeFileSync(join(elsewhere, 'mine.json'), '{}');
    expect(resolveArrayPath('mine.json', elsewhere)).toBe(join(elsewhere, 'mine.json'));
  });

  it('config/arrays/x.json from another directory finds the shipped file, never config/config/', () => {
    const tried = arrayPathCandidates('config/arrays/line-8.json', elsewhere);
    expect(tried).toEqual([join(elsewhere, 'config/arrays/line-8.json'), resolve(PROJECT_CONFIG_DIR, 'arrays/line-8.json')]);
    expect(tried.some((p) => p.includes(join('config', 'config')))).toBe(false);
    expect(resolveArrayPath('config/arrays/line-8.json', elsewhere)).toBe(resolve(PROJECT_CONFIG_DIR, 'arrays/line-8.json'));
  });

  it('a missing file: the error names every path tried', async () => {
    const msg = await issueOf(loadArrayFile('config/arrays/nope.json', elsewhere));
    expect(msg).toContain('array.file = "config/arrays/nope.json": no such file (tried ');
    for (const p of arrayPathCandidates('config/arrays/nope.json', elsewhere)) expect(msg).toContain(p);
    expect(msg).toContain(join(elsewhere, 'config/arrays/nope.json'));
    expect(msg).toContain(resolve(PROJECT_CONFIG_DIR, 'arrays/nope.json'));
    const viaConfig = await issueOf(loadConfig({ env: {}, cwd: elsewhere, overrides: [['array.file', 'arrays/nope.json']] }));
    expect(viaConfig).toContain(`tried ${join(elsewhere, 'arrays/nope.json')}, ${join(PROJECT_CONFIG_DIR, 'arrays/nope.json')}`);
    expect(await issueOf(loadArrayFile('/no/such/dir/x.json', elsewhere))).toContain('no such file (/no/such/dir/x.json)');
  });

  it('analyze resolves --array the same way and names the paths tried', async () => {
    let err = '';
    const raw = join(elsewhere, 'tiny.raw');
    writeFileSync(raw, Buffer.alloc(8 * 2 * 1024));
    const code = await analyzeCommand([raw, '--raw', '--channels', '8', '--rate', '16000', '--encoding', 'int16', '--array', 'arrays/nope.json'], { out: () => {}, err: (s) => (err += s) });
    expect(code).toBe(2);
    expect(err).toContain(`tried ${resolve('arrays/nope.json')}, ${join(PROJECT_CONFIG_DIR, 'arrays/nope.json')}`);
  });
});
