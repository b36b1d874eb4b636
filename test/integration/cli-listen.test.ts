/**
 * `nullsteer listen` (server/tools/listen.ts) against real servers on 127.0.0.1:
 * - a service fed by the built-in simulator (real-time paced) with one beam: the bytes written are
 *   the beam's samples exactly as the server sent them for the same sample indices (a direct
 *   WebSocket listener in this test keeps them, decoded with shared/frame.ts), as float32
 *   little-endian (read back here with Buffer.readFloatLE); and the command's output piped into
 *   sox (`-t raw -e floating-point -b 32 -L`) makes a 48 kHz mono float WAV of those samples;
 * - unknown beams are answered with the list of beams; misspelt flags with the nearest flag;
 * - a stand-in server that sends two beams with a hole in the sample indices: the hole is written as
 *   zeros of exactly its length and counted on standard error;
 * - a closed standard output (EPIPE through `| head -c`) ends it with exit code 0.
 */
import { spawn } from 'node:child_process';
import { mkdtempSync, readFileSync } from 'node:fs';
import { createServer, type Server } from 'node:http';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { Writable } from 'node:stream';
import { fileURLToPath } from 'node:url';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { WebSocketServer } from 'ws';
import { listenCommand } from '../../server/tools/listen.ts';
import { encodeFrame } from '../../shared/frame.ts';
import { parseWavHeader } from '../../server/io/wav.ts';
import type { Service } from '../../server/service.ts';
import { BeamSubscriber } from '../helpers/beam-subscriber.ts';
import { startTestService, waitFor } from '../helpers/service.ts';

const ROOT = fileURLToPath(new URL('../../', import.meta.url));
const json = { 'content-type': 'application/json' };

class Sink extends Writable {
  chunks: Buffer[] = [];
  override _write(chunk: Buffer, _enc: BufferEncoding, cb: () => void): void {
    this.chunks.push(chunk);
    cb();
  }
  bytes(): Buffer {
    return Buffer.concat(this.chunks);
  }
}

/** Run a shell line without blocking this process (the service under test lives in it). */
function sh(line: string): Promise<{ status: number | null; stdout: string; stderr: string }> {
  return new Promise((resolve) => {
    const child = spawn('bash', ['-c', line]);
    let stdout = '';
    let stderr = '';
    child.stdout.on('data', (d) => (stdout += d));
    child.stderr.on('data', (d) => (stderr += d));
    child.on('close', (status) => resolve({ status, stdout, stderr }));
  });
}

/**
 * What the server sent for [first, first + n) as the direct listener saw it, zeros where the
 * stream jumped over indices (the real-time simulator skips ahead after a stall of its process).
 */
async function serverSamples(sub: BeamSubscriber, first: number, n: number): Promise<{ values: number[]; unsent: number }> {
  await waitFor(() => sub.window(first, n) !== null, 20_000, 'the direct listener to pass the same samples');
  const w = sub.window(first, n)!;
  let unsent = 0;
  const values = Array.from(w.values, (v, i) => (w.sent[i] ? v : (unsent++, 0)));
  return { values, unsent };
}

const floats = (b: Buffer): number[] => {
  const x: number[] = [];
  for (let p = 0; p + 4 <= b.length; p += 4) x.push(b.readFloatLE(p));
  return x;
};

