/**
 * `nullsteer send -`: the row chunker (sample frames never split, nothing whole held back, exact
 * counts over random chunk boundaries) and sendStream over a recording transport, UDP and
 * WebSocket, including the bound on what is read while the WebSocket is backed up.
 */
import dgram from 'node:dgram';
import { readFileSync } from 'node:fs';
import type { AddressInfo } from 'node:net';
import { PassThrough, Readable } from 'node:stream';
import { describe, expect, it } from 'vitest';
import { WebSocketServer, type WebSocket } from 'ws';
import { decodeFrame, FRAME_HEADER_BYTES, MTU_FRAME_BYTES, type DecodedFrame } from '../../shared/frame.ts';
import type { FrameTransport } from '../../server/tools/frame-transport.ts';
import { sendCommand } from '../../server/tools/send.ts';
import { RowChunker, sendStream } from '../../server/tools/send-stdin.ts';
import { mulberry32 } from '../helpers/random.ts';

/** `length` pseudo-random bytes. */
function randomBytes(length: number, seed: number): Uint8Array {
  const rnd = mulberry32(seed);
  const b = new Uint8Array(length);
  for (let i = 0; i < length; i++) b[i] = Math.floor(rnd() * 256);
  return b;
}

/** Cut `bytes` at random places: chunks of 0 to `most` bytes (empty ones included). */
function randomChunks(bytes: Uint8Array, seed: number, most: number): Uint8Array[] {
  const rnd = mulberry32(seed);
  const out: Uint8Array[] = [];
  for (let p = 0; p < bytes.byteLength; ) {
    // Mostly short chunks (shorter than a row too), now and then a long one.
    const len = rnd() < 0.2 ? Math.floor(rnd() * most) : Math.floor(rnd() * 40);
    out.push(bytes.subarray(p, Math.min(bytes.byteLength, p + len)));
    p += len;
  }
  return out;
}

describe('RowChunker', () => {
  // rowBytes: 1 ch int16, 3 ch int24, 4 ch int32, 5 ch float32, 24 ch int24.
  const shapes = [2, 9, 16, 20, 72];
  const maxRowsList = [1, 7, 90];
  for (const rowBytes of shapes) {
    for (const maxRows of maxRowsList) {
      it(`${rowBytes}-byte rows, ≤ ${maxRows} per run: whole rows only, none held back, exact count`, () => {
        for (let seed = 1; seed <= 5; seed++) {
          const length = 5000 + Math.floor(mulberry32(seed * 977)() * 3000); // rarely a whole number of rows
          const input = randomBytes(length, seed);
          const chunker = new RowChunker(rowBytes, maxRows);
          const out = new Uint8Array(maxRows * rowBytes);
          const got: number[] = [];
          let pushed = 0;
          let rowsOut = 0;
          for (const chunk of randomChunks(input, seed + 100, 3 * maxRows * rowBytes)) {
            chunker.push(chunk);
            pushed += chunk.byteLength;
            for (let rows = chunker.nextFrame(out); rows > 0; rows = chunker.nextFrame(out)) {
              expect(rows).toBeLessThanOrEqual(maxRows);
              for (let k = 0; k < rows * rowBytes; k++) got.push(out[k]);
              rowsOut += rows;
            }
            // Sent as it arrives: every whole row pushed so far is out; only a partial row waits.
            expect(rowsOut).toBe(Math.floor(pushed / rowBytes));
            expect(chunker.pendingBytes).toBe(pushed % rowBytes);
          }
          expect(rowsOut).toBe(Math.floor(length / rowBytes));
          expect(chunker.pendingBytes).toBe(length % rowBytes);
          expect(Buffer.from(got).equals(Buffer.from(input.subarray(0, rowsOut * rowBytes)))).toBe(true);
        }
      });
    }
  }

  it('refuses a push while whole rows of the previous chunk are still there, and bad sizes', () => {
    const c = new RowChunker(4, 2);
    c.push(new Uint8Array(12));
    expect(() => c.push(new Uint8Array(4))).toThrow(/previous chunk still holds whole rows/);
    expect(c.nextFrame(new Uint8Array(8))).toBe(2);
    expect(c.nextFrame(new Uint8Array(8))).toBe(1);
    expect(c.nextFrame(new Uint8Array(8))).toBe(0);
    expect(() => new RowChunker(0, 1)).toThrow(RangeError);
    expect(() => new RowChunker(4, 0)).toThrow(RangeError);
  });
});

