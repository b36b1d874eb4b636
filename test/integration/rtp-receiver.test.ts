/**
 * RTP sessions over real UDP (server/ingest/rtp/rtp-receiver.ts): unicast to 127.0.0.1 from the test
 * sender (test/helpers/rtp-sender.ts), and multicast only inside a network namespace this test
 * creates (`unshare -rn`, loopback up, a multicast route on lo), never on any other address.
 * Checked against what the sender sent: the integers (L24 / 2²³ exactly), and its own record of
 * the packets it left out, duplicated, swapped, and of its restart under a new SSRC.
 */
import { spawnSync } from 'node:child_process';
import { createSocket } from 'node:dgram';
import { fileURLToPath } from 'node:url';
import { afterEach, describe, expect, it } from 'vitest';
import { startRtpSession, type RtpSession } from '../../server/ingest/rtp/rtp-receiver.ts';
import { RtpStream } from '../../server/ingest/rtp/rtp-stream.ts';
import { parseSessionSdp } from '../../server/ingest/rtp/sdp.ts';
import type { Block } from '../../shared/types.ts';
import { mulberry32 } from '../helpers/random.ts';
import { LoopbackSender, RtpTestStream } from '../helpers/rtp-sender.ts';
import { waitFor } from '../helpers/service.ts';

const UNIT_SDP = [
  'v=0',
  'o=- 4711 4711 IN IP4 127.0.0.1',
  's=bench unit 8 ch',
  'c=IN IP4 127.0.0.1',
  't=0 0',
  'm=audio 5004 RTP/AVP 97',
  'a=rtpmap:97 L24/48000/8',
  'a=ptime:0.125',
  'a=ts-refclk:ptp=IEEE1588-2008:02-00-5E-FF-FE-00-53-01:0',
  'a=mediaclk:direct=0',
  '',
].join('\r\n');

let session: RtpSession | null = null;
let tx: LoopbackSender | null = null;
let ticker: NodeJS.Timeout | null = null;
afterEach(async () => {
  if (ticker) clearInterval(ticker);
  ticker = null;
  tx?.close();
  tx = null;
  await session?.close();
  session = null;
});

function sampleAt(blocks: Block[], index: number, c: number): { x: number; gap: boolean } {
  for (const b of blocks) if (index >= b.sampleIndex && index < b.sampleIndex + b.frames) return { x: b.data[c * b.frames + (index - b.sampleIndex)], gap: b.gap };
  throw new Error(`sample ${index} not delivered`);
}

