/**
 * The reference senders of docs/senders/ (Python standard library; C99 with POSIX sockets, compiled
 * here with `cc`): sox output piped through each into a running server over UDP on 127.0.0.1 is
 * recorded bit for bit in every encoding, every sample accepted, none lost; the datagrams follow
 * docs/wire-format.md (decoded by shared/frame.ts). The senders are run with `--pace 4` (no faster
 * than 4× real time) so a busy machine's kernel does not drop datagrams.
 */
import { execFileSync } from 'node:child_process';
import dgram from 'node:dgram';
import { mkdtempSync } from 'node:fs';
import type { AddressInfo } from 'node:net';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { afterEach, beforeAll, describe, expect, it } from 'vitest';
import type { Service } from '../../server/service.ts';
import { decodeFrame, MTU_FRAME_BYTES } from '../../shared/frame.ts';
import { finishRawRecording, hasCommand, pipelineToFile, runPipeline, startRawRecording } from '../helpers/pcm-pipe.ts';
import { startTestService, waitFor } from '../helpers/service.ts';

const SENDERS = fileURLToPath(new URL('../../docs/senders/', import.meta.url));
const HAS_SOX = hasCommand('sox', ['--version']);
const HAS_PYTHON = hasCommand('python3', ['-c', 'import socket, struct, secrets']);
const HAS_CC = hasCommand('cc', ['--version']);
const RATE_HZ = 48000;
const CHANNELS = 4; // the test service's array (test/fixtures/arrays/square-4.json)
const FRAMES = 24000; // 0.5 s

let svc: Service | null = null;
afterEach(async () => {
  await svc?.close();
  svc = null;
});

type Encoding = 'int16' | 'int24' | 'int32' | 'float32';

/** sox commands writing 0.5 s of four sines as raw PCM of `encoding`; int32 carries 24-bit samples (a 24-bit converter's S32_LE). */
function soxChain(encoding: Encoding): string[][] {
  const synth = (bits: number, e: string) => ['sox', '-D', '-n', '-r', String(RATE_HZ), '-c', String(CHANNELS), '-b', String(bits), '-e', e, '-t', 'raw', '-', 'synth', '0.5', 'sine', '440', 'sine', '1000', 'sine', '2000', 'sine', '3000'];
  switch (encoding) {
    case 'int16':
      return [synth(16, 'signed-integer')];
    case 'int24':
      return [synth(24, 'signed-integer')];
    case 'int32':
      return [synth(24, 'signed-integer'), ['sox', '-D', '-t', 'raw', '-r', String(RATE_HZ), '-c', String(CHANNELS), '-b', '24', '-e', 'signed-integer', '-', '-t', 'raw', '-b', '32', '-e', 'signed-integer', '-']];
    case 'float32':
      return [synth(32, 'floating-point')];
  }
}

const BYTES: Record<Encoding, number> = { int16: 2, int24: 3, int32: 4, float32: 4 };

interface Sender {
  name: string;
  available: boolean;
  argv: () => string[];
}

let cBinary = '';
const senders: Sender[] = [
  { name: 'Python', available: HAS_PYTHON, argv: () => ['python3', join(SENDERS, 'nullsteer_send.py')] },
  { name: 'C', available: HAS_CC, argv: () => [cBinary] },
];

beforeAll(() => {
  if (!HAS_CC) return;
  const dir = mkdtempSync(join(tmpdir(), 'nullsteer-csender-'));
  cBinary = join(dir, 'nullsteer_send');
  // Strict C99 with every common warning: the compiler must have nothing to say.
  const warnings = execFileSync('cc', ['-std=c99', '-Wall', '-Wextra', '-pedantic', '-O2', '-o', cBinary, join(SENDERS, 'nullsteer_send.c')], { encoding: 'utf8', stdio: ['ignore', 'pipe', 'pipe'] });
  expect(warnings).toBe('');
});

function senderArgs(encoding: Encoding, port: number, ...more: string[]): string[] {
  return [`127.0.0.1:${port}`, '--channels', String(CHANNELS), '--rate', String(RATE_HZ), '--encoding', encoding, '--pace', '4', ...more];
}