describe('nullsteer listen against a live service', () => {
  let svc: Service;
  let beamId: number;
  let sub: BeamSubscriber;
  beforeAll(async () => {
    svc = await startTestService({ source: { kind: 'simulator' }, engine: { workers: 1 }, processing: { azimuthStepDeg: 5 } });
    const res = await fetch(`${svc.url}/api/beams`, { method: 'POST', headers: json, body: JSON.stringify({ azimuthDeg: 45 }) });
    expect(res.status).toBe(200);
    beamId = (await res.json()).id;
    sub = new BeamSubscriber(`${svc.url.replace(/^http/, 'ws')}/api/beams/audio`, 0);
    await sub.opened();
    await waitFor(() => sub.frames > 5, 20_000, 'beam frames');
  }, 60_000);
  afterAll(async () => {
    sub?.close();
    await svc?.close();
  });

  it('writes the beam’s samples as the server sent them, and says the format once', { timeout: 60_000 }, async () => {
    const out = new Sink();
    const lines: string[] = [];
    const code = await listenCommand(['--beam', String(beamId), '--url', svc.url.replace(/^http/, 'ws'), '--seconds', '0.5'], { out, err: (l) => lines.push(l), env: {} });
    expect(code, lines.join('\n')).toBe(0);
    const fmt = lines.find((l) => l.includes('float32le'))!;
    expect(fmt).toMatch(new RegExp(`^nullsteer listen: beam ${beamId} \\(45°, mvdr\\): float32le, 48000 Hz, 1 channel, from sample index (\\d+)$`));
    expect(lines.filter((l) => l.includes('float32le'))).toHaveLength(1);
    expect(lines).toContain(`nullsteer listen: e.g. nullsteer listen --beam ${beamId} | aplay -t raw -f FLOAT_LE -r 48000 -c 1`);
    expect(lines.some((l) => l.includes(`sox -t raw -e floating-point -b 32 -L -r 48000 -c 1 - beam-${beamId}.wav`))).toBe(true);
    const first = Number(/from sample index (\d+)/.exec(fmt)![1]);
    const got = out.bytes();
    // --seconds 0.5 at 48 kHz: exactly 24000 samples.
    expect(got.length).toBe(24000 * 4);
    const sent = await serverSamples(sub, first, 24000);
    expect(floats(got)).toEqual(sent.values);
    expect(sent.values.some((v) => v !== 0)).toBe(true);
    // Zeros where the stream jumped (none unless the machine stalled the simulator), counted as such.
    expect(lines.at(-1)).toMatch(new RegExp(`wrote 24000 samples \\(0\\.500 s\\) .* \\(${sent.unsent} zero samples\\)`));
  });

  it('names the beams that exist when the id is unknown', { timeout: 30_000 }, async () => {
    const lines: string[] = [];
    const code = await listenCommand(['--beam', '999', '--url', svc.url], { out: new Sink(), err: (l) => lines.push(l), env: {} });
    expect(code).toBe(2);
    expect(lines).toEqual([`nullsteer listen: no beam 999; the beams are: ${beamId} (45°, mvdr)`]);
  });

  it('answers a misspelt flag with the nearest one', async () => {
    const lines: string[] = [];
    expect(await listenCommand(['--beem', '1'], { out: new Sink(), err: (l) => lines.push(l), env: {} })).toBe(2);
    expect(lines[0].split('\n')[0]).toBe('nullsteer listen: unknown flag --beem; did you mean --beam?');
    lines.length = 0;
    expect(await listenCommand(['--beam', '1', '--second', '2'], { out: new Sink(), err: (l) => lines.push(l), env: {} })).toBe(2);
    expect(lines[0].split('\n')[0]).toBe('nullsteer listen: unknown flag --second; did you mean --seconds?');
    lines.length = 0;
    expect(await listenCommand(['--beam', 'x'], { out: new Sink(), err: (l) => lines.push(l), env: {} })).toBe(2);
    expect(lines[0].split('\n')[0]).toBe('nullsteer listen: --beam "x": a beam id is a whole number ≥ 1');
  });

  it('through the command and sox: a WAV of the beam’s samples; a closed pipe ends it with exit 0', { timeout: 60_000 }, async () => {
    const bin = join(ROOT, 'bin/nullsteer.mjs');
    const dir = mkdtempSync(join(tmpdir(), 'nullsteer-listen-'));
    const hasSox = (await sh('sox --version')).status === 0;
    if (hasSox) {
      const wav = join(dir, 'beam.wav');
      const r = await sh(`set -o pipefail; node ${JSON.stringify(bin)} listen --beam ${beamId} --url ${svc.url} --seconds 0.25 2>${JSON.stringify(join(dir, 'err.txt'))} | sox -t raw -e floating-point -b 32 -L -r 48000 -c 1 - -e floating-point -b 32 ${JSON.stringify(wav)}`);
      expect(r.status, r.stderr).toBe(0);
      const first = Number(/from sample index (\d+)/.exec(readFileSync(join(dir, 'err.txt'), 'utf8'))![1]);
      const file = readFileSync(wav);
      const w = await parseWavHeader(new Uint8Array(file.buffer, file.byteOffset, file.byteLength));
      expect([w.sampleRateHz, w.channels, w.frames, w.encoding]).toEqual([48000, 1, 12000, 'float32']);
      const sentWindow = await serverSamples(sub, first, 12000);
      // sox carries samples as 32-bit integers inside (sox(1): a float32 input has "Precision: 25-bit"),
      // so its float output is within a few units of float32's last place of ours: 2^-23 absolute
      // for samples below full scale.
      const viaSox = floats(file.subarray(w.dataOffset, w.dataOffset + w.dataBytes));
      const sent = sentWindow.values;
      let worst = 0;
      for (let i = 0; i < 12000; i++) worst = Math.max(worst, Math.abs(viaSox[i] - sent[i]));
      expect(worst).toBeLessThanOrEqual(2 ** -23);
      expect(sent.some((v) => v !== 0)).toBe(true);
    }
    // `| head -c 4000` closes the pipe after 1000 samples: EPIPE, exit 0, nothing on stderr but the format.
    const piped = await sh(`node ${JSON.stringify(bin)} listen --beam ${beamId} --url ${svc.url} | head -c 4000 | wc -c; echo "exit \${PIPESTATUS[0]}"`);
    expect(piped.stdout.trim().split('\n')).toEqual(['4000', 'exit 0']);
    expect(piped.stderr).toMatch(/float32le/);
    expect(piped.stderr).not.toMatch(/EPIPE|Error|\bat /);
  });
});

