/**
 * RTP packets → timeline (server/ingest/rtp/rtp-stream.ts), without sockets. Checked against:
 * the integers sent (L24 / 2²³ is exact in float32), the sender's own record of what it dropped,
 * duplicated and swapped (seeded, test/helpers/random.ts), RFC 3550 Appendix A.1 (sequence
 * extension, MAX_DROPOUT, probation), A.8 (interarrival jitter), RFC 7273 (sample index =
 * unwrapped timestamp − mediaclk offset; CHECKS.md, from memory).
 */
import { describe, expect, it } from 'vitest';
import { RtpStream, type RtpStreamOptions } from '../../server/ingest/rtp/rtp-stream.ts';
import type { RtpSessionDescription } from '../../server/ingest/rtp/sdp.ts';
import type { Block } from '../../shared/types.ts';
import { mulberry32 } from '../helpers/random.ts';
import { RtpTestStream, type RtpTestStreamSpec } from '../helpers/rtp-sender.ts';

const FS = 48000;
const PT_MS = 0.125;

function description(over: Partial<RtpSessionDescription> = {}): RtpSessionDescription {
  return { name: 'unit-a', sessionName: 'test unit', payloadType: 97, encoding: 'L24', sampleRateHz: FS, channels: 8, port: 5004, connectionAddress: '127.0.0.1', multicast: false, sourceFilter: [], packetTimeMs: PT_MS, mediaClockOffset: null, tsRefclk: null, warnings: [], ...over };
}

function spec(over: Partial<RtpTestStreamSpec> = {}): RtpTestStreamSpec {
  return { channels: 8, encoding: 'L24', samplesPerPacket: 6, payloadType: 97, ssrc: 0x5eed0001, firstSequence: 100, firstTimestamp: 1000, ...over };
}

function collect(over: Partial<RtpSessionDescription> = {}, opts: Partial<RtpStreamOptions> = {}) {
  const blocks: Block[] = [];
  const timing: [number, number][] = [];
  const stream = new RtpStream(description(over), { jitterMs: 20, sampleRateHz: FS, startMs: 0, ...opts }, (b) => blocks.push(b), (i, t) => timing.push([i, t]));
  return { stream, blocks, timing };
}

/** Blocks joined, checking that each starts where the previous ended (until a discontinuity). */
function timeline(blocks: Block[]) {
  expect(blocks.length).toBeGreaterThan(0);
  for (let k = 1; k < blocks.length; k++) {
    if (!blocks[k].discontinuity) expect(blocks[k].sampleIndex).toBe(blocks[k - 1].sampleIndex + blocks[k - 1].frames);
  }
  return { start: blocks[0].sampleIndex, frames: blocks.reduce((n, b) => n + b.frames, 0) };
}

/** Sample value of channel c at timeline position `index` (and whether it was a gap). */
function sampleAt(blocks: Block[], index: number, c: number): { x: number; gap: boolean } {
  for (const b of blocks) {
    if (index >= b.sampleIndex && index < b.sampleIndex + b.frames) return { x: b.data[c * b.frames + (index - b.sampleIndex)], gap: b.gap };
  }
  throw new Error(`sample ${index} not in any block`);
}

