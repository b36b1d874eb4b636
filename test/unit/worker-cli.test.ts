/** `nullsteer worker` flags (server/tools/worker.ts): closed, each bad value named on one line. */
import { describe, expect, it } from 'vitest';
import { parseWorkerArgs } from '../../server/tools/worker.ts';

describe('nullsteer worker flags', () => {
  it('parse what the README shows, with the token from the environment', () => {
    expect(parseWorkerArgs(['--nats', 'nats://10.0.4.2:4222', '--threads', '4', '--name', 'rack-b'])).toEqual({ natsUrl: 'nats://10.0.4.2:4222', threads: 4, name: 'rack-b', token: null, help: false });
    expect(parseWorkerArgs(['--nats', 'nats://127.0.0.1:4222', '--name', 'x'], { NULLSTEER_NATS_TOKEN: 's3cret' })).toMatchObject({ threads: 1, token: 's3cret' });
    expect(parseWorkerArgs(['--help']).help).toBe(true);
    expect(parseWorkerArgs(['--nats', 'nats://127.0.0.1:4222']).name).toMatch(/^[A-Za-z0-9_:/@+-]{1,56}$/);
  });
  it('refuse a missing broker, bad URLs, thread counts, names, tokens and stray arguments', () => {
    const bad = (argv: string[], env = {}) => () => parseWorkerArgs(argv, env);
    expect(bad([])).toThrow(/--nats URL is required/);
    expect(bad(['--nats', 'http://x:1'])).toThrow(/must be nats:\/\/host:port/);
    for (const t of ['0', '65', '1.5', 'two', '']) expect(bad(['--nats', 'nats://h:1', '--threads', t])).toThrow(/--threads/);
    expect(bad(['--nats', 'nats://h:1', '--name', 'has space'])).toThrow(/--name/);
    expect(bad(['--nats', 'nats://h:1', '--name', 'a.b'])).toThrow(/--name/);
    expect(bad(['--nats', 'nats://h:1'], { NULLSTEER_NATS_TOKEN: 'with space' })).toThrow(/--token/);
    expect(bad(['--nats', 'nats://h:1', 'extra'])).toThrow(/unexpected argument/);
    expect(bad(['--nats', 'nats://h:1', '--thread', '2'])).toThrow(/--threads/);
  });
});
