/**
 * RTP data packets (RFC 3550 §5.1): the fixed header read into a reusable object, the header
 * extension (§5.3.1) skipped, padding (§5.1, P bit) removed, and the payload checked against the
 * session's format and decoded from L16 / L24 (RFC 3551 §4.5.11, RFC 3190 §4: big-endian two's
 * complement, channels interleaved within each sample frame) into planar float32 full scale.
 *
 * Nothing here allocates on a valid packet: {@link parseRtpPacket} fills the caller's object and
 * returns null, and only a refusal builds its {@link RtpProblem} (a reason and a detail in words).
 */

/** Reasons a packet is refused by its header or payload. */
export const RTP_PACKET_REJECT_REASONS = ['truncated', 'bad_version', 'bad_padding', 'wrong_payload_type', 'bad_payload_length'] as const;
export type RtpPacketRejectReason = (typeof RTP_PACKET_REJECT_REASONS)[number];

export interface RtpProblem {
  reason: RtpPacketRejectReason;
  /** What was wrong, in plain words. */
  detail: string;
}

/** The fields of one packet; filled in place by {@link parseRtpPacket}. */
export interface RtpPacket {
  version: number;
  padding: boolean;
  extension: boolean;
  csrcCount: number;
  marker: boolean;
  payloadType: number;
  /** 16-bit sequence number. */
  sequence: number;
  /** 32-bit timestamp, unsigned. */
  timestamp: number;
  /** 32-bit synchronisation source, unsigned. */
  ssrc: number;
  /** First payload byte (after CSRCs and the header extension). */
  payloadOffset: number;
  /** Payload bytes, padding removed. */
  payloadLength: number;
}

export const RTP_HEADER_BYTES = 12;

export function createRtpPacket(): RtpPacket {
  return { version: 0, padding: false, extension: false, csrcCount: 0, marker: false, payloadType: 0, sequence: 0, timestamp: 0, ssrc: 0, payloadOffset: 0, payloadLength: 0 };
}

/**
 * Read a packet's header into `out`. The header checks of RFC 3550 Appendix A.1: version 2, the
 * CSRC list and the header extension inside the packet, a padding count of at least 1 (it counts
 * itself) that leaves the header whole.
 * @returns null when the header is valid, else what is wrong (`out` is then partly filled)
 */
export function parseRtpPacket(bytes: Uint8Array, out: RtpPacket): RtpProblem | null {
  const length = bytes.length;
  if (length < RTP_HEADER_BYTES) return { reason: 'truncated', detail: `${length} bytes, shorter than the 12-byte RTP header` };
  const b0 = bytes[0];
  const b1 = bytes[1];
  out.version = b0 >>> 6;
  if (out.version !== 2) return { reason: 'bad_version', detail: `RTP version ${out.version}, not 2` };
  out.padding = (b0 & 0x20) !== 0;
  out.extension = (b0 & 0x10) !== 0;
  out.csrcCount = b0 & 0x0f;
  out.marker = (b1 & 0x80) !== 0;
  out.payloadType = b1 & 0x7f;
  out.sequence = (bytes[2] << 8) | bytes[3];
  out.timestamp = ((bytes[4] << 24) | (bytes[5] << 16) | (bytes[6] << 8) | bytes[7]) >>> 0;
  out.ssrc = ((bytes[8] << 24) | (bytes[9] << 16) | (bytes[10] << 8) | bytes[11]) >>> 0;
  let offset = RTP_HEADER_BYTES + 4 * out.csrcCount;
  if (offset > length) return { reason: 'truncated', detail: `${length} bytes cannot hold the header with ${out.csrcCount} CSRC identifiers (${offset} bytes)` };
  if (out.extension) {
    // §5.3.1: 16 bits defined by profile, 16 bits length in 32-bit words (excluding these 4 bytes).
    if (offset + 4 > length) return { reason: 'truncated', detail: `${length} bytes end inside the header extension's first word` };
    const words = (bytes[offset + 2] << 8) | bytes[offset + 3];
    offset += 4 + 4 * words;
    if (offset > length) return { reason: 'truncated', detail: `header extension of ${words} words runs past the packet's ${length} bytes` };
  }
  let end = length;
  if (out.padding) {
    const pad = bytes[length - 1];
    if (pad === 0) return { reason: 'bad_padding', detail: 'P bit set but the padding count (last byte) is 0' };
    if (offset + pad > length) return { reason: 'bad_padding', detail: `padding count ${pad} is more than the ${length - offset} bytes after the header` };
    end -= pad;
  }
  out.payloadOffset = offset;
  out.payloadLength = end - offset;
  return null;
}

/**
 * Check a parsed packet against the session's format.
 * @param frameBytes bytes of one sample frame: channels × (2 for L16, 3 for L24)
 */
export function checkRtpPayload(p: RtpPacket, payloadType: number, frameBytes: number): RtpProblem | null {
  if (p.payloadType !== payloadType) return { reason: 'wrong_payload_type', detail: `payload type ${p.payloadType}, the SDP's is ${payloadType}` };
  if (p.payloadLength === 0 || p.payloadLength % frameBytes !== 0) {
    return { reason: 'bad_payload_length', detail: `payload of ${p.payloadLength} bytes is not a whole, non-zero number of ${frameBytes}-byte sample frames` };
  }
  return null;
}

const L16_SCALE = 1 / 32768; // 2^-15
const L24_SCALE = 1 / 8388608; // 2^-23

/**
 * Decode an interleaved big-endian payload into planar float32 (full scale ±1): frame i of channel
 * c goes to out[c·stride + at + i]. Values are exact (a 24-bit integer divided by 2²³ is a float32).
 * @param bytes the packet; the payload starts at `offset`
 * @param frames sample frames in the payload
 * @param bytesPerSample 2 (L16) or 3 (L24)
 * @param out planar destination, at least channels·stride long; must not alias `bytes`
 * @param stride samples per channel in `out`
 * @param at first frame position within each channel of `out`
 */
export function decodeLinearPcm(bytes: Uint8Array, offset: number, frames: number, channels: number, bytesPerSample: 2 | 3, out: Float32Array, stride: number, at: number): void {
  let p = offset;
  if (bytesPerSample === 3) {
    for (let i = 0; i < frames; i++) {
      let o = at + i;
      for (let c = 0; c < channels; c++) {
        // Shift into the top 24 bits of an int32 and back: sign extension of the 24-bit value.
        const v = ((bytes[p] << 24) | (bytes[p + 1] << 16) | (bytes[p + 2] << 8)) >> 8;
        out[o] = v * L24_SCALE;
        o += stride;
        p += 3;
      }
    }
  } else {
    for (let i = 0; i < frames; i++) {
      let o = at + i;
      for (let c = 0; c < channels; c++) {
        const v = ((bytes[p] << 24) | (bytes[p + 1] << 16)) >> 16;
        out[o] = v * L16_SCALE;
        o += stride;
        p += 2;
      }
    }
  }
}
