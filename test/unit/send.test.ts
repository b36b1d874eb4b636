import dgram from 'node:dgram';
import { mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import type { AddressInfo } from 'node:net';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { WebSocketServer } from 'ws';
import { decodeFrame, MTU_FRAME_BYTES, type DecodedFrame } from '../../shared/frame.ts';
import { writeWavFile } from '../../server/io/wav.ts';
import { Pacer } from '../../server/tools/pacer.ts';
import { SEND_ERRORS } from '../../server/tools/send-errors.ts';
import { sendCommand, sendFile, WS_FRAME_BYTES } from '../../server/tools/send.ts';

const RATE_HZ = 48000;
const CHANNELS = 3;
const FRAMES = 12000; // 0.25 s
const ROW_BYTES = CHANNELS * 3; // int24

const dir = mkdtempSync(join(tmpdir(), 'nullsteer-send-'));
const wavPath = join(dir, 'three.wav');
const rawPath = join(dir, 'three.raw');
/** The file's sample bytes, located by scanning for the data chunk (not with the project's parser). */
let fileData: Uint8Array;

beforeAll(async () => {
  const x = new Float32Array(FRAMES * CHANNELS);
  for (let i = 0; i < FRAMES; i++) for (let c = 0; c < CHANNELS; c++) x[i * CHANNELS + c] = 0.8 * Math.sin(2 * Math.PI * (i / 480) + c);
  await writeWavFile(wavPath, { sampleRateHz: RATE_HZ, channels: CHANNELS, encoding: 'int24', interleaved: x });
  const bytes = readFileSync(wavPath);
  const at = bytes.indexOf('data') + 8;
  fileData = new Uint8Array(bytes.subarray(at, at + FRAMES * ROW_BYTES));
  writeFileSync(rawPath, fileData);
});
afterAll(() => rmSync(dir, { recursive: true, force: true }));

async function udpReceiver() {
  // A roomy kernel buffer: in --fast mode the sender and this receiver share one event loop.
  const socket = dgram.createSocket({ type: 'udp4', recvBufferSize: 4 << 20 });
  const datagrams: Uint8Array[] = [];
  socket.on('message', (m) => datagrams.push(new Uint8Array(m)));
  await new Promise<void>((resolve) => socket.bind(0, '127.0.0.1', resolve));
  const port = (socket.address() as AddressInfo).port;
  return {
    port,
    datagrams,
    /** Wait until `count` datagrams have arrived (loopback delivers them all, in order). */
    async received(count: number) {
      const until = Date.now() + 3000;
      while (datagrams.length < count && Date.now() < until) await new Promise((r) => setTimeout(r, 5));
      return datagrams;
    },
    close: () => new Promise<void>((resolve) => socket.close(() => resolve())),
  };
}

async function wsReceiver(onMessage?: (ws: import('ws').WebSocket, count: number) => void) {
  const wss = new WebSocketServer({ host: '127.0.0.1', port: 0 });
  await new Promise<void>((resolve) => wss.once('listening', () => resolve()));
  const messages: Uint8Array[] = [];
  const closed = new Promise<number>((resolve) => {
    wss.on('connection', (ws) => {
      ws.on('message', (data, isBinary) => {
        expect(isBinary).toBe(true);
        messages.push(new Uint8Array(data as Buffer));
        onMessage?.(ws, messages.length);
      });
      ws.on('close', (code) => resolve(code));
    });
  });
  return {
    url: `ws://127.0.0.1:${(wss.address() as AddressInfo).port}/ingest`,
    messages,
    closed,
    close: () => new Promise<void>((resolve) => wss.close(() => resolve())),
  };
}

/** Decode every frame and check the stream: contiguous sequence and sample clock, payload = file bytes. */
function checkStream(raw: Uint8Array[], opts: { streamId: number; startSample?: number; maxBytes?: number; passes?: 'one' | 'many' }): DecodedFrame[] {
  const frames = raw.map((d) => {
    const r = decodeFrame(d);
    if (!r.ok) throw new Error(`${r.reason}: ${r.detail}`);
    return r.frame;
  });
  const start = opts.startSample ?? 0;
  let next = start;
  frames.forEach((f, k) => {
    expect(f).toMatchObject({ sequence: k, firstSample: next, streamId: opts.streamId, sampleRateHz: RATE_HZ, channels: CHANNELS, encoding: 'int24' });
    if (opts.maxBytes) expect(raw[k].byteLength).toBeLessThanOrEqual(opts.maxBytes);
    const fileFrame = (f.firstSample - start) % FRAMES;
    expect(fileFrame + f.samplesPerChannel).toBeLessThanOrEqual(FRAMES); // a frame never spans the loop point
    expect(Buffer.from(f.payload).equals(Buffer.from(fileData.subarray(fileFrame * ROW_BYTES, (fileFrame + f.samplesPerChannel) * ROW_BYTES)))).toBe(true);
    next += f.samplesPerChannel;
  });
  if ((opts.passes ?? 'one') === 'one') expect(next - start).toBe(FRAMES);
  return frames;
}

describe('sendFile over UDP', () => {
  it('sends the whole file as fast as the socket takes it, MTU-sized by default', async () => {
    const rx = await udpReceiver();
    try {
      const result = await sendFile({ path: wavPath, target: { kind: 'udp', host: '127.0.0.1', port: rx.port }, speed: 'fast' });
      const perFrame = Math.floor((MTU_FRAME_BYTES - 32) / ROW_BYTES);
      expect(result).toMatchObject({ frames: Math.ceil(FRAMES / perFrame), samplesPerChannel: FRAMES, samplesPerFrame: perFrame, stopped: false });
      checkStream(await rx.received(result.frames), { streamId: result.streamId, maxBytes: MTU_FRAME_BYTES });
      expect(rx.datagrams).toHaveLength(result.frames);
    } finally {
      await rx.close();
    }
  });

  it('honours speed, frame size, stream id and start sample; the last frame is shorter', async () => {
    const rx = await udpReceiver();
    try {
      const result = await sendFile({
        path: wavPath,
        target: { kind: 'udp', host: 'localhost', port: rx.port },
        speed: 8,
        samplesPerFrame: 512,
        streamId: 0xfffffffe,
        startSample: 2 ** 40,
      });
      expect(result).toMatchObject({ frames: 24, samplesPerChannel: FRAMES });
      const frames = checkStream(await rx.received(24), { streamId: 0xfffffffe, startSample: 2 ** 40 });
      expect(frames.map((f) => f.samplesPerChannel)).toEqual([...new Array(23).fill(512), FRAMES - 23 * 512]);
      expect(result.elapsedS).toBeGreaterThanOrEqual(0.2 / 8);
    } finally {
      await rx.close();
    }
  });

  it('paces in real time at speed 1 (0.25 s of audio takes at least 0.2 s)', async () => {
    const rx = await udpReceiver();
    try {
      const t0 = performance.now();
      const result = await sendFile({ path: wavPath, target: { kind: 'udp', host: '127.0.0.1', port: rx.port } });
      const wallS = (performance.now() - t0) / 1000;
      expect(wallS).toBeGreaterThanOrEqual(0.2);
      expect(wallS).toBeLessThan(1.5);
      expect(result.elapsedS).toBeGreaterThanOrEqual(0.25); // held until the last sample is due
      checkStream(await rx.received(result.frames), { streamId: result.streamId });
    } finally {
      await rx.close();
    }
  });

  it('loops with continuing sample indices and sequence numbers until stopped', async () => {
    const rx = await udpReceiver();
    const stop = new AbortController();
    setTimeout(() => stop.abort(), 120);
    try {
      const result = await sendFile({ path: wavPath, target: { kind: 'udp', host: '127.0.0.1', port: rx.port }, speed: 8, loop: true, startSample: 5, signal: stop.signal });
      expect(result.stopped).toBe(true);
      expect(result.samplesPerChannel).toBeGreaterThan(FRAMES); // went past the end at least once
      const frames = checkStream(await rx.received(result.frames), { streamId: result.streamId, startSample: 5, passes: 'many' });
      expect(frames).toHaveLength(result.frames);
    } finally {
      await rx.close();
    }
  });

  it('reads raw files the same way', async () => {
    const rx = await udpReceiver();
    try {
      const result = await sendFile({
        path: rawPath,
        raw: { channels: CHANNELS, sampleRateHz: RATE_HZ, encoding: 'int24' },
        target: { kind: 'udp', host: '127.0.0.1', port: rx.port },
        speed: 'fast',
      });
      checkStream(await rx.received(result.frames), { streamId: result.streamId });
    } finally {
      await rx.close();
    }
  });
});

describe('sendFile over WebSocket', () => {
  it('sends 16 KiB frames as binary messages and closes with 1000', async () => {
    const rx = await wsReceiver();
    try {
      const result = await sendFile({ path: wavPath, target: { kind: 'ws', url: rx.url }, speed: 'fast', wsMaxBufferedBytes: 32 * 1024 });
      expect(await rx.closed).toBe(1000);
      const perFrame = Math.floor((WS_FRAME_BYTES - 32) / ROW_BYTES);
      expect(result).toMatchObject({ samplesPerFrame: perFrame, frames: Math.ceil(FRAMES / perFrame), samplesPerChannel: FRAMES });
      checkStream(rx.messages, { streamId: result.streamId, maxBytes: WS_FRAME_BYTES });
    } finally {
      await rx.close();
    }
  });

  it('paces at speed 8', async () => {
    const rx = await wsReceiver();
    try {
      const result = await sendFile({ path: wavPath, target: { kind: 'ws', url: rx.url }, speed: 8, maxFrameBytes: 4096 });
      expect(result.elapsedS).toBeGreaterThanOrEqual(0.2 / 8);
      await rx.closed;
      checkStream(rx.messages, { streamId: result.streamId, maxBytes: 4096 });
    } finally {
      await rx.close();
    }
  });

  it('fails with ERR_SEND_TRANSPORT naming the close code when the server hangs up', async () => {
    const rx = await wsReceiver((ws, count) => {
      if (count === 1) ws.close(1009, 'message too big');
    });
    try {
      await expect(sendFile({ path: wavPath, target: { kind: 'ws', url: rx.url }, samplesPerFrame: 100 })).rejects.toMatchObject({
        code: 'ERR_SEND_TRANSPORT',
        message: expect.stringMatching(/code 1009: message too big/),
      });
    } finally {
      await rx.close();
    }
  });

  it('fails with ERR_SEND_CONNECT when nothing listens', async () => {
    const rx = await wsReceiver();
    const url = rx.url;
    await rx.close();
    await expect(sendFile({ path: wavPath, target: { kind: 'ws', url } })).rejects.toMatchObject({ code: 'ERR_SEND_CONNECT' });
  });
});

/** Run the command with captured output. */
async function run(argv: string[]) {
  const out: string[] = [];
  const err: string[] = [];
  const code = await sendCommand(argv, { out: (l) => out.push(l), err: (l) => err.push(l) });
  return { code, out: out.join('\n'), err: err.join('\n') };
}

describe('sendCommand', () => {
  it('sends and prints a one-line summary', async () => {
    const rx = await udpReceiver();
    try {
      const r = await run([wavPath, '--udp', `127.0.0.1:${rx.port}`, '--fast', '--stream-id', '9']);
      expect(r).toMatchObject({ code: 0, err: '' });
      const [first, last, ...more] = r.out.split('\n');
      expect(more).toEqual([]);
      expect(first).toMatch(/^sending .*three\.wav \(3 channels, int24, 48000 Hz\) as stream 9 to udp:\/\/127\.0\.0\.1:\d+, 160 samples per frame$/);
      // 12000 samples × 9 bytes = 108000 bytes.
      expect(last).toMatch(/^sent 75 frames, 12000 samples per channel \(0\.250 s at 48000 Hz, 108000 bytes\) as stream 9 to udp:\/\/127\.0\.0\.1:\d+ in [\d.]+ s: \d+ samples\/s per channel, [\d.]+× real time$/);
      checkStream(await rx.received(75), { streamId: 9 });
    } finally {
      await rx.close();
    }
  });

  it('is silent with --quiet, and reads --raw files', async () => {
    const rx = await udpReceiver();
    try {
      const r = await run([rawPath, '--raw', '--channels=3', '--rate', '48000', '--encoding', 'int24', `--udp=127.0.0.1:${rx.port}`, '--speed', '16', '--quiet']);
      expect(r).toEqual({ code: 0, out: '', err: '' });
      const got = await rx.received(75);
      const id = (decodeFrame(got[0]) as { frame: DecodedFrame }).frame.streamId;
      checkStream(got, { streamId: id });
    } finally {
      await rx.close();
    }
  });

  it('prints help on --help', async () => {
    const r = await run(['--help']);
    expect(r.code).toBe(0);
    expect(r.out).toMatch(/^usage: nullsteer send FILE/);
  });

  const bad: [string[], RegExp][] = [
    [[], /FILE is missing/],
    [['a.wav', 'b.wav'], /one FILE expected, got 2/],
    [['f.wav', '--bogus'], /unknown flag --bogus/],
    [['f.wav', '-x'], /unknown flag -x/],
    [['f.wav', '--udp'], /--udp needs a value/],
    [['f.wav', '--udp', 'localhost'], /--udp "localhost": not HOST:PORT; allowed HOST:PORT/],
    [['f.wav', '--udp', '127.0.0.1:0'], /--udp "127.0.0.1:0": port 0 out of range; allowed .*port 1–65535/],
    [['f.wav', '--udp', '127.0.0.1:65536'], /--udp .*port 65536 out of range/],
    [['f.wav', '--udp', 'host:http'], /--udp .*port "http" is not a whole number/],
    [['f.wav', '--udp', '::1:9750'], /--udp .*IPv6 address must be in brackets/],
    [['f.wav', '--ws', 'http://x/ingest'], /--ws "http:\/\/x\/ingest": scheme http: is not ws: or wss:/],
    [['f.wav', '--ws', 'not a url'], /--ws "not a url": not a URL/],
    [['f.wav', '--udp', '127.0.0.1:9750', '--ws', 'ws://x/'], /--udp and --ws cannot be combined/],
    [['f.wav', '--speed', '0'], /--speed "0": not positive and finite; allowed a number > 0/],
    [['f.wav', '--speed', '-2'], /--speed "-2": not a number/],
    [['f.wav', '--speed', 'fast'], /--speed "fast": not a number/],
    [['f.wav', '--speed', '2', '--fast'], /--speed and --fast cannot be combined/],
    [['f.wav', '--fast=yes'], /--fast takes no value/],
    [['f.wav', '--stream-id', '4294967296'], /--stream-id "4294967296": out of range; allowed an integer 0–4294967295/],
    [['f.wav', '--stream-id', '1.5'], /--stream-id "1.5": not a whole number/],
    [['f.wav', '--frame-samples', '0'], /--frame-samples "0": out of range; allowed an integer 1–65535/],
    [['f.wav', '--frame-samples', '10', '--max-frame-bytes', '1000'], /--frame-samples and --max-frame-bytes cannot be combined/],
    [['f.wav', '--max-frame-bytes', '70000'], /--max-frame-bytes "70000": out of range; allowed an integer 34–65507/],
    [['f.wav', '--start-sample', '-1'], /--start-sample "-1": not a whole number; allowed an integer 0–9007199254740991/],
    [['f.wav', '--channels', '2'], /--channels is only used with --raw/],
    [['f.wav', '--raw', '--channels', '2'], /--raw needs --rate, --encoding/],
    [['f.wav', '--raw', '--channels', '2', '--rate', '8000', '--encoding', 'int8'], /--encoding "int8": unknown encoding; allowed int16, int24, int32, float32/],
    [['f.wav', '--raw', '--channels', '0', '--rate', '8000', '--encoding', 'int16'], /--channels "0": out of range; allowed an integer 1–65535/],
    [['f.wav', '--raw', '--channels', '2', '--rate', '0', '--encoding', 'int16'], /--rate "0": out of range/],
    [['-'], /- \(standard input\) needs --raw --channels M --rate HZ --encoding int16\|int24\|int32\|float32: a pipe carries no header/],
    [['-', '--raw', '--channels', '4'], /--raw needs --rate, --encoding/],
    [['-', '--raw', '--channels', '4', '--rate', '48000', '--encoding', 'int32', '--speed', '2'], /--speed does not apply to standard input \(-\): the source paces it/],
    [['-', '--raw', '--channels', '4', '--rate', '48000', '--encoding', 'int32', '--loop'], /--loop needs a file: standard input \(-\) cannot be replayed/],
  ];
  for (const [argv, message] of bad) {
    it(`rejects ${JSON.stringify(argv)}`, async () => {
      const r = await run(argv);
      expect(r.code).toBe(2);
      expect(r.out).toBe('');
      const [first, second] = r.err.split('\n');
      expect(first).toMatch(/^nullsteer send: invalid command line: /);
      expect(first).toMatch(message);
      expect(second).toMatch(/^usage: nullsteer send FILE/);
    });
  }

  it('names the flag when a frame size does not fit the file', async () => {
    const big = await run([wavPath, '--frame-samples', '8000']);
    expect(big.code).toBe(2);
    expect(big.err).toMatch(/--frame-samples 8000: a frame of 3-channel int24 holds at most 7275 samples \(65507-byte limit\); allowed 1–7275/);
    const small = await run([wavPath, '--max-frame-bytes', '40']);
    expect(small.code).toBe(2);
    expect(small.err).toMatch(/--max-frame-bytes 40: one sample of 3-channel int24 needs a 41-byte frame; allowed 41–65507/);
  });

  it('reports file problems with exit code 1', async () => {
    const missing = await run([join(dir, 'nope.wav')]);
    expect(missing.code).toBe(1);
    expect(missing.err).toMatch(/cannot read .*nope\.wav: ENOENT/);
    const notWav = join(dir, 'text.wav');
    writeFileSync(notWav, 'hello, this is not audio');
    const bad = await run([notWav]);
    expect(bad.code).toBe(1);
    expect(bad.err).toMatch(/text\.wav: not a RIFF\/WAVE or RF64 file: file starts with 'hell'/);
    const empty = join(dir, 'empty.raw');
    writeFileSync(empty, new Uint8Array(5));
    const none = await run([empty, '--raw', '--channels', '3', '--rate', '8000', '--encoding', 'int16']);
    expect(none.code).toBe(1);
    expect(none.err).toMatch(/nothing to send: .*empty\.raw holds no whole sample frames/);
  });

  it('warns about a truncated WAV and sends what is there', async () => {
    const cut = join(dir, 'cut.wav');
    const bytes = readFileSync(wavPath);
    writeFileSync(cut, bytes.subarray(0, bytes.indexOf('data') + 8 + 100 * ROW_BYTES + 4));
    const rx = await udpReceiver();
    try {
      const r = await run([cut, '--udp', `127.0.0.1:${rx.port}`, '--fast']);
      expect(r.code).toBe(0);
      expect(r.err).toMatch(/warning: .*cut\.wav: the data chunk size is unfinalised or larger than the file; sending the 100 whole frames present; ignoring 4 bytes/);
      expect(r.out).toMatch(/100 samples per channel/);
    } finally {
      await rx.close();
    }
  });
});

describe('pacing and errors', () => {
  it('schedules against the start time, so lateness does not accumulate', () => {
    const p = new Pacer(48000, 2);
    expect(p.dueMs(48000)).toBe(500);
    expect(p.dueMs(480)).toBe(5);
    expect(() => new Pacer(48000, 0)).toThrow(/speed 0/);
  });

  it('waits in batches and never releases a sample early', async () => {
    let sleeps = 0;
    const p = new Pacer(48000, 1, { batchMs: 5 });
    const t0 = performance.now();
    p.start();
    for (let s = 0; s <= 2400; s += 60) {
      const before = performance.now();
      await p.waitFor(s);
      if (performance.now() - before > 1) sleeps++;
      expect(performance.now() - t0).toBeGreaterThanOrEqual(s / 48 - 0.5);
    }
    // 41 items 1.25 ms apart over 50 ms: about 10 batches, far fewer than one sleep per item.
    expect(sleeps).toBeLessThan(20);
  });

  it('has a catalogue of ERR_SEND_ codes with class, exit code and message', () => {
    for (const [code, spec] of Object.entries(SEND_ERRORS)) {
      expect(code).toMatch(/^ERR_SEND_[A-Z_]+$/);
      expect([Error, RangeError, TypeError]).toContain(spec.errorClass);
      expect([1, 2]).toContain(spec.exitCode);
      expect(spec.message.length).toBeGreaterThan(5);
    }
  });
});
