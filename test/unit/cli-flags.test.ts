/**
 * Misspelt and malformed flags on every subcommand: one clean line naming the flag and the nearest
 * valid one, then the usage, exit code 2; never node:util parseArgs's own text.
 */
import { describe, expect, it } from 'vitest';
import { parseServeArgs, serveCommand } from '../../server/main.ts';
import { analyzeCommand, parseAnalyzeArgs } from '../../server/tools/analyze.ts';
import { editDistance, FlagError, nearestFlag, parseFlags, unknownFlagText } from '../../server/tools/flag-suggest.ts';
import { parseSendArgs } from '../../server/tools/send-args.ts';
import { sendCommand } from '../../server/tools/send.ts';

function capture() {
  const lines: string[] = [];
  const errs: string[] = [];
  return { lines, errs, io: { out: (s: string) => void lines.push(s), err: (s: string) => void errs.push(s), env: {} } };
}

/** Text node:util parseArgs would have printed; none of it may reach the user. */
const RAW_PARSER_TEXT = /Unknown option '|argument is ambiguous|To specify a positional|ERR_PARSE_ARGS/;

describe('editDistance (optimal string alignment)', () => {
  it('matches textbook values', () => {
    // Levenshtein's classic pair: kitten → sitting = 3 (two substitutions, one insertion; from memory).
    expect(editDistance('kitten', 'sitting')).toBe(3);
    // One adjacent swap costs 1 under Damerau's rule.
    expect(editDistance('ab', 'ba')).toBe(1);
    expect(editDistance('htp-port', 'http-port')).toBe(1);
    expect(editDistance('arary', 'array')).toBe(1);
    // The restricted form edits no substring twice: "ca" → "abc" = 3 (the unrestricted distance is 2;
    // the standard example of the difference, from memory).
    expect(editDistance('ca', 'abc')).toBe(3);
    expect(editDistance('', 'abc')).toBe(3);
    expect(editDistance('same', 'same')).toBe(0);
  });

  it('suggests only a near flag; a unique prefix counts as near', () => {
    const flags = ['http-port', 'udp-port', 'host', 'array'];
    expect(nearestFlag('htp-port', flags)).toBe('http-port');
    expect(nearestFlag('udp-prot', flags)).toBe('udp-port');
    expect(nearestFlag('arr', flags)).toBe('array');
    expect(nearestFlag('verbose', flags)).toBeNull();
    expect(nearestFlag('x'.repeat(500), flags)).toBeNull();
    expect(unknownFlagText('--htp-port=80', flags)).toBe('unknown flag --htp-port; did you mean --http-port?');
    expect(unknownFlagText('--verbose', flags)).toBe('unknown flag --verbose');
  });

  it('parseFlags names missing values and values given to switches', () => {
    const opts = { 'http-port': { type: 'string' }, json: { type: 'boolean' } } as const;
    expect(() => parseFlags(['--http-port'], opts)).toThrow(new FlagError('--http-port needs a value'));
    expect(() => parseFlags(['--http-port', '--json'], opts)).toThrow(/^--http-port needs a value \(got the flag-like "--json"; a value starting with - is written --http-port=VALUE\)$/);
    expect(() => parseFlags(['--json=yes'], opts)).toThrow(/^--json takes no value \(got "yes"\)$/);
    expect(() => parseFlags(['-q'], opts)).toThrow(/^unknown flag -q$/);
    expect(() => parseFlags(['a'], opts, false)).toThrow(/^unexpected argument 'a'/);
    expect(parseFlags(['--http-port=-1', 'f'], opts).values['http-port']).toBe('-1');
  });
});

describe('serve', () => {
  it('a misspelt flag: clean message, nearest flag, usage, exit 2', async () => {
    expect(() => parseServeArgs(['--htp-port', '0'])).toThrow(new FlagError('unknown flag --htp-port; did you mean --http-port?'));
    const c = capture();
    const code = await serveCommand(['--htp-port', '0'], c.io);
    expect(code).toBe(2);
    expect(c.errs[0].split('\n')[0]).toBe('nullsteer serve: unknown flag --htp-port; did you mean --http-port?');
    expect(c.errs[0]).toContain('usage: nullsteer serve');
    expect(c.errs.join('\n')).not.toMatch(RAW_PARSER_TEXT);
  });

  it('a flag without its value and a value after a switch', async () => {
    for (const [argv, first] of [
      [['--array'], 'nullsteer serve: --array needs a value'],
      [['--help=1'], 'nullsteer serve: --help takes no value (got "1")'],
      [['--sorce', 'network'], 'nullsteer serve: unknown flag --sorce; did you mean --source?'],
    ] as const) {
      const c = capture();
      expect(await serveCommand([...argv], c.io)).toBe(2);
      expect(c.errs[0].split('\n')[0]).toBe(first);
    }
  });
});

describe('analyze', () => {
  it('a misspelt flag: clean message, nearest flag, usage, exit 2', async () => {
    expect(() => parseAnalyzeArgs(['f.wav', '--arary', 'a.json'])).toThrow(new FlagError('unknown flag --arary; did you mean --array?'));
    const c = capture();
    const code = await analyzeCommand(['f.wav', '--arary', 'a.json'], c.io);
    expect(code).toBe(2);
    expect(c.errs[0].split('\n')[0]).toBe('nullsteer analyze: unknown flag --arary; did you mean --array?');
    expect(c.errs[0]).toContain('usage: nullsteer analyze');
    expect(c.errs.join('\n')).not.toMatch(RAW_PARSER_TEXT);
  });

  it('suggests the --timeline flags too, and checks them in --timeline mode', async () => {
    expect(() => parseAnalyzeArgs(['f.wav', '--timelin', 'out'])).toThrow(/^unknown flag --timelin; did you mean --timeline\?$/);
    const c = capture();
    expect(await analyzeCommand(['f.wav', '--timeline', 'out', '--image-metod', 'mvdr'], c.io)).toBe(2);
    expect(c.errs[0].split('\n')[0]).toBe('nullsteer analyze: unknown flag --image-metod; did you mean --image-method?');
    expect(c.errs[0]).toContain('--timeline DIR');
    const d = capture();
    expect(await analyzeCommand(['f.wav', '--timeline', 'out', '--workers'], d.io)).toBe(2);
    expect(d.errs[0].split('\n')[0]).toBe('nullsteer analyze: --workers needs a value');
    const h = capture();
    expect(await analyzeCommand(['f.wav', '--timeline', 'out', '--help'], h.io)).toBe(0);
    expect(h.lines.join('\n')).toContain('--timeline DIR');
  });

  it('a negative value needs the = form and the message says so', async () => {
    const c = capture();
    expect(await analyzeCommand(['f.wav', '--array', 'a.json', '--temperature', '-5'], c.io)).toBe(2);
    expect(c.errs[0].split('\n')[0]).toBe('nullsteer analyze: --temperature needs a value (got the flag-like "-5"; a value starting with - is written --temperature=VALUE)');
  });
});

describe('send', () => {
  it('a misspelt flag: clean message, nearest flag, usage, exit 2', async () => {
    expect(() => parseSendArgs(['f.wav', '--sped', '2'])).toThrow(/unknown flag --sped; did you mean --speed\?$/);
    const c = capture();
    const code = await sendCommand(['f.wav', '--stream-di', '3'], c.io);
    expect(code).toBe(2);
    expect(c.errs[0]).toBe('nullsteer send: invalid command line: unknown flag --stream-di; did you mean --stream-id?');
    expect(c.errs[1]).toContain('usage: nullsteer send');
  });
});
