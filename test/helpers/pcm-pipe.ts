/**
 * For tests that pipe raw PCM from sox into a sender and compare what the server recorded with
 * what sox generated: run a shell pipeline, generate sox's reference output, record the raw input
 * through the REST API and read the recording's sample bytes back.
 */
import { execFileSync, spawn } from 'node:child_process';
import { readdirSync, readFileSync } from 'node:fs';
import { join } from 'node:path';
import { openWav } from '../../server/io/wav.ts';
import type { Service } from '../../server/service.ts';
import { getStatus, waitFor } from './service.ts';

/** True when `cmd args…` runs and exits 0. */
export function hasCommand(cmd: string, args: string[]): boolean {
  try {
    execFileSync(cmd, args, { stdio: 'ignore' });
    return true;
  } catch {
    return false;
  }
}

/** A word for `sh`: single-quoted, so nothing in it is expanded. */
export function shellQuote(word: string): string {
  return `'${word.replace(/'/g, `'\\''`)}'`;
}

/** A command line of quoted words. */
export function shellCommand(argv: readonly string[]): string {
  return argv.map(shellQuote).join(' ');
}

export interface PipelineResult {
  /** Exit code of the pipeline (bash pipefail: the last command that failed). */
  code: number | null;
  out: string;
  err: string;
}

/**
 * Run `a | b | …` in bash with pipefail: the processes are connected by real pipes, as a user's
 * shell would connect them.
 */
export function runPipeline(commands: readonly (readonly string[])[], timeoutMs = 60_000): Promise<PipelineResult> {
  return new Promise((resolve) => {
    const p = spawn('bash', ['-o', 'pipefail', '-c', commands.map(shellCommand).join(' | ')], { stdio: ['ignore', 'pipe', 'pipe'] });
    let out = '';
    let err = '';
    p.stdout.on('data', (d) => (out += d));
    p.stderr.on('data', (d) => (err += d));
    const timer = setTimeout(() => p.kill('SIGKILL'), timeoutMs);
    p.once('close', (code) => {
      clearTimeout(timer);
      resolve({ code, out, err });
    });
  });
}

/** Run the pipeline `commands` on its own with its output into the file `path` (sox's reference), and read that file. */
export function pipelineToFile(commands: readonly (readonly string[])[], path: string): Uint8Array {
  execFileSync('bash', ['-o', 'pipefail', '-c', `${commands.map(shellCommand).join(' | ')} > ${shellQuote(path)}`], { stdio: 'ignore' });
  return new Uint8Array(readFileSync(path));
}

async function api(svc: Service, method: string, path: string, body?: unknown): Promise<{ status: number; body: any }> {
  const r = await fetch(`${svc.url}${path}`, {
    method,
    // Every change carries the JSON content type (the server refuses others).
    headers: method === 'GET' ? {} : { 'content-type': 'application/json' },
    ...(body === undefined ? {} : { body: JSON.stringify(body) }),
  });
  return { status: r.status, body: r.status === 204 ? null : await r.json() };
}

/** Start recording the raw input only, in `encoding`. */
export async function startRawRecording(svc: Service, encoding: 'int16' | 'int24' | 'int32' | 'float32'): Promise<void> {
  const r = await api(svc, 'POST', '/api/recording', { raw: true, beams: false, encoding });
  if (r.status !== 200) throw new Error(`recording did not start: ${r.status} ${JSON.stringify(r.body)}`);
}

/**
 * Wait until stream 0 has `frames` samples per channel accepted and the recording holds them, stop
 * it, and return the stream's status and the recording's sample bytes (interleaved, as in the file).
 */
export async function finishRawRecording(svc: Service, dir: string, frames: number): Promise<{ stream: any; bytes: Uint8Array; info: any }> {
  await waitFor(async () => ((await getStatus(svc)).streams[0]?.samplesAccepted ?? 0) >= frames, 20_000, `${frames} samples accepted`);
  await waitFor(async () => (await api(svc, 'GET', '/api/recording')).body.frames >= frames, 20_000, `${frames} samples recorded`);
  const stream = (await getStatus(svc)).streams[0];
  const stop = await api(svc, 'DELETE', '/api/recording');
  if (stop.status !== 200) throw new Error(`recording did not stop: ${stop.status}`);
  const wav = readdirSync(dir).find((f) => /-raw-0001\.wav$/.test(f));
  if (!wav) throw new Error(`no raw recording in ${dir}: ${readdirSync(dir).join(', ')}`);
  const reader = await openWav(join(dir, wav));
  try {
    const bytes = await reader.readFrames(0, reader.info.frames);
    return { stream, bytes, info: reader.info };
  } finally {
    await reader.close();
  }
}