describe('RTP session over UDP on 127.0.0.1', () => {
  it('delivers an L24 stream bit-exact with loss, duplicates, reordering, wraps and a sender restart', async () => {
    const desc = parseSessionSdp(UNIT_SDP, 'unit-a');
    const blocks: Block[] = [];
    // A long jitter buffer: a busy machine's stall between two swapped packets must not count as loss.
    const stream = new RtpStream(desc, { jitterMs: 1000, sampleRateHz: 48000 }, (b) => blocks.push(b));
    session = await startRtpSession(desc, stream, { host: '127.0.0.1', port: 0, receiveBufferBytes: 1 << 22, queueBytes: 1 << 22 });
    ticker = setInterval(() => stream.tick(performance.now()), 5);
    tx = await LoopbackSender.open();

    const N = 3000;
    const n = 6;
    // Sequence wraps at packet 1000, timestamp at 2000 (with mediaclk:direct=0 the index is the timestamp).
    const a = new RtpTestStream({ channels: 8, encoding: 'L24', samplesPerPacket: n, payloadType: 97, ssrc: 0x1a2b3c4d, firstSequence: 65536 - 1000, firstTimestamp: 2 ** 32 - n * 2000 }, N, 21);
    const b = new RtpTestStream({ channels: 8, encoding: 'L24', samplesPerPacket: n, payloadType: 97, ssrc: 0x0badcafe, firstSequence: 9, firstTimestamp: 123_456 }, 500, 22);
    const rng = mulberry32(23);
    const order: [RtpTestStream, number][] = [];
    const dropped = new Set<number>();
    let duplicated = 0;
    let swapped = 0;
    for (let k = 0; k < N; k++) {
      const r = rng();
      const inner = k >= 10 && k < N - 10;
      if (inner && r < 0.05) dropped.add(k);
      else if (inner && r < 0.07) {
        order.push([a, k], [a, k]);
        duplicated++;
      } else if (inner && r < 0.12) {
        order.push([a, k + 1], [a, k]);
        swapped++;
        k++;
      } else order.push([a, k]);
    }
    for (let k = 0; k < 500; k++) order.push([b, k]);

    // Paced by the receiver's own count, so the kernel's buffer never fills, however busy the machine.
    for (let i = 0; i < order.length; i++) {
      if (i % 50 === 0) await waitFor(() => stream.status().datagrams >= i - 100, 20000, `datagram ${i - 100}`);
      await tx.send(order[i][0].packet(order[i][1]), session.port);
    }
    await waitFor(() => stream.status().datagrams === order.length, 20000, 'every datagram');
    await waitFor(() => stream.status().packets === N - dropped.size + 500, 20000, 'every packet placed');
    stream.flush();

    const st = stream.status();
    expect(st).toMatchObject({ ssrc: 0x0badcafe, ssrcChanges: 1, lost: dropped.size, duplicates: duplicated, reordered: swapped, late: 0, seqWraps: 1, tsWraps: 1, remote: `127.0.0.1:${tx.port}`, mediaClockOffset: 0, tsRefclk: 'ptp=IEEE1588-2008:02-00-5E-FF-FE-00-53-01:0' });
    expect(Object.values(st.rejected).every((v) => v === 0)).toBe(true);
    expect(session.queueDrops).toBe(0);
    expect(session.kernel()?.drops ?? 0).toBe(0);

    // First timeline: exactly the span of A's timestamps, lost packets zeros of exactly their length.
    const restart = blocks.findIndex((x) => x.discontinuity);
    const first = 2 ** 32 - n * 2000;
    let next = first;
    for (const x of blocks.slice(0, restart)) {
      expect(x.sampleIndex).toBe(next);
      next += x.frames;
    }
    expect(next).toBe(first + N * n);
    for (let k = 0; k < N; k++) {
      for (let j = 0; j < n; j++) {
        for (const c of [0, 7]) expect(sampleAt(blocks.slice(0, restart), first + k * n + j, c)).toEqual(dropped.has(k) ? { x: 0, gap: true } : { x: a.sample(k * n + j, c) / 2 ** 23, gap: false });
      }
    }
    // After the restart: B's timeline, from B's first timestamp, bit-exact.
    expect(blocks[restart].sampleIndex).toBe(123_456);
    const after = blocks.slice(restart);
    expect(after.reduce((s, x) => s + x.frames, 0)).toBe(500 * n);
    for (let i = 0; i < 500 * n; i++) expect(sampleAt(after, 123_456 + i, 3).x).toBe(b.sample(i, 3) / 2 ** 23);
  });

  it('names the session when its port cannot be bound', async () => {
    const taken = createSocket('udp4');
    await new Promise<void>((r) => taken.bind(0, '127.0.0.1', () => r()));
    const port = taken.address().port;
    try {
      const desc = parseSessionSdp(UNIT_SDP, 'unit-b');
      const stream = new RtpStream(desc, { jitterMs: 20, sampleRateHz: 48000 }, () => {});
      await expect(startRtpSession(desc, stream, { host: '127.0.0.1', port, receiveBufferBytes: 1 << 20, queueBytes: 1 << 20 })).rejects.toThrow(`RTP session "unit-b": cannot receive on 127.0.0.1 port ${port}: bind EADDRINUSE`);
    } finally {
      taken.close();
    }
  });
});

const CHILD = fileURLToPath(new URL('../helpers/rtp-multicast-child.ts', import.meta.url));

describe('RTP session on a multicast group (inside a network namespace of its own)', () => {
  it('joins the group from c=, source-specific from a=source-filter (only the named source is received) or any-source without it', (ctx) => {
    // The namespace has only its own loopback: nothing sent in it can leave this machine.
    const probe = spawnSync('unshare', ['-rn', 'true'], { encoding: 'utf8' });
    if (probe.status !== 0) {
      console.warn(`multicast test skipped: cannot create a network namespace (unshare -rn: ${(probe.stderr || probe.error?.message || `exit ${probe.status}`).trim()})`);
      ctx.skip();
      return;
    }
    const run = spawnSync('unshare', ['-rn', 'sh', '-c', `ip link set lo up && ip route add 224.0.0.0/4 dev lo && exec "${process.execPath}" --import tsx "${CHILD}"`], { encoding: 'utf8', timeout: 60000 });
    expect(run.status, run.stderr).toBe(0);
    const out = JSON.parse(run.stdout.trim().split('\n').pop()!);
    // 300 packets from the named source, 300 from another address that the join must filter out.
    expect(out).toMatchObject({ joined: true, packets: 300, datagrams: 300, lost: 0, ssrc: 0x6d630001, bitExact: true, frames: 1800 });
    // The any-source session on the same group gets both senders: one is followed, the other refused.
    expect(out.any).toEqual({ datagrams: 600, packets: 300, probation: 300 });
  });
});