describe('nullsteer listen and the token', () => {
  const TOKEN = 'listen-test-token-0123456789';
  let svc: Service;
  let beamId: number;
  beforeAll(async () => {
    svc = await startTestService({ source: { kind: 'simulator' }, server: { token: TOKEN }, engine: { workers: 1 }, processing: { azimuthStepDeg: 5 } });
    const res = await fetch(`${svc.url}/api/beams`, { method: 'POST', headers: { ...json, authorization: `Bearer ${TOKEN}` }, body: JSON.stringify({ azimuthDeg: 90 }) });
    expect(res.status).toBe(200);
    beamId = (await res.json()).id;
  }, 60_000);
  afterAll(async () => {
    await svc?.close();
  });

  it('the beam audio needs the token (server/http/upgrade-auth.ts: "listen" paths); from --token or NULLSTEER_TOKEN', { timeout: 60_000 }, async () => {
    const lines: string[] = [];
    expect(await listenCommand(['--beam', String(beamId), '--url', svc.url, '--seconds', '0.1'], { out: new Sink(), err: (l) => lines.push(l), env: {} })).toBe(1);
    expect(lines.at(-1)).toMatch(/^nullsteer listen: \/api\/beams\/audio: HTTP 401 .*\(this server needs a token: --token or NULLSTEER_TOKEN\)$/);
    lines.length = 0;
    expect(await listenCommand(['--beam', String(beamId), '--url', svc.url, '--seconds', '0.1', '--token', 'wrong-token-0123456789'], { out: new Sink(), err: (l) => lines.push(l), env: {} })).toBe(1);
    expect(lines.at(-1)).toMatch(/HTTP 401 .*\(the token was refused\)$/);
    const out = new Sink();
    expect(await listenCommand(['--beam', String(beamId), '--url', svc.url, '--seconds', '0.1'], { out, err: () => undefined, env: { NULLSTEER_TOKEN: TOKEN } })).toBe(0);
    expect(out.bytes().length).toBe(4800 * 4);
  });
});

