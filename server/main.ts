/**
 * `nullsteer serve`: load the configuration (defaults < file < env < flags), start the service,
 * print where it listens, and shut down cleanly on SIGINT/SIGTERM.
 */
import { basename } from 'node:path';
import { FLAG_FIELDS, loadConfig } from './config/load.ts';
import { ConfigError } from './config/validate.ts';
import { startService, VERSION } from './service.ts';
import { parseFlags } from './tools/flag-suggest.ts';

export const SERVE_USAGE = `usage: nullsteer serve [--config FILE] [--host ADDR] [--http-port N] [--udp-port N]
                       [--source simulator|network|capture] [--array FILE] [--sdp FILE]... [--token T]
                       [--set FIELD=VALUE]...
  Port 0 picks a free port. --sdp receives the RTP session an SDP file describes (repeatable; each
  named after its file; implies --source network). --set takes any config field by its dotted
  path, e.g. --set ingest.reorderWindowFrames=16 or --set capture.command='["arecord","-c","16"]'
  (see README, "Configuration").`;

export interface CliIo {
  out: (line: string) => void;
  err: (line: string) => void;
  env: Record<string, string | undefined>;
}

export const processIo: CliIo = {
  out: (l) => process.stdout.write(`${l}\n`),
  err: (l) => process.stderr.write(`${l}\n`),
  env: process.env,
};

/** Parse serve's flags into config overrides; throws TypeError or FlagError with a usage-ready one-line message. */
export function parseServeArgs(argv: string[]): { configFile?: string; overrides: [string, string][]; help: boolean } {
  const { values, positionals } = parseFlags(argv, {
    config: { type: 'string' },
    host: { type: 'string' },
    'http-port': { type: 'string' },
    'udp-port': { type: 'string' },
    source: { type: 'string' },
    array: { type: 'string' },
    token: { type: 'string' },
    sdp: { type: 'string', multiple: true },
    set: { type: 'string', multiple: true },
    help: { type: 'boolean', short: 'h' },
  });
  if (positionals.length > 0) throw new TypeError(`unexpected argument ${JSON.stringify(positionals[0])}`);
  const overrides: [string, string][] = [];
  for (const [flag, path] of Object.entries(FLAG_FIELDS)) {
    const v = (values as Record<string, unknown>)[flag];
    if (typeof v === 'string') overrides.push([path, v]);
  }
  if (values.sdp && values.sdp.length > 0) {
    // Each session is named after its file (unit-a.sdp → unit-a), the name the array file's inputs use.
    const sessions = values.sdp.map((f) => ({ name: basename(f).replace(/\.sdp$/i, '').replace(/[^A-Za-z0-9._-]/g, '_').slice(0, 64) || 'rtp', sdp: f }));
    const names = sessions.map((x) => x.name);
    const twice = names.find((n, i) => names.indexOf(n) !== i);
    if (twice) throw new TypeError(`--sdp: two files named ${twice}; sessions are named after their files and must differ`);
    overrides.push(['ingest.rtp.sessions', JSON.stringify(sessions)]);
    if (typeof values.source !== 'string') overrides.push(['source.kind', 'network']);
  }
  for (const s of values.set ?? []) {
    const eq = s.indexOf('=');
    if (eq <= 0) throw new TypeError(`--set ${JSON.stringify(s)}: expected FIELD=VALUE, e.g. ingest.reorderHoldMs=60`);
    overrides.push([s.slice(0, eq), s.slice(eq + 1)]);
  }
  return { configFile: values.config, overrides, help: values.help === true };
}

/** Run the server until a signal; resolves with the exit code. */
export async function serveCommand(argv: string[], io: CliIo = processIo): Promise<number> {
  let args: ReturnType<typeof parseServeArgs>;
  try {
    args = parseServeArgs(argv);
  } catch (e) {
    io.err(`nullsteer serve: ${(e as Error).message}\n${SERVE_USAGE}`);
    return 2;
  }
  if (args.help) {
    io.out(SERVE_USAGE);
    return 0;
  }
  let service;
  let stopped: Promise<number>;
  try {
    const loaded = await loadConfig({ configFile: args.configFile, overrides: args.overrides, env: io.env });
    service = await startService(loaded, { logger: { level: io.env.NULLSTEER_LOG_LEVEL ?? 'warn' } });
    // The signal handlers go in before anything is printed: stdout to a pipe is synchronous on
    // Linux, so a supervisor may read the first line and signal before this function goes on.
    stopped = waitForStopSignal(service, io);
    const c = loaded.config;
    io.out(`nullsteer ${VERSION}: ${loaded.geometry.name} (${loaded.geometry.positions.length} channels) at ${c.input.sampleRateHz} Hz`);
    const inputs = service.inputs;
    if (c.source.kind === 'simulator' && c.simulator.scene !== null) io.out(`source: site scene ${c.simulator.scene} at this array's pose, on the UTC sample clock`);
    else if (c.source.kind === 'simulator') io.out('source: built-in simulated scenario (set --source network for live frames)');
    else if (c.source.kind === 'capture') io.out(`source: capture command ${c.capture.command.join(' ')} (${c.capture.channels} channels, ${c.capture.encoding})`);
    else {
      io.out(inputs?.hub ? `source: network frames` : 'source: RTP');
      if (service.udpPort !== null) io.out(`  UDP ingest   udp://${c.server.host}:${service.udpPort}`);
      if (inputs?.wsIngest) io.out(`  WS ingest    ${service.url.replace(/^http/, 'ws')}${c.ingest.websocket.path}`);
    }
    for (const r of inputs?.rtp ?? []) io.out(`  RTP session  ${r.desc.name}: ${r.desc.channels} ch ${r.desc.encoding} at ${r.desc.sampleRateHz} Hz on ${r.desc.multicast ? `group ${r.desc.connectionAddress} ` : ''}port ${r.session?.port ?? r.desc.port}`);
    if (loaded.geometry.inputs) io.out(`  array fed by ${loaded.geometry.inputs.length} inputs: ${loaded.geometry.inputs.map((i) => i.source).join(', ')}`);
    io.out(`dashboard: ${service.url}/   live rows: ${service.url.replace(/^http/, 'ws')}${c.hub.path}`);
    io.out(`status: ${service.url}/api/status`);
    io.out(`listening on ${service.url}`);
  } catch (e) {
    if (e instanceof ConfigError) {
      io.err(`nullsteer serve: ${e.message}`);
      return 2;
    }
    const err = e as NodeJS.ErrnoException;
    if (err.code === 'EADDRINUSE' || err.code === 'EACCES' || err.code === 'EADDRNOTAVAIL') {
      io.err(`nullsteer serve: cannot listen (${err.code}: ${err.message}); choose another port with --http-port / --udp-port or 0 for any free port`);
      return 1;
    }
    io.err(`nullsteer serve: ${err.stack ?? String(e)}`);
    return 1;
  }
  return stopped;
}

/** Resolves with the exit code once SIGINT or SIGTERM has shut the service down. */
function waitForStopSignal(svc: { close(): Promise<void> }, io: CliIo): Promise<number> {
  return new Promise<number>((resolve) => {
    const stop = (sig: string) => {
      process.off('SIGINT', onInt);
      process.off('SIGTERM', onTerm);
      io.out(`${sig}: shutting down`);
      svc.close().then(
        () => resolve(0),
        (e) => {
          io.err(`shutdown failed: ${(e as Error).message}`);
          resolve(1);
        },
      );
    };
    const onInt = () => stop('SIGINT');
    const onTerm = () => stop('SIGTERM');
    process.once('SIGINT', onInt);
    process.once('SIGTERM', onTerm);
  });
}