/** A transport that keeps a copy of every frame; send() waits for `gate` when one is set. */
function memoryTransport(frameReusable: boolean) {
  const frames: Uint8Array[] = [];
  let gate: Promise<void> | null = null;
  let sending = 0;
  const t = {
    frames,
    get sending() {
      return sending;
    },
    hold(): () => void {
      let open!: () => void;
      gate = new Promise<void>((r) => (open = r));
      return () => {
        gate = null;
        open();
      };
    },
    transport: {
      target: 'memory://test',
      frameReusable,
      async send(frame: Uint8Array) {
        frames.push(new Uint8Array(frame)); // a copy: the sender may reuse its buffer
        sending++;
        if (gate) await gate;
        sending--;
      },
      async close() {},
    } satisfies FrameTransport,
  };
  return t;
}

function decodeAll(raw: Uint8Array[]): DecodedFrame[] {
  return raw.map((d) => {
    const r = decodeFrame(d);
    if (!r.ok) throw new Error(`${r.reason}: ${r.detail}`);
    return r.frame;
  });
}

/** Check frames: sequence k, firstSample = start + rows before, payloads concatenated = input's whole rows. */
function checkFrames(frames: DecodedFrame[], input: Uint8Array, rowBytes: number, opts: { streamId: number; startSample: number; maxRows: number }) {
  let next = opts.startSample;
  const payload: number[] = [];
  frames.forEach((f, k) => {
    expect(f).toMatchObject({ sequence: k, firstSample: next, streamId: opts.streamId });
    expect(f.samplesPerChannel).toBeLessThanOrEqual(opts.maxRows);
    expect(f.payload.byteLength).toBe(f.samplesPerChannel * rowBytes);
    next += f.samplesPerChannel;
    for (const b of f.payload) payload.push(b);
  });
  const rows = Math.floor(input.byteLength / rowBytes);
  expect(next - opts.startSample).toBe(rows);
  expect(Buffer.from(payload).equals(Buffer.from(input.subarray(0, rows * rowBytes)))).toBe(true);
}

const FORMAT = { channels: 4, sampleRateHz: 48000, encoding: 'int32' as const };
const ROW = 16;