for (const sender of senders) {
  describe.skipIf(!HAS_SOX || !sender.available)(`the ${sender.name} reference sender`, () => {
    for (const encoding of ['int16', 'int24', 'int32', 'float32'] as const) {
      it(`${encoding}: sox | sender → the server's ${encoding} recording is sox output bit for bit`, async () => {
        const dir = mkdtempSync(join(tmpdir(), 'nullsteer-sender-'));
        svc = await startTestService({ outputs: { dir }, engine: { workers: 1 }, processing: { azimuthStepDeg: 5 } });
        const want = pipelineToFile(soxChain(encoding), join(dir, 'sox.raw'));
        expect(want.byteLength).toBe(FRAMES * CHANNELS * BYTES[encoding]);
        await startRawRecording(svc, encoding);
        const r = await runPipeline([...soxChain(encoding), [...sender.argv(), ...senderArgs(encoding, svc.udpPort!)]]);
        expect(r.code).toBe(0);
        const lines = r.err.trim().split('\n');
        expect(lines).toHaveLength(2);
        const id = Number(/^sending standard input \(4 ch, \w+, 48000 Hz\) as stream (\d+) to udp:\/\/127\.0\.0\.1:\d+, \d+ samples per frame$/.exec(lines[0])?.[1]);
        expect(id).toBeGreaterThanOrEqual(1); // a fresh random id: none was given
        expect(lines[1]).toBe(`sent ${lines[1].split(' ')[1]} frames, ${FRAMES} samples per channel (0.500 s at 48000 Hz, ${want.byteLength} bytes) as stream ${id} to udp://127.0.0.1:${svc.udpPort}; 0 bytes of a partial sample frame discarded`);
        const got = await finishRawRecording(svc, dir, FRAMES);
        expect(got.stream).toMatchObject({ streamId: id, transport: 'udp', encoding, samplesAccepted: FRAMES, framesLost: 0, gapSamples: 0, firstSample: 0 });
        expect(got.info).toMatchObject({ channels: CHANNELS, encoding, frames: FRAMES });
        expect(Buffer.from(got.bytes).equals(Buffer.from(want))).toBe(true);
      });
    }

    it('datagrams: the wire format, ≤ 1472 bytes by default or --frame-samples, sample frames whole, a partial one at the end reported', async () => {
      const rx = dgram.createSocket({ type: 'udp4', recvBufferSize: 4 << 20 });
      const datagrams: Uint8Array[] = [];
      rx.on('message', (m) => datagrams.push(new Uint8Array(m)));
      await new Promise<void>((resolve) => rx.bind(0, '127.0.0.1', resolve));
      const port = (rx.address() as AddressInfo).port;
      try {
        const dir = mkdtempSync(join(tmpdir(), 'nullsteer-sender-'));
        const want = pipelineToFile(soxChain('int24'), join(dir, 'sox.raw'));
        for (const [more, perFrame] of [
          [[], Math.floor((MTU_FRAME_BYTES - 32) / 12)], // 120 samples of 4 × 3 bytes
          [['--frame-samples', '37', '--stream-id', '4294967295', '--start-sample', '9007199254710991'], 37],
        ] as const) {
          datagrams.length = 0;
          // Five stray bytes after the samples: an incomplete sample frame, not sent.
          const r = await runPipeline([...soxChain('int24'), ['bash', '-c', 'cat; printf abcde'], [...sender.argv(), ...senderArgs('int24', port, ...more)]]);
          expect(r.code).toBe(0);
          expect(r.err).toContain('warning: the input ended inside a sample frame: 5 bytes of an incomplete 12-byte sample frame not sent\n');
          expect(r.err).toMatch(/; 5 bytes of a partial sample frame discarded\n$/);
          const frames = Number(/sent (\d+) frames/.exec(r.err)![1]);
          await waitFor(() => datagrams.length >= frames, 10_000, `${frames} datagrams`);
          const start = more.length ? 9007199254710991 : 0; // 2^53 − 1 − 30000: the top of the wire format's range
          let next = start;
          const payload: Buffer[] = [];
          datagrams.forEach((d, k) => {
            const f = decodeFrame(d);
            if (!f.ok) throw new Error(`${f.reason}: ${f.detail}`);
            expect(f.frame).toMatchObject({ sequence: k, firstSample: next, sampleRateHz: RATE_HZ, channels: CHANNELS, encoding: 'int24' });
            if (more.length) expect(f.frame.streamId).toBe(4294967295);
            expect(f.frame.samplesPerChannel).toBeLessThanOrEqual(perFrame);
            expect(d.byteLength).toBeLessThanOrEqual(MTU_FRAME_BYTES);
            next += f.frame.samplesPerChannel;
            payload.push(Buffer.from(f.frame.payload));
          });
          expect(next - start).toBe(FRAMES);
          expect(Buffer.concat(payload).equals(Buffer.from(want))).toBe(true);
        }
      } finally {
        await new Promise<void>((resolve) => rx.close(() => resolve()));
      }
    });

    it('refuses a bad command line with exit status 2 and says why', async () => {
      const cases: [string[], RegExp][] = [
        [['127.0.0.1:9750', '--rate', '48000', '--encoding', 'int16'], /--channels/],
        [['127.0.0.1:9750', '--channels', '4', '--rate', '48000', '--encoding', 'int8'], /int8/],
        [['127.0.0.1:0', '--channels', '4', '--rate', '48000', '--encoding', 'int16'], /port|1-65535/],
        [['::1:9750', '--channels', '4', '--rate', '48000', '--encoding', 'int16'], /bracket/],
        [['127.0.0.1:9750', '--channels', '4', '--rate', '48000', '--encoding', 'int16', '--frame-samples', '9000'], /at most 8184 samples/],
        [['127.0.0.1:9750', '--channels', '4', '--rate', '48000', '--encoding', 'int16', '--pace', '0'], /--pace/],
      ];
      for (const [args, why] of cases) {
        const r = await runPipeline([[...sender.argv(), ...args]]);
        expect(r.code).toBe(2);
        expect(r.err).toMatch(why);
      }
    });
  });
}
