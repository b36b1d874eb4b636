/** `nullsteer site`'s flags: required ones, ranges, the token from the environment, misspelt flags with a suggestion. */
import { describe, expect, it } from 'vitest';
import { FlagError } from '../../server/tools/flag-suggest.ts';
import { parseSiteArgs } from '../../server/tools/site.ts';

const base = ['--nats', 'nats://127.0.0.1:4222', '--site', 'yard', '--http-port', '8760'];

describe('nullsteer site flags', () => {
  it('parses the flags with their defaults', () => {
    expect(parseSiteArgs(base)).toEqual({ natsUrl: 'nats://127.0.0.1:4222', site: 'yard', httpPort: 8760, planFile: null, host: '127.0.0.1', token: null, windowS: 0.5, offlineAfterS: 3, help: false });
    expect(parseSiteArgs([...base, '--plan', 'p.json', '--host', '0.0.0.0', '--window-s', '1', '--offline-after-s', '5'])).toMatchObject({ planFile: 'p.json', host: '0.0.0.0', windowS: 1, offlineAfterS: 5 });
    expect(parseSiteArgs(base, { NULLSTEER_NATS_TOKEN: 'abc' }).token).toBe('abc');
    expect(parseSiteArgs([...base, '--token', 'xyz'], { NULLSTEER_NATS_TOKEN: 'abc' }).token).toBe('xyz');
    expect(parseSiteArgs(['--help']).help).toBe(true);
  });

  it('refuses mistakes with one line each', () => {
    expect(() => parseSiteArgs(['--nats', 'nats://h:1', '--site', 'yard', '--htp-port', '1'])).toThrow(new FlagError('unknown flag --htp-port; did you mean --http-port?'));
    expect(() => parseSiteArgs(['--site', 'yard', '--http-port', '1'])).toThrow(/--nats URL is required/);
    expect(() => parseSiteArgs(['--nats', 'http://h:1', '--site', 'yard', '--http-port', '1'])).toThrow(/must be nats:\/\/host:port/);
    expect(() => parseSiteArgs(['--nats', 'nats://h:1', '--site', 'a.b', '--http-port', '1'])).toThrow(/--site "a.b"/);
    expect(() => parseSiteArgs(['--nats', 'nats://h:1', '--site', 'yard'])).toThrow(/--http-port P is required/);
    expect(() => parseSiteArgs([...base, '--window-s', '0'])).toThrow(/--window-s "0": must be a number in 0.1–10/);
    expect(() => parseSiteArgs(['--nats', 'nats://h:1', '--site', 'yard', '--http-port', '70000'])).toThrow(/--http-port/);
  });
});