describe('sendStream', () => {
  for (const frameReusable of [true, false]) {
    it(`random chunks → exact frames, partial sample frame at the end reported (${frameReusable ? 'reused' : 'fresh'} frame buffers)`, async () => {
      const input = randomBytes(ROW * 3001 + 7, 42);
      const mem = memoryTransport(frameReusable);
      const r = await sendStream({ input: Readable.from(randomChunks(input, 43, 4000)), format: FORMAT, transport: mem.transport, streamId: 77, startSample: 2 ** 33, samplesPerFrame: 50 });
      expect(r).toMatchObject({ streamId: 77, samplesPerChannel: 3001, bytesRead: ROW * 3001 + 7, partialBytes: 7, stopped: false, samplesPerFrame: 50, target: 'memory://test' });
      expect(r.frames).toBe(mem.frames.length);
      checkFrames(decodeAll(mem.frames), input, ROW, { streamId: 77, startSample: 2 ** 33, maxRows: 50 });
    });
  }

  it('picks a fresh random stream id in 1–2^32−1 when none is given', async () => {
    const ids = new Set<number>();
    for (let k = 0; k < 4; k++) {
      const mem = memoryTransport(true);
      const r = await sendStream({ input: Readable.from([new Uint8Array(ROW * 3)]), format: FORMAT, transport: mem.transport });
      expect(Number.isInteger(r.streamId) && r.streamId >= 1 && r.streamId <= 0xffffffff).toBe(true);
      expect(decodeAll(mem.frames)[0].streamId).toBe(r.streamId);
      ids.add(r.streamId);
    }
    expect(ids.size).toBe(4); // four draws from 2^32 − 1 values: a repeat has odds of about 1 in 7·10^8
  });

  it('reads no further while a send is pending (the bound on memory)', async () => {
    const mem = memoryTransport(true);
    const release = mem.hold();
    let pulled = 0;
    async function* endless() {
      for (;;) {
        pulled++;
        yield new Uint8Array(ROW * 100);
      }
    }
    const stop = new AbortController();
    const done = sendStream({ input: endless(), format: FORMAT, transport: mem.transport, streamId: 1, samplesPerFrame: 100, signal: stop.signal });
    for (let k = 0; k < 50; k++) await new Promise((r) => setImmediate(r));
    expect(pulled).toBe(1);
    expect(mem.sending).toBe(1);
    stop.abort();
    release();
    const r = await done;
    expect(r.stopped).toBe(true);
    expect(pulled).toBe(1);
  });

  it('stops when aborted while waiting for input, and releases the input', async () => {
    const mem = memoryTransport(true);
    const input = new PassThrough();
    input.write(new Uint8Array(ROW * 10 + 3));
    const stop = new AbortController();
    const done = sendStream({ input, format: FORMAT, transport: mem.transport, streamId: 5, signal: stop.signal });
    while (mem.frames.length === 0) await new Promise((r) => setImmediate(r));
    stop.abort();
    const r = await done;
    expect(r).toMatchObject({ stopped: true, samplesPerChannel: 10, frames: 1, partialBytes: 0 });
    expect(input.destroyed).toBe(true);
  });

  it('ERR_SEND_EMPTY when the input ends before one whole sample frame; ERR_SEND_INPUT when it fails', async () => {
    const mem = memoryTransport(true);
    await expect(sendStream({ input: Readable.from([new Uint8Array(5)]), format: FORMAT, transport: mem.transport })).rejects.toMatchObject({
      code: 'ERR_SEND_EMPTY',
      message: 'nothing to send: the input ended after 5 bytes, before one whole 16-byte sample frame',
    });
    async function* failing() {
      yield new Uint8Array(ROW * 2);
      throw new Error('EIO: i/o error, read');
    }
    await expect(sendStream({ input: failing(), format: FORMAT, transport: mem.transport })).rejects.toMatchObject({
      code: 'ERR_SEND_INPUT',
      message: 'reading the input failed: cannot read the input: EIO: i/o error, read',
    });
  });

  it('stops with ERR_SEND_OPTION before a firstSample would pass 2^53 − 1 (docs/wire-format.md)', async () => {
    const mem = memoryTransport(true);
    const start = Number.MAX_SAFE_INTEGER - 10;
    await expect(sendStream({ input: Readable.from([new Uint8Array(ROW * 30)]), format: FORMAT, transport: mem.transport, startSample: start, samplesPerFrame: 10 })).rejects.toMatchObject({
      code: 'ERR_SEND_OPTION',
      option: 'startSample',
      message: expect.stringContaining('the sample clock would pass 2^53 − 1 after 20 samples'),
    });
    expect(decodeAll(mem.frames).map((f) => f.firstSample)).toEqual([start, start + 10]); // the last at 2^53 − 1 exactly
  });

  it('over UDP: frames within 1472 bytes by default, sample frames whole', async () => {
    const socket = dgram.createSocket({ type: 'udp4', recvBufferSize: 4 << 20 });
    const got: Uint8Array[] = [];
    socket.on('message', (m) => got.push(new Uint8Array(m)));
    await new Promise<void>((resolve) => socket.bind(0, '127.0.0.1', resolve));
    try {
      const input = randomBytes(ROW * 2000, 7);
      const r = await sendStream({ input: Readable.from(randomChunks(input, 8, 5000)), format: FORMAT, target: { kind: 'udp', host: '127.0.0.1', port: (socket.address() as AddressInfo).port }, streamId: 12 });
      expect(r.samplesPerFrame).toBe(Math.floor((MTU_FRAME_BYTES - FRAME_HEADER_BYTES) / ROW)); // 90
      const until = Date.now() + 5000;
      while (got.length < r.frames && Date.now() < until) await new Promise((res) => setTimeout(res, 5));
      expect(got.every((d) => d.byteLength <= MTU_FRAME_BYTES)).toBe(true);
      checkFrames(decodeAll(got), input, ROW, { streamId: 12, startSample: 0, maxRows: 90 });
    } finally {
      await new Promise<void>((resolve) => socket.close(() => resolve()));
    }
  });

  it('over WebSocket: a backed-up connection stops the reading (bounded), and an abort still ends the send', async () => {
    const wss = new WebSocketServer({ host: '127.0.0.1', port: 0 });
    await new Promise<void>((resolve) => wss.once('listening', () => resolve()));
    let peer: WebSocket | null = null;
    wss.on('connection', (ws) => {
      peer = ws;
      // Read nothing: the kernel's buffers fill, then the sender's queue.
      (ws as unknown as { _socket: import('node:net').Socket })._socket.pause();
    });
    const CHUNK = 64 * 1024;
    const chunk = new Uint8Array(CHUNK);
    let pulledBytes = 0;
    let lastPullMs = performance.now();
    async function* endless() {
      for (;;) {
        pulledBytes += CHUNK;
        lastPullMs = performance.now();
        yield chunk;
      }
    }
    const stop = new AbortController();
    const wsMaxBufferedBytes = 256 * 1024;
    try {
      const done = sendStream({
        input: endless(),
        format: FORMAT,
        target: { kind: 'ws', url: `ws://127.0.0.1:${(wss.address() as AddressInfo).port}/ingest` },
        streamId: 3,
        wsMaxBufferedBytes,
        signal: stop.signal,
      });
      // Wait until the reading has stopped (no chunk pulled for a while); without the bound it never would.
      const until = Date.now() + 20_000;
      while (!(pulledBytes > 0 && performance.now() - lastPullMs > 500) && Date.now() < until) await new Promise((r) => setTimeout(r, 50));
      expect(performance.now() - lastPullMs).toBeGreaterThan(500);
      // What was read: the sender's queue, the kernel's socket buffers on both ends, a chunk in hand.
      const kernelMax = (file: string) => {
        try {
          return Number(readFileSync(file, 'utf8').trim().split(/\s+/)[2]);
        } catch {
          return 32 << 20;
        }
      };
      const bound = wsMaxBufferedBytes + kernelMax('/proc/sys/net/ipv4/tcp_wmem') + kernelMax('/proc/sys/net/ipv4/tcp_rmem') + 4 * CHUNK;
      expect(pulledBytes).toBeLessThan(bound);
      stop.abort();
      (peer as unknown as { _socket: import('node:net').Socket } | null)?._socket.resume();
      const r = await done;
      expect(r.stopped).toBe(true);
      expect(r.samplesPerChannel * ROW).toBeLessThanOrEqual(pulledBytes);
    } finally {
      await new Promise<void>((resolve) => wss.close(() => resolve()));
    }
  }, 30_000);
});

