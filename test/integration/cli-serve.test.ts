/**
 * The `nullsteer serve` command as a user runs it (what `npm start` runs): a child process on free
 * loopback ports, its printed URL, its status, its shutdown.
 */
import { spawn, type ChildProcess } from 'node:child_process';
import { fileURLToPath } from 'node:url';
import { afterEach, describe, expect, it } from 'vitest';

const BIN = fileURLToPath(new URL('../../bin/nullsteer.mjs', import.meta.url));
let child: ChildProcess | null = null;
afterEach(() => {
  child?.kill('SIGKILL');
  child = null;
});

function run(args: string[]): { proc: ChildProcess; out: () => string; err: () => string; exit: Promise<number | null> } {
  const proc = spawn(process.execPath, [BIN, ...args], { stdio: ['ignore', 'pipe', 'pipe'], env: { ...process.env, NULLSTEER_HTTP_PORT: '', NULLSTEER_CONFIG: '' } });
  let out = '';
  let err = '';
  proc.stdout!.on('data', (d) => (out += d));
  proc.stderr!.on('data', (d) => (err += d));
  const exit = new Promise<number | null>((r) => proc.once('exit', (code) => r(code)));
  return { proc, out: () => out, err: () => err, exit };
}

async function waitForLine(get: () => string, re: RegExp, ms = 15000): Promise<RegExpMatchArray> {
  const until = Date.now() + ms;
  while (Date.now() < until) {
    const m = get().match(re);
    if (m) return m;
    await new Promise((r) => setTimeout(r, 50));
  }
  throw new Error(`no line matching ${re} in:\n${get()}`);
}

describe('nullsteer serve', () => {
  it('starts on the simulator, prints its URL, serves status and stops on SIGTERM', async () => {
    const r = run(['serve', '--http-port', '0']);
    child = r.proc;
    const [, url] = await waitForLine(r.out, /listening on (http:\/\/127\.0\.0\.1:\d+)/);
    expect(r.out()).toMatch(/source: built-in simulated scenario/);
    expect(r.out()).toContain(`dashboard: ${url}/`);
    const page = await fetch(`${url}/`);
    expect(page.status).toBe(200);
    expect(page.headers.get('content-type')).toBe('text/html; charset=utf-8');
    await new Promise((res) => setTimeout(res, 500));
    const st: any = await (await fetch(`${url}/api/status`)).json();
    expect(st.source.kind).toBe('simulator');
    expect(st.array.channels).toBe(24);
    expect(st.timeline.samples).toBeGreaterThan(0.2 * 48000);
    expect(st.timeline.gapSamples).toBe(0);
    const missing = await fetch(`${url}/api/nothing`);
    expect(missing.status).toBe(404);
    expect(await missing.json()).toEqual({ error: { code: 'ERR_HTTP_NOT_FOUND', message: 'no route for GET /api/nothing', statusCode: 404 } });
    r.proc.kill('SIGTERM');
    expect(await r.exit).toBe(0);
  });

  it('prints the ingest ports of a network source', async () => {
    const r = run(['serve', '--http-port', '0', '--udp-port', '0', '--source', 'network', '--array', 'arrays/line-8.json']);
    child = r.proc;
    const [, port] = await waitForLine(r.out, /UDP ingest\s+udp:\/\/127\.0\.0\.1:(\d+)/);
    expect(Number(port)).toBeGreaterThan(0);
    await waitForLine(r.out, /WS ingest\s+ws:\/\/127\.0\.0\.1:\d+\/ingest/);
    r.proc.kill('SIGINT');
    expect(await r.exit).toBe(0);
  });

  it('refuses to start on a bad configuration, naming every bad field, exit code 2', async () => {
    const r = run(['serve', '--http-port', '99999', '--set', 'ingest.reorderHoldMs=-5']);
    child = r.proc;
    expect(await r.exit).toBe(2);
    expect(r.err()).toContain('server.httpPort = 99999: out of range; allowed integer 0–65535');
    expect(r.err()).toContain('ingest.reorderHoldMs = -5: out of range; allowed integer 0–10000');
  });

  it('rejects unknown commands and flags with usage', async () => {
    const a = run(['frobnicate']);
    expect(await a.exit).toBe(2);
    expect(a.err()).toMatch(/unknown command "frobnicate"[\s\S]*usage: nullsteer/);
    const b = run(['serve', '--colour', 'red']);
    expect(await b.exit).toBe(2);
    expect(b.err()).toMatch(/colour[\s\S]*usage: nullsteer serve/);
  });
});