describe('RtpStream', () => {
  it('delivers an L24 stream bit-exact (samples = sent 24-bit integers / 2^23), in batches or one packet at a time', () => {
    const tx = new RtpTestStream(spec(), 500, 1);
    for (const batched of [true, false]) {
      const { stream, blocks, timing } = collect();
      for (let k = 0; k < 500; k += 16) {
        const send = () => {
          for (let j = k; j < Math.min(k + 16, 500); j++) stream.receive(tx.packet(j), j * PT_MS, '127.0.0.1:4000');
        };
        if (batched) stream.batch(send);
        else send();
        stream.tick(k * PT_MS);
      }
      stream.flush();
      const t = timeline(blocks);
      expect(t).toEqual({ start: 1000, frames: 3000 }); // no mediaclk: sample index = RTP timestamp
      for (let i = 0; i < 3000; i++) for (let c = 0; c < 8; c++) expect(sampleAt(blocks, 1000 + i, c).x).toBe(tx.sample(i, c) / 2 ** 23);
      expect(timing).toEqual(Array.from({ length: 500 }, (_, k) => [1000 + 6 * k, k * PT_MS]));
      expect(stream.status(0)).toMatchObject({ packets: 500, samples: 3000, lost: 0, duplicates: 0, reordered: 0, late: 0, ssrc: 0x5eed0001, remote: '127.0.0.1:4000', nextSampleIndex: 4000 });
      // Batches become blocks of many packets; single packets their own blocks.
      if (batched) expect(blocks.length).toBeLessThan(60);
    }
  });

  it('decodes L16 (/2^15) the same way', () => {
    const tx = new RtpTestStream(spec({ encoding: 'L16', channels: 2, samplesPerPacket: 48 }), 50, 2);
    const { stream, blocks } = collect({ encoding: 'L16', channels: 2, packetTimeMs: 1 });
    stream.batch(() => {
      for (let k = 0; k < 50; k++) stream.receive(tx.packet(k), k);
    });
    stream.flush();
    expect(timeline(blocks).frames).toBe(2400);
    for (let i = 0; i < 2400; i++) expect(sampleAt(blocks, 1000 + i, 1).x).toBe(tx.sample(i, 1) / 2 ** 15);
  });

  it('5 % loss, 2 % duplicates and reordering within the buffer, across sequence and timestamp wraps: an exact-length timeline', () => {
    const N = 4000;
    const n = 6;
    // Sequence wraps 65535 → 0 at packet 1500, timestamp 2^32 − 1 → 0 at packet 2500.
    const tx = new RtpTestStream(spec({ channels: 4, firstSequence: 65536 - 1500, firstTimestamp: 2 ** 32 - n * 2500 }), N, 3);
    const rng = mulberry32(4);
    const sent: number[] = [];
    const dropped = new Set<number>();
    let duplicated = 0;
    let swapped = 0;
    for (let k = 0; k < N; k++) {
      const r = rng();
      const inner = k >= 10 && k < N - 10; // the first two packets confirm the source (A.1 probation); the last ones end the timeline
      if (inner && r < 0.05) dropped.add(k);
      else if (inner && r < 0.07) {
        sent.push(k, k);
        duplicated++;
      } else if (inner && r < 0.12) {
        sent.push(k + 1, k); // k arrives after k + 1: reordered, within the 20 ms buffer
        swapped++;
        k++;
      } else sent.push(k);
    }
    const { stream, blocks, timing } = collect({ channels: 4 });
    let i = 0;
    while (i < sent.length) {
      const size = 1 + Math.floor(rng() * 24);
      stream.batch(() => {
        for (const k of sent.slice(i, i + size)) stream.receive(tx.packet(k), i++ * PT_MS);
      });
      stream.tick(i * PT_MS);
    }
    stream.flush();
    const first = 2 ** 32 - n * 2500;
    // Sum of block lengths = timestamps spanned, first to last packet.
    expect(timeline(blocks)).toEqual({ start: first, frames: N * n });
    for (let k = 0; k < N; k++) {
      for (const j of [0, n - 1]) {
        const s = sampleAt(blocks, first + k * n + j, 3);
        // A lost packet's span is zeros in a gap block (and nothing else is).
        expect(s).toEqual(dropped.has(k) ? { x: 0, gap: true } : { x: tx.sample(k * n + j, 3) / 2 ** 23, gap: false });
      }
    }
    const gapFrames = blocks.filter((b) => b.gap).reduce((s, b) => s + b.frames, 0);
    expect(gapFrames).toBe(dropped.size * n);
    const st = stream.status(i * PT_MS);
    expect(st).toMatchObject({ packets: N - dropped.size, lost: dropped.size, duplicates: duplicated, reordered: swapped, late: 0, gapSamples: dropped.size * n, seqWraps: 1, tsWraps: 1, nextSampleIndex: first + N * n, resyncs: 0 });
    expect(Object.values(st.rejected).every((v) => v === 0)).toBe(true);
    // onTiming: once per placed packet, with its first sample index, unwrapped past 2^32.
    expect(timing.map(([x]) => x).sort((a, b) => a - b)).toEqual(Array.from({ length: N }, (_, k) => k).filter((k) => !dropped.has(k)).map((k) => first + k * n));
  });

  it('a packet arriving after its span was zero-filled is late (and lost); a copy of a delivered one is a duplicate', () => {
    const tx = new RtpTestStream(spec(), 400, 5);
    const { stream, blocks } = collect();
    for (let k = 0; k < 400; k++) {
      if (k === 250) {
        // 50 was held back 25 ms, beyond the 20 ms jitter buffer: its span is zeros already.
        stream.receive(tx.packet(50), k * PT_MS);
        stream.receive(tx.packet(60), k * PT_MS);
      }
      if (k === 50) continue;
      stream.receive(tx.packet(k), k * PT_MS);
      stream.tick(k * PT_MS);
    }
    stream.flush();
    expect(stream.status(60)).toMatchObject({ packets: 399, lost: 1, late: 1, duplicates: 1, gaps: 1, gapSamples: 6 });
    expect(sampleAt(blocks, 1000 + 50 * 6, 0)).toEqual({ x: 0, gap: true });
  });

  it('an SSRC change is a sender restart: counted, and the new timeline starts with discontinuity: true', () => {
    const a = new RtpTestStream(spec({ ssrc: 0xa }), 200, 6);
    const b = new RtpTestStream(spec({ ssrc: 0xb, firstSequence: 40000, firstTimestamp: 3_000_000_000 }), 200, 7);
    const stray = new RtpTestStream(spec({ ssrc: 0xc, firstSequence: 7, firstTimestamp: 77 }), 1, 8);
    const { stream, blocks } = collect();
    let t = 0;
    stream.batch(() => {
      for (let k = 0; k < 200; k++) {
        stream.receive(a.packet(k), (t += PT_MS));
        if (k === 100) stream.receive(stray.packet(0), (t += PT_MS)); // one stray packet never takes over
      }
      for (let k = 0; k < 200; k++) stream.receive(b.packet(k), (t += PT_MS));
    });
    stream.flush();
    const st = stream.status(t);
    expect(st).toMatchObject({ ssrc: 0xb, ssrcChanges: 1, packets: 400, lost: 0, firstSampleIndex: 3_000_000_000, nextSampleIndex: 3_000_000_000 + 1200 });
    expect(st.rejected.probation).toBe(1);
    expect(st.lastRejected?.detail).toBe('SSRC 0x0000000c sent a packet but the current SSRC 0x0000000a went on: not a restart');
    const restart = blocks.findIndex((x) => x.sampleIndex === 3_000_000_000);
    expect(blocks[restart].discontinuity).toBe(true);
    expect(blocks.filter((x) => x.discontinuity)).toHaveLength(1);
    expect(timeline(blocks.slice(0, restart))).toEqual({ start: 1000, frames: 1200 });
    expect(timeline(blocks.slice(restart))).toEqual({ start: 3_000_000_000, frames: 1200 });
    for (let i = 0; i < 1200; i += 7) expect(sampleAt(blocks.slice(restart), 3_000_000_000 + i, 5).x).toBe(b.sample(i, 5) / 2 ** 23);
  });

  it('a second sender interleaved with the current one never takes over', () => {
    const a = new RtpTestStream(spec({ ssrc: 0xa }), 100, 9);
    const c = new RtpTestStream(spec({ ssrc: 0xc, firstTimestamp: 5_000_000 }), 100, 10);
    const { stream, blocks } = collect();
    // From the start: A is confirmed first (two packets in sequence), C never.
    for (let k = 0; k < 100; k++) {
      stream.receive(a.packet(k), k * PT_MS);
      stream.receive(c.packet(k), k * PT_MS);
    }
    stream.flush();
    expect(stream.status(0)).toMatchObject({ ssrc: 0xa, ssrcChanges: 0, packets: 100 });
    expect(stream.status(0).rejected.probation).toBe(100);
    expect(timeline(blocks)).toEqual({ start: 1000, frames: 600 });
  });

  it('RFC 7273: sample index = (timestamp − mediaclk offset) mod 2^32 at the first packet, unwrapped after', () => {
    const O = 1_000_000;
    const run = (firstTimestamp: number, offset: number | null) => {
      const tx = new RtpTestStream(spec({ firstTimestamp }), 200, 11);
      const { stream, blocks } = collect({ mediaClockOffset: offset });
      for (let k = 0; k < 200; k++) stream.receive(tx.packet(k), k * PT_MS);
      stream.flush();
      return { first: blocks[0].sampleIndex, t: timeline(blocks), st: stream.status(0) };
    };
    // Timestamps wrap at packet 100; the index does not: 2^32 − 600 − O + 6k.
    const wrapsTs = run(2 ** 32 - 600, O);
    expect(wrapsTs.first).toBe(2 ** 32 - 600 - O);
    expect(wrapsTs.st).toMatchObject({ tsWraps: 1, nextSampleIndex: 2 ** 32 - 600 - O + 1200, mediaClockOffset: O });
    // The first timestamp is below the offset: its index is taken mod 2^32 and then passes 2^32 unwrapped.
    const wrapsIndex = run(O - 600, O);
    expect(wrapsIndex.first).toBe(2 ** 32 - 600);
    expect(wrapsIndex.st).toMatchObject({ tsWraps: 0, nextSampleIndex: 2 ** 32 + 600 });
    // Without mediaclk the index is the timestamp itself.
    expect(run(O - 600, null).first).toBe(O - 600);
    // Two units locked to one media clock, different offsets: the same instant has the same index.
    const s = 5_000_000;
    expect(run((s + 1000) % 2 ** 32, 1000).first).toBe(s);
    expect(run((s + 4_123_456_789) % 2 ** 32, 4_123_456_789).first).toBe(s);
  });

  it('a jump beyond maxGapSeconds (10 s) resyncs once confirmed, without zeros; zero-fill is bounded by the wall clock', () => {
    const n = 48; // 1 ms packets
    const tx = new RtpTestStream(spec({ samplesPerPacket: n, channels: 2 }), 4000, 12);
    const { stream, blocks } = collect({ channels: 2, packetTimeMs: 1 });
    const send = (k: number, ts: number, at: number) => stream.receive(tx.packet(k, { timestamp: ts }), at);
    let k = 0;
    for (; k < 100; k++) {
      send(k, 1000 + k * n, k);
      stream.tick(k);
    }
    // One packet 5 s ahead (within 10 s) arriving 1 ms after its predecessor: no 5 s of zeros.
    send(k, 1000 + k * n + 5 * FS, k);
    expect(stream.status(k).rejected.ahead_of_clock).toBe(1);
    expect(stream.status(k).lastRejected?.reason).toBe('ahead_of_clock');
    // The sender pauses for 2 s (the clock goes on): 2 s of zeros, exactly.
    for (k = 101; k < 200; k++) {
      send(k, 1000 + (k + 2000) * n, k + 2000);
      stream.tick(k + 2000);
    }
    // The sender jumps 11 s on its clock, 1 ms later on ours: resync, confirmed by the next packet.
    for (k = 200; k < 300; k++) {
      send(k, 1000 + (k + 2000) * n + 11 * FS, k + 2000);
      stream.tick(k + 2000);
    }
    stream.flush();
    const st = stream.status(3000);
    expect(st).toMatchObject({ resyncs: 1, gaps: 1, gapSamples: 2001 * n, packets: 299, lost: 1 });
    const jump = blocks.findIndex((b) => b.discontinuity);
    expect(blocks[jump].sampleIndex).toBe(1000 + 2200 * n + 11 * FS);
    expect(timeline(blocks.slice(0, jump))).toEqual({ start: 1000, frames: 2200 * n });
    expect(timeline(blocks.slice(jump)).frames).toBe(100 * n);
    // The packet 5 s ahead left nothing on the timeline: the gap is the pause only.
    expect(blocks.filter((b) => b.gap).reduce((s, b) => s + b.frames, 0)).toBe(2001 * n);
  });

  it('RFC 3550 A.1: one packet jumping by MAX_DROPOUT or more is dropped; two in sequence restart the count', () => {
    const tx = new RtpTestStream(spec(), 300, 13);
    const { stream, blocks } = collect();
    for (let k = 0; k < 300; k++) {
      let seq = tx.sequence(k);
      if (k === 100) seq = (seq + 5000) & 0xffff; // a corrupt sequence number
      if (k >= 200) seq = (seq + 30000) & 0xffff; // the sender's count restarts at 200
      stream.receive(tx.packet(k, { sequence: seq }), k * PT_MS);
      stream.tick(k * PT_MS);
    }
    stream.flush();
    const st = stream.status(0);
    // Packets 100 and 200 are refused (their spans zero-filled, one packet each); the rest is data.
    expect(st).toMatchObject({ packets: 298, lost: 2, gapSamples: 12, seqRestarts: 1 });
    expect(st.rejected.sequence_jump).toBe(2);
    expect(timeline(blocks)).toEqual({ start: 1000, frames: 1800 });
  });

  it('RFC 3550 A.8 interarrival jitter: 0 for even arrivals, → 2a for arrivals alternating ±a', () => {
    const tx = new RtpTestStream(spec(), 600, 14);
    const even = collect();
    const odd = collect();
    const a = 0.04; // ms
    for (let k = 0; k < 600; k++) {
      even.stream.receive(tx.packet(k), 10 + k * PT_MS);
      odd.stream.receive(tx.packet(k), 10 + k * PT_MS + (k % 2 === 0 ? a : -a));
    }
    expect(even.stream.status(0).jitterMs).toBeCloseTo(0, 12);
    // J_n = 2a·(1 − (15/16)^(n−1)) from J += (|D| − J)/16 with |D| = 2a: (15/16)^598 ≈ 1.8e-17.
    expect(odd.stream.status(0).jitterMs).toBeCloseTo(2 * a, 9);
  });

  it('counts refused packets by reason with the last one in plain words', () => {
    const tx = new RtpTestStream(spec(), 4, 15);
    const { stream } = collect();
    stream.receive(tx.packet(0).subarray(0, 11), 0);
    const v1 = tx.packet(1);
    v1[0] = (v1[0] & 0x3f) | 0x40;
    stream.receive(v1, 0);
    stream.receive(tx.packet(2, { payloadType: 96 }), 0);
    stream.receive(tx.packet(3).subarray(0, 12 + 47), 0);
    stream.refuse('queue_full', 3, 'the RTP receive queue was full', 0);
    const st = stream.status(0);
    expect(st.rejected).toMatchObject({ truncated: 1, bad_version: 1, wrong_payload_type: 1, bad_payload_length: 1, queue_full: 3 });
    stream.receive(tx.packet(3).subarray(0, 12 + 47), 0);
    expect(stream.status(0).lastRejected).toEqual({ reason: 'bad_payload_length', detail: 'payload of 47 bytes is not a whole, non-zero number of 24-byte sample frames', atS: 0 });
    expect(st.ssrc).toBeNull();
  });

  it('holds at most the stated bound of packets behind a hole (min(1024, max(16, 2·jitterMs/ptime)))', () => {
    expect(RtpStream.bufferPackets(20, 0.125)).toBe(320);
    expect(RtpStream.bufferPackets(1000, 0.125)).toBe(1024);
    expect(RtpStream.bufferPackets(1, null)).toBe(16);
    const tx = new RtpTestStream(spec({ channels: 1 }), 3000, 16);
    const { stream, blocks } = collect({ channels: 1 }, { jitterMs: 1000 });
    let most = 0;
    for (let k = 0; k < 3000; k++) {
      if (k !== 20) stream.receive(tx.packet(k), k * PT_MS); // no tick: only the bound releases
      most = Math.max(most, stream.status(0).bufferedPackets);
    }
    expect(most).toBe(1024);
    stream.flush();
    expect(timeline(blocks)).toEqual({ start: 1000, frames: 18000 });
    expect(stream.status(0)).toMatchObject({ lost: 1, gapSamples: 6 });
  });

  it('refuses a stream whose SDP rate is not the input rate at construction', () => {
    expect(() => new RtpStream(description({ sampleRateHz: 44100 }), { jitterMs: 20, sampleRateHz: 48000 }, () => {})).toThrow(
      'RTP session "unit-a" is 44100 Hz (its SDP), the input is 48000 Hz (input.sampleRateHz): they must be equal',
    );
    expect(() => new RtpStream(description(), { jitterMs: 5000, sampleRateHz: 48000 }, () => {})).toThrow(RangeError);
  });
});