describe('sendCommand -', () => {
  async function run(argv: string[], input: AsyncIterable<Uint8Array> & { isTTY?: boolean }) {
    const out: string[] = [];
    const err: string[] = [];
    const code = await sendCommand(argv, { out: (l) => out.push(l), err: (l) => err.push(l), input });
    return { code, out, err };
  }

  it('says the stream id first, sums up at the end, warns about a partial sample frame', async () => {
    const socket = dgram.createSocket({ type: 'udp4', recvBufferSize: 4 << 20 });
    const got: Uint8Array[] = [];
    socket.on('message', (m) => got.push(new Uint8Array(m)));
    await new Promise<void>((resolve) => socket.bind(0, '127.0.0.1', resolve));
    try {
      const port = (socket.address() as AddressInfo).port;
      const input = randomBytes(ROW * 4800 + 5, 9);
      const r = await run(['-', '--raw', '--channels', '4', '--rate', '48000', '--encoding', 'int32', '--udp', `127.0.0.1:${port}`, '--frame-samples', '64'], Readable.from(randomChunks(input, 10, 3000)));
      expect(r.code).toBe(0);
      expect(r.out).toHaveLength(2);
      const id = Number(/as stream (\d+) /.exec(r.out[0])![1]);
      expect(r.out[0]).toBe(`sending standard input (4 channels, int32, 48000 Hz) as stream ${id} to udp://127.0.0.1:${port}, 64 samples per frame`);
      // 4800 sample frames × 16 bytes = 76800 bytes = 0.1 s at 48 kHz, in ⌈4800/64⌉ = 75 frames at least.
      expect(r.out[1]).toMatch(new RegExp(`^sent \\d+ frames, 4800 samples per channel \\(0\\.100 s at 48000 Hz, 76800 bytes\\) as stream ${id} to udp://127\\.0\\.0\\.1:${port} in [\\d.]+ s: .*; end of input, 5 bytes of a partial sample frame discarded$`));
      expect(r.err).toEqual(['warning: standard input ended inside a sample frame: 5 bytes of an incomplete 16-byte sample frame not sent']);
      const frames = Number(/^sent (\d+) frames/.exec(r.out[1])![1]);
      expect(frames).toBeGreaterThanOrEqual(75);
      const until = Date.now() + 5000;
      while (got.length < frames && Date.now() < until) await new Promise((res) => setTimeout(res, 5));
      checkFrames(decodeAll(got), input, ROW, { streamId: id, startSample: 0, maxRows: 64 });
    } finally {
      await new Promise<void>((resolve) => socket.close(() => resolve()));
    }
  });

  it('refuses a terminal as standard input', async () => {
    const tty = Object.assign(Readable.from([]), { isTTY: true });
    const r = await run(['-', '--raw', '--channels', '4', '--rate', '48000', '--encoding', 'int32'], tty);
    expect(r.code).toBe(2);
    expect(r.err[0]).toMatch(/standard input, which is a terminal here/);
  });

  it('exits 1 with the reason when the input holds less than one sample frame', async () => {
    const r = await run(['-', '--raw', '--channels', '4', '--rate', '48000', '--encoding', 'int32', '--udp', '127.0.0.1:9'], Readable.from([new Uint8Array(3)]));
    expect(r.code).toBe(1);
    expect(r.err).toEqual(['nullsteer send: nothing to send: the input ended after 3 bytes, before one whole 16-byte sample frame']);
    expect(r.out).toHaveLength(1); // the first line only
  });
});
