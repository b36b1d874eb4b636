/**
 * RTP packet header and L16/L24 payloads (server/ingest/rtp/packet.ts) against the byte layout of
 * RFC 3550 §5.1 (fixed header), §5.3.1 (header extension) and the P bit, and the sample encodings of
 * RFC 3551 §4.5.11 (L16) and RFC 3190 §4 (L24): big-endian two's complement, channels interleaved.
 */
import { describe, expect, it } from 'vitest';
import { checkRtpPayload, createRtpPacket, decodeLinearPcm, parseRtpPacket } from '../../server/ingest/rtp/packet.ts';
import { mulberry32 } from '../helpers/random.ts';
import { encodeRtpPacket } from '../helpers/rtp-sender.ts';

const parse = (bytes: number[] | Uint8Array) => {
  const p = createRtpPacket();
  const problem = parseRtpPacket(Uint8Array.from(bytes), p);
  return { p, problem };
};

describe('parseRtpPacket', () => {
  it('reads the fixed header as laid out in RFC 3550 §5.1', () => {
    // V=2 P=0 X=0 CC=0 | M=1 PT=97 | sequence 0x1234 | timestamp 0xDEADBEEF | SSRC 0x01020304 | 2 payload bytes
    const { p, problem } = parse([0x80, 0xe1, 0x12, 0x34, 0xde, 0xad, 0xbe, 0xef, 0x01, 0x02, 0x03, 0x04, 0xaa, 0xbb]);
    expect(problem).toBeNull();
    expect(p).toEqual({ version: 2, padding: false, extension: false, csrcCount: 0, marker: true, payloadType: 97, sequence: 0x1234, timestamp: 0xdeadbeef, ssrc: 0x01020304, payloadOffset: 12, payloadLength: 2 });
  });

  it('skips CSRCs and the header extension and removes padding', () => {
    // CC=2 (8 bytes), X with a 3-word body (4 + 12 bytes), 6 payload bytes, 4 padding bytes.
    const bytes = [0xb2, 0x60, 0, 1, 0, 0, 0, 5, 0, 0, 0, 9, 1, 1, 1, 1, 2, 2, 2, 2, 0xbe, 0xde, 0, 3, 9, 9, 9, 9, 9, 9, 9, 9, 9, 9, 9, 9, 10, 11, 12, 13, 14, 15, 0, 0, 0, 4];
    const { p, problem } = parse(bytes);
    expect(problem).toBeNull();
    expect(p).toMatchObject({ padding: true, extension: true, csrcCount: 2, payloadType: 96, sequence: 1, timestamp: 5, ssrc: 9, payloadOffset: 36, payloadLength: 6 });
  });

  it('round-trips 500 random headers built by the test sender', () => {
    const rng = mulberry32(11);
    const int = (n: number) => Math.floor(rng() * n);
    for (let k = 0; k < 500; k++) {
      const csrcs = Array.from({ length: int(16) }, () => int(2 ** 32));
      const h = { payloadType: int(128), sequence: int(65536), timestamp: int(2 ** 32), ssrc: int(2 ** 32), marker: rng() < 0.5, csrcs, extensionWords: rng() < 0.5 ? int(5) : undefined, padding: rng() < 0.5 ? 1 + int(255) : undefined };
      const payload = Uint8Array.from({ length: int(40) }, () => int(256));
      const bytes = encodeRtpPacket(h, payload);
      const p = createRtpPacket();
      expect(parseRtpPacket(bytes, p)).toBeNull();
      expect(p).toMatchObject({ version: 2, payloadType: h.payloadType, sequence: h.sequence, timestamp: h.timestamp, ssrc: h.ssrc, marker: h.marker, csrcCount: csrcs.length, payloadLength: payload.length });
      expect(bytes.subarray(p.payloadOffset, p.payloadOffset + p.payloadLength)).toEqual(payload);
    }
  });

  it('refuses what A.1 calls invalid headers, by reason', () => {
    const head = [0x80, 0x60, 0, 1, 0, 0, 0, 0, 0, 0, 0, 1];
    expect(parse(head.slice(0, 11)).problem).toEqual({ reason: 'truncated', detail: '11 bytes, shorter than the 12-byte RTP header' });
    expect(parse([0x40, ...head.slice(1)]).problem).toEqual({ reason: 'bad_version', detail: 'RTP version 1, not 2' });
    expect(parse([0x8f, ...head.slice(1), 0, 0, 0, 0]).problem?.reason).toBe('truncated'); // CC=15 in 16 bytes
    expect(parse([0x90, ...head.slice(1), 0xbe, 0xde]).problem?.detail).toBe("14 bytes end inside the header extension's first word");
    expect(parse([0x90, ...head.slice(1), 0xbe, 0xde, 0, 2, 1, 2, 3, 4]).problem?.detail).toBe("header extension of 2 words runs past the packet's 20 bytes");
    expect(parse([0xa0, ...head.slice(1), 1, 2, 0]).problem).toEqual({ reason: 'bad_padding', detail: 'P bit set but the padding count (last byte) is 0' });
    expect(parse([0xa0, ...head.slice(1), 1, 2, 4]).problem).toEqual({ reason: 'bad_padding', detail: 'padding count 4 is more than the 3 bytes after the header' });
    // Padding that takes the whole payload leaves an empty one: valid header, refused by the payload check.
    const { p, problem } = parse([0xa0, ...head.slice(1), 1, 2, 3]);
    expect(problem).toBeNull();
    expect(checkRtpPayload(p, 96, 6)).toEqual({ reason: 'bad_payload_length', detail: 'payload of 0 bytes is not a whole, non-zero number of 6-byte sample frames' });
  });
});