describe('nullsteer listen against a stand-in server', () => {
  let server: Server;
  let base = '';
  let wss: WebSocketServer;
  beforeAll(async () => {
    server = createServer((req, res) => {
      if (req.url === '/api/beams') {
        res.setHeader('content-type', 'application/json');
        res.end(JSON.stringify({ beams: [{ id: 3, azimuthDeg: 10, elevationDeg: 0, method: 'mvdr' }, { id: 7, azimuthDeg: 200, elevationDeg: 0, method: 'delay-and-sum' }], audioLatencyS: 0.005 }));
      } else if (req.url === '/api/recording') {
        res.setHeader('content-type', 'application/json');
        res.end(JSON.stringify({ streamOut: { wsPath: '/beam-audio' } }));
      } else {
        res.statusCode = 404;
        res.end();
      }
    });
    wss = new WebSocketServer({ server, path: '/beam-audio' });
    // Two beams, 100 samples per frame from sample index 5000; the third frame is missing (a
    // 100-sample hole) and the fifth repeats the fourth. Channel 1 (beam 7) is 1000 + index.
    wss.on('connection', (ws) => {
      let seq = 0;
      for (const k of [0, 1, 3, 3, 4, 5, 6]) {
        const first = 5000 + 100 * k;
        const x = new Float32Array(200);
        for (let i = 0; i < 100; i++) {
          x[2 * i] = -(first + i);
          x[2 * i + 1] = 1000 + first + i;
        }
        ws.send(encodeFrame({ streamId: 1, sequence: seq++, firstSample: first, sampleRateHz: 16000, channels: 2, samplesPerChannel: 100, encoding: 'float32' }, x));
      }
    });
    await new Promise<void>((r) => server.listen(0, '127.0.0.1', () => r()));
    const addr = server.address() as { port: number };
    base = `http://127.0.0.1:${addr.port}`;
  });
  afterAll(async () => {
    wss.close();
    await new Promise((r) => server.close(r));
  });

  it('writes a hole as zeros of exactly its length, skips a repeated frame, counts both', async () => {
    const out = new Sink();
    const lines: string[] = [];
    // 640 samples (0.04 s at 16 kHz): frames 0, 1, the hole (100 zeros), 3, 4, 5, 6 (cut after 40).
    const code = await listenCommand(['--beam', '7', '--url', base, '--seconds', '0.04'], { out, err: (l) => lines.push(l), env: {} });
    expect(code, lines.join('\n')).toBe(0);
    expect(lines[0]).toBe('nullsteer listen: beam 7 (200°, delay-and-sum): float32le, 16000 Hz, 1 channel, from sample index 5000');
    const x = floats(out.bytes());
    expect(x).toHaveLength(640);
    const expected = Array.from({ length: 640 }, (_, i) => (i >= 200 && i < 300 ? 0 : 1000 + 5000 + i));
    expect(x).toEqual(expected);
    expect(lines).toContain('nullsteer listen: gap of 100 samples before sample index 5300: written as zeros');
    expect(lines.at(-1)).toMatch(/wrote 640 samples \(0\.040 s\) of beam 7 from sample index 5000; gaps 1 \(100 zero samples\)/);
  });

  it('a beam added mid-stream: frames until the list is fetched again become zeros of their length, then the beam plays on', async () => {
    // Its own stand-in: 2 beams for frames 0–2, then a third beam (3 channels) from frame 3; the
    // list says so from its second request, and frames 4–9 are sent once that request was answered.
    let listRequests = 0;
    let socket: import('ws').WebSocket | null = null;
    const frame = (k: number, channels: number) => {
      const first = 8000 + 100 * k;
      const x = new Float32Array(100 * channels);
      for (let i = 0; i < 100; i++) for (let c = 0; c < channels; c++) x[channels * i + c] = c === 1 ? 1000 + first + i : -1;
      return encodeFrame({ streamId: 1, sequence: k, firstSample: first, sampleRateHz: 16000, channels, samplesPerChannel: 100, encoding: 'float32' }, x);
    };
    const srv = createServer((req, res) => {
      res.setHeader('content-type', 'application/json');
      if (req.url === '/api/beams') {
        listRequests++;
        const beams = [{ id: 3, azimuthDeg: 10, method: 'mvdr' }, { id: 7, azimuthDeg: 200, method: 'mvdr' }, ...(listRequests > 1 ? [{ id: 9, azimuthDeg: 300, method: 'mvdr' }] : [])];
        res.end(JSON.stringify({ beams }));
        if (listRequests === 2) res.on('finish', () => { for (let k = 4; k < 10; k++) socket?.send(frame(k, 3)); });
      } else res.end(JSON.stringify({ streamOut: { wsPath: '/a' } }));
    });
    const w = new WebSocketServer({ server: srv, path: '/a' });
    w.on('connection', (ws) => {
      socket = ws;
      for (let k = 0; k < 3; k++) ws.send(frame(k, 2));
      ws.send(frame(3, 3));
    });
    await new Promise<void>((r) => srv.listen(0, '127.0.0.1', () => r()));
    try {
      const out = new Sink();
      const lines: string[] = [];
      const code = await listenCommand(['--beam', '7', '--url', `http://127.0.0.1:${(srv.address() as { port: number }).port}`, '--seconds', String(1000 / 16000)], { out, err: (l) => lines.push(l), env: {} });
      expect(code, lines.join('\n')).toBe(0);
      const x = floats(out.bytes());
      expect(x).toHaveLength(1000);
      // Frames 0–2 as sent; then a run of zeros from frame 3 (skipped: the list was stale), whole
      // frames long; then the beam again, to the end (frame 9 is the server's).
      expect(x.slice(0, 300)).toEqual(Array.from({ length: 300 }, (_, i) => 9000 + i));
      let z = 300;
      while (x[z] === 0) z++;
      expect((z - 300) % 100).toBe(0);
      expect(z).toBeGreaterThanOrEqual(400);
      expect(z).toBeLessThan(1000);
      expect(x.slice(z)).toEqual(Array.from({ length: 1000 - z }, (_, i) => 9000 + z + i));
      expect(lines.at(-1)).toMatch(new RegExp(`gaps 1 \\(${z - 300} zero samples\\).*while the beam list was stale ${(z - 300) / 100}$`));
      expect(listRequests).toBe(2);
    } finally {
      w.close();
      await new Promise((r) => srv.close(r));
    }
  });

  it('says when the server cannot be reached', async () => {
    // A port that was free a moment ago (bound and closed again).
    const s = createServer();
    await new Promise<void>((r) => s.listen(0, '127.0.0.1', () => r()));
    const port = (s.address() as { port: number }).port;
    await new Promise((r) => s.close(r));
    const lines: string[] = [];
    const code = await listenCommand(['--beam', '1', '--url', `http://127.0.0.1:${port}`], { out: new Sink(), err: (l) => lines.push(l), env: {} });
    expect(code).toBe(1);
    expect(lines).toEqual([`nullsteer listen: cannot reach http://127.0.0.1:${port} (ECONNREFUSED)`]);
  });
});
