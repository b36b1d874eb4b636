/**
 * A test sender of RTP audio (L16/L24): packets built from the layout of RFC 3550 §5.1 (written
 * out here independently of server/ingest/rtp/packet.ts), samples from a seeded generator so that
 * every received sample can be checked against the integer that was sent, and a UDP socket that
 * only ever sends to 127.0.0.1.
 */
import { createSocket, type Socket } from 'node:dgram';
import { mulberry32 } from './random.ts';

export interface RtpHeaderSpec {
  payloadType: number;
  sequence: number;
  timestamp: number;
  ssrc: number;
  marker?: boolean;
  /** CSRC identifiers (0–15 of them). */
  csrcs?: number[];
  /** Header extension: this many 32-bit words of body (plus its 4-byte head). */
  extensionWords?: number;
  /** Padding bytes appended (1–255; the last one holds the count). */
  padding?: number;
}

/** An RTP packet: version 2, the header fields of `h`, then the payload (RFC 3550 §5.1). */
export function encodeRtpPacket(h: RtpHeaderSpec, payload: Uint8Array): Uint8Array {
  const csrcs = h.csrcs ?? [];
  const ext = h.extensionWords === undefined ? 0 : 4 + 4 * h.extensionWords;
  const pad = h.padding ?? 0;
  const head = 12 + 4 * csrcs.length + ext;
  const out = new Uint8Array(head + payload.length + pad);
  const v = new DataView(out.buffer);
  out[0] = (2 << 6) | (pad > 0 ? 0x20 : 0) | (ext > 0 ? 0x10 : 0) | csrcs.length;
  out[1] = (h.marker ? 0x80 : 0) | h.payloadType;
  v.setUint16(2, h.sequence & 0xffff);
  v.setUint32(4, h.timestamp >>> 0);
  v.setUint32(8, h.ssrc >>> 0);
  csrcs.forEach((c, i) => v.setUint32(12 + 4 * i, c >>> 0));
  if (ext > 0) {
    const at = 12 + 4 * csrcs.length;
    v.setUint16(at, 0xbede); // a profile-defined value (RFC 8285's one-byte form)
    v.setUint16(at + 2, h.extensionWords!);
    for (let i = at + 4; i < head; i++) out[i] = 0xaa; // body bytes a parser must skip
  }
  out.set(payload, head);
  if (pad > 0) out[out.length - 1] = pad;
  return out;
}

/** Interleaved integer samples as big-endian two's complement, 2 (L16) or 3 (L24) bytes each. */
export function encodePcm(ints: ArrayLike<number>, encoding: 'L16' | 'L24'): Uint8Array {
  const w = encoding === 'L24' ? 3 : 2;
  const out = new Uint8Array(ints.length * w);
  for (let i = 0; i < ints.length; i++) {
    const x = ints[i];
    if (w === 3) {
      out[3 * i] = (x >> 16) & 0xff;
      out[3 * i + 1] = (x >> 8) & 0xff;
      out[3 * i + 2] = x & 0xff;
    } else {
      out[2 * i] = (x >> 8) & 0xff;
      out[2 * i + 1] = x & 0xff;
    }
  }
  return out;
}

export interface RtpTestStreamSpec {
  channels: number;
  encoding: 'L16' | 'L24';
  samplesPerPacket: number;
  payloadType: number;
  ssrc: number;
  firstSequence: number;
  firstTimestamp: number;
}

/**
 * A stream of `packets` packets whose samples are seeded random integers over the encoding's
 * full range: packet k has sequence firstSequence + k (mod 2¹⁶) and timestamp firstTimestamp +
 * k·samplesPerPacket (mod 2³²).
 */
export class RtpTestStream {
  /** Sent integers, interleaved: frame i (counted from the first packet), channel c at i·channels + c. */
  readonly ints: Int32Array;
  readonly spec: RtpTestStreamSpec;
  readonly packets: number;
  constructor(spec: RtpTestStreamSpec, packets: number, seed: number) {
    this.spec = spec;
    this.packets = packets;
    const rng = mulberry32(seed);
    const bits = spec.encoding === 'L24' ? 24 : 16;
    this.ints = new Int32Array(packets * spec.samplesPerPacket * spec.channels);
    for (let i = 0; i < this.ints.length; i++) this.ints[i] = Math.floor(rng() * 2 ** bits) - 2 ** (bits - 1);
  }
  sequence(k: number): number {
    return (this.spec.firstSequence + k) & 0xffff;
  }
  timestamp(k: number): number {
    return (this.spec.firstTimestamp + k * this.spec.samplesPerPacket) >>> 0;
  }
  /** The integer sent for frame i (from the first packet's first frame), channel c. */
  sample(i: number, c: number): number {
    return this.ints[i * this.spec.channels + c];
  }
  packet(k: number, extra: Partial<RtpHeaderSpec> = {}): Uint8Array {
    const s = this.spec;
    const n = s.samplesPerPacket * s.channels;
    return encodeRtpPacket({ payloadType: s.payloadType, sequence: this.sequence(k), timestamp: this.timestamp(k), ssrc: s.ssrc, ...extra }, encodePcm(this.ints.subarray(k * n, (k + 1) * n), s.encoding));
  }
}

/** A UDP socket that sends to 127.0.0.1 only. */
export class LoopbackSender {
  readonly #socket: Socket;
  private constructor(socket: Socket) {
    this.#socket = socket;
  }
  static async open(): Promise<LoopbackSender> {
    const s = createSocket('udp4');
    await new Promise<void>((r) => s.bind(0, '127.0.0.1', () => r()));
    return new LoopbackSender(s);
  }
  get port(): number {
    return this.#socket.address().port;
  }
  send(bytes: Uint8Array, port: number): Promise<void> {
    return new Promise<void>((resolve, reject) => this.#socket.send(bytes, port, '127.0.0.1', (e) => (e ? reject(e) : resolve())));
  }
  close(): void {
    this.#socket.close();
  }
}
