/**
 * A real NATS broker with JetStream for the site tests: Debian's `nats-server` (v2.9) started as a
 * child process on free loopback ports with a temporary store, ready once its monitoring endpoint
 * answers `/healthz`. `stop()` kills it (the tests use this to prove recovery), `start()` brings it
 * back on the same ports with the same store, so what JetStream accepted before is still there.
 * `.ci/run` installs the package; the tests that need it are skipped only outside CI.
 */
import { spawn, type ChildProcess } from 'node:child_process';
import { existsSync, mkdtempSync, rmSync } from 'node:fs';
import { createServer } from 'node:net';
import { tmpdir } from 'node:os';
import { join } from 'node:path';

export const NATS_SERVER = ['/usr/sbin/nats-server', '/usr/bin/nats-server'].find((p) => existsSync(p)) ?? null;
export const natsAvailable = NATS_SERVER !== null;
if (!natsAvailable && process.env.CI) throw new Error('the site tests need nats-server; .ci/run installs it');

/** A port that was free a moment ago on 127.0.0.1. */
export function freePort(): Promise<number> {
  return new Promise((resolve, reject) => {
    const s = createServer();
    s.once('error', reject);
    s.listen(0, '127.0.0.1', () => {
      const a = s.address();
      const port = typeof a === 'object' && a ? a.port : 0;
      s.close(() => resolve(port));
    });
  });
}

export interface TestBroker {
  /** nats://127.0.0.1:PORT */
  url: string;
  port: number;
  monitorPort: number;
  storeDir: string;
  /** Start (again): same ports, same store. Resolves when /healthz answers ok. */
  start(): Promise<void>;
  /** Kill the broker (SIGKILL: no goodbye to the clients) and wait for it to exit. */
  kill(): Promise<void>;
  /** Kill it and remove the store. */
  close(): Promise<void>;
  /** Lines the broker wrote (last 200), for failure messages. */
  log(): string[];
}

/** Start a broker; `timeoutMs` bounds the wait for its health endpoint. */
export async function startBroker(opts: { token?: string; timeoutMs?: number } = {}): Promise<TestBroker> {
  if (!NATS_SERVER) throw new Error('nats-server is not installed');
  const port = await freePort();
  const monitorPort = await freePort();
  const storeDir = mkdtempSync(join(tmpdir(), 'nullsteer-nats-'));
  const lines: string[] = [];
  let child: ChildProcess | null = null;
  let exited: Promise<void> = Promise.resolve();
  const timeoutMs = opts.timeoutMs ?? 20_000;

  const start = async (): Promise<void> => {
    if (child) return;
    const args = ['-a', '127.0.0.1', '-p', String(port), '-m', String(monitorPort), '-js', '-sd', storeDir];
    if (opts.token) args.push('--auth', opts.token);
    const c = spawn(NATS_SERVER, args, { stdio: ['ignore', 'pipe', 'pipe'] });
    child = c;
    const keep = (b: Buffer) => {
      for (const l of b.toString().split('\n')) if (l) lines.push(l);
      if (lines.length > 200) lines.splice(0, lines.length - 200);
    };
    c.stdout?.on('data', keep);
    c.stderr?.on('data', keep);
    exited = new Promise((resolve) => c.once('exit', () => resolve()));
    void exited.then(() => {
      if (child === c) child = null;
    });
    const deadline = Date.now() + timeoutMs;
    for (;;) {
      if (child !== c) throw new Error(`nats-server exited at start:\n${lines.slice(-20).join('\n')}`);
      try {
        const r = await fetch(`http://127.0.0.1:${monitorPort}/healthz`);
        if (r.ok) return;
      } catch {
        // not listening yet
      }
      if (Date.now() > deadline) throw new Error(`nats-server not healthy within ${timeoutMs} ms:\n${lines.slice(-20).join('\n')}`);
      await new Promise((r) => setTimeout(r, 50));
    }
  };
  const kill = async (): Promise<void> => {
    const c = child;
    if (!c) return;
    c.kill('SIGKILL');
    await exited;
  };
  await start();
  return {
    url: `nats://127.0.0.1:${port}`,
    port,
    monitorPort,
    storeDir,
    start,
    kill,
    close: async () => {
      await kill();
      rmSync(storeDir, { recursive: true, force: true });
    },
    log: () => [...lines],
  };
}
