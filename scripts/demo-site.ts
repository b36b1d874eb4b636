/**
 * `npm run demo:site`: a site of three arrays on one machine. Starts a NATS broker with JetStream
 * (Debian's nats-server, on a free loopback port with a temporary store), three edge servers that
 * each render what their array hears of one site scene (simulator.scene, on the UTC sample clock),
 * and the site service with the plan, then prints the addresses and stops everything on Ctrl-C.
 *
 *   npm run demo:site [-- --scene FILE --plan FILE --site NAME --seconds S]
 *
 * --seconds S stops by itself after S seconds (a smoke run). Everything binds 127.0.0.1.
 */
import { spawn, type ChildProcess } from 'node:child_process';
import { existsSync, mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';
import { freePort, natsAvailable, startBroker, type TestBroker } from '../test/helpers/nats-server.ts';

const root = resolve(fileURLToPath(new URL('..', import.meta.url)));
const EDGES = [
  { node: 'west', array: 'config/arrays/yard-west.json' },
  { node: 'east', array: 'config/arrays/yard-east.json' },
  { node: 'north', array: 'config/arrays/yard-north.json' },
];
/** Longest wait for a process to say it listens, ms. */
const READY_TIMEOUT_MS = 60_000;

function option(name: string, fallback: string): string {
  const i = process.argv.indexOf(`--${name}`);
  if (i < 0) return fallback;
  const v = process.argv[i + 1];
  if (v === undefined || v.startsWith('--')) fail(`--${name} needs a value`);
  return v;
}

function fail(message: string): never {
  process.stderr.write(`demo:site: ${message}\n`);
  process.exit(2);
}

const known = new Set(['--scene', '--plan', '--site', '--seconds']);
for (let i = 2; i < process.argv.length; i += 2) if (!known.has(process.argv[i])) fail(`unknown option ${process.argv[i]} (known: ${[...known].join(', ')})`);
const scene = option('scene', 'config/scenes/eastgate-yard.json');
const plan = option('plan', 'config/scenes/eastgate-yard.plan.json');
const site = option('site', 'eastgate');
const seconds = Number(option('seconds', '0'));
if (!/^[A-Za-z0-9_-]{1,32}$/.test(site)) fail(`--site ${site}: 1–32 letters, digits, _ or -`);
if (!Number.isFinite(seconds) || seconds < 0) fail('--seconds must be a number ≥ 0 (0: until Ctrl-C)');
for (const f of [scene, plan, ...EDGES.map((e) => e.array)]) if (!existsSync(resolve(root, f))) fail(`${f}: no such file`);

interface Child {
  name: string;
  proc: ChildProcess;
  exited: Promise<number | null>;
}
const children: Child[] = [];
const tempDirs: string[] = [];
let broker: TestBroker | null = null;
let stopping = false;

/**
 * Starts `nullsteer ARGS` and resolves with its address once `probe` (a path on 127.0.0.1:port)
 * answers with any HTTP status: the readiness does not depend on what the command prints.
 */
function startNullsteer(name: string, args: string[], port: number, probe: string, echoStdout: boolean): Promise<string> {
  const proc = spawn(process.execPath, [join(root, 'bin/nullsteer.mjs'), ...args], { cwd: root, stdio: ['ignore', 'pipe', 'pipe'] });
  const exited = new Promise<number | null>((res) => proc.once('exit', (code) => res(code)));
  children.push({ name, proc, exited });
  let gone = false;
  void exited.then((code) => {
    gone = true;
    if (!stopping) process.stderr.write(`[${name}] exited (code ${code})\n`);
  });
  const echo = (b: Buffer, to: NodeJS.WriteStream) => {
    for (const l of b.toString().split('\n')) if (l.trim()) to.write(`[${name}] ${l}\n`);
  };
  proc.stderr!.on('data', (b: Buffer) => echo(b, process.stderr));
  proc.stdout!.on('data', (b: Buffer) => {
    if (echoStdout) echo(b, process.stdout);
  });
  const url = `http://127.0.0.1:${port}`;
  return (async () => {
    const deadline = Date.now() + READY_TIMEOUT_MS;
    for (;;) {
      if (gone) throw new Error(`${name} exited at start`);
      try {
        await fetch(`${url}${probe}`, { signal: AbortSignal.timeout(2000) });
        return url;
      } catch {
        // not listening yet
      }
      if (Date.now() > deadline) throw new Error(`${name} did not answer on ${url} within ${READY_TIMEOUT_MS / 1000} s`);
      await new Promise((r) => setTimeout(r, 200));
    }
  })();
}

async function stopAll(code: number): Promise<never> {
  if (stopping) return new Promise(() => {});
  stopping = true;
  process.stdout.write('\nstopping…\n');
  for (const c of [...children].reverse()) c.proc.kill('SIGTERM');
  const kill = setTimeout(() => children.forEach((c) => c.proc.kill('SIGKILL')), 10_000);
  await Promise.all(children.map((c) => c.exited));
  clearTimeout(kill);
  if (broker) await broker.close();
  for (const d of tempDirs) rmSync(d, { recursive: true, force: true });
  process.exit(code);
}

process.on('SIGINT', () => void stopAll(0));
process.on('SIGTERM', () => void stopAll(0));

try {
  if (natsAvailable) {
    broker = await startBroker();
    process.stdout.write(`broker: nats-server with JetStream at ${broker.url} (store ${broker.storeDir})\n`);
  } else {
    process.stdout.write('broker: nats-server is not installed (Debian: apt-get install nats-server); the edges run alone, without a site\n');
  }
  const edges: { node: string; url: string }[] = [];
  for (const e of EDGES) {
    const dataDir = mkdtempSync(join(tmpdir(), `nullsteer-demo-${e.node}-`));
    tempDirs.push(dataDir);
    const port = await freePort();
    const args = ['serve', '--host', '127.0.0.1', '--http-port', String(port), '--source', 'simulator', '--array', e.array,
      '--set', `simulator.scene=${scene}`, '--set', `data.dir=${dataDir}`, '--set', `outputs.dir=${join(dataDir, 'recordings')}`];
    if (broker) args.push('--set', `cluster.natsUrl=${broker.url}`, '--set', `cluster.site=${site}`, '--set', `cluster.node=${e.node}`);
    edges.push({ node: e.node, url: await startNullsteer(e.node, args, port, '/api/status', false) });
  }
  let siteUrl: string | null = null;
  if (!broker) {
    process.stdout.write('site service: not started (it needs the broker)\n');
  } else if (!existsSync(join(root, 'server/tools/site.ts'))) {
    process.stdout.write('site service: not there yet (server/tools/site.ts is missing in this checkout); the edges run without it\n');
  } else {
    const port = await freePort();
    siteUrl = await startNullsteer('site', ['site', '--nats', broker.url, '--site', site, '--http-port', String(port), '--plan', plan], port, '/', true);
  }
  process.stdout.write(`\nsite "${site}", scene ${scene}\n`);
  for (const e of edges) process.stdout.write(`  edge ${e.node.padEnd(6)} ${e.url}/\n`);
  if (siteUrl) process.stdout.write(`  site page   ${siteUrl}/\n`);
  process.stdout.write(seconds > 0 ? `\nstopping by itself in ${seconds} s\n` : '\nCtrl-C stops everything\n');
  if (seconds > 0) setTimeout(() => void stopAll(0), seconds * 1000);
} catch (e) {
  process.stderr.write(`demo:site: ${(e as Error).message}\n`);
  await stopAll(1);
}