describe('checkRtpPayload', () => {
  it('refuses another payload type and a payload that is not whole sample frames', () => {
    const p = createRtpPacket();
    parseRtpPacket(encodeRtpPacket({ payloadType: 97, sequence: 0, timestamp: 0, ssrc: 1 }, new Uint8Array(48)), p);
    expect(checkRtpPayload(p, 97, 24)).toBeNull(); // 2 frames of 8 channels × 3 bytes
    expect(checkRtpPayload(p, 96, 24)).toEqual({ reason: 'wrong_payload_type', detail: "payload type 97, the SDP's is 96" });
    expect(checkRtpPayload(p, 97, 18)?.reason).toBe('bad_payload_length'); // 48 is not a multiple of 18
  });
});

describe('decodeLinearPcm', () => {
  it('decodes L24 big-endian (0x123456 is sent as 12 34 56) and L16 to full scale, exactly', () => {
    const out = new Float32Array(4);
    decodeLinearPcm(Uint8Array.from([0x12, 0x34, 0x56, 0x80, 0, 0, 0x7f, 0xff, 0xff, 0xff, 0xff, 0xff]), 0, 4, 1, 3, out, 4, 0);
    expect([...out]).toEqual([0x123456 / 2 ** 23, -1, (2 ** 23 - 1) / 2 ** 23, -1 / 2 ** 23]);
    decodeLinearPcm(Uint8Array.from([0x80, 0, 0x7f, 0xff, 0, 1, 0xff, 0xff]), 0, 4, 1, 2, out, 4, 0);
    expect([...out]).toEqual([-1, 32767 / 32768, 1 / 32768, -1 / 32768]);
  });

  it('de-interleaves channels into planar rows at an offset', () => {
    // 2 channels × 3 frames, L16: frame i channel c = 10·i + c.
    const bytes = Uint8Array.from([0xff, 0, 0, 0, 0, 1, 0, 10, 0, 11, 0, 20, 0, 21]); // one byte of junk first
    const out = new Float32Array(2 * 5);
    decodeLinearPcm(bytes, 2, 3, 2, 2, out, 5, 1);
    expect([...out].map((x) => x * 32768)).toEqual([0, 0, 10, 20, 0, 0, 1, 11, 21, 0]);
  });
});
