/**
 * RTP sequence-number extension of one source, RFC 3550 Appendix A.1 (update_seq): the 16-bit
 * number extended across wraps, a jump of MAX_DROPOUT or more refused unless the next packet in
 * sequence follows it (then the count restarts), packets fewer than `maxMisorder` behind the highest
 * taken as reordered or duplicates.
 *
 * One departure from A.1, for the timeline's loss counts: when the count restarts, A.1 resets the
 * extended number; here it continues from the highest by the number of packets the timestamp says
 * were skipped (at least 1: the refused packet), so the extended numbers stay monotonic and a hole
 * before the restart counts the packets its samples fill. Probation of a new source is the
 * stream's business (rtp-stream.ts).
 */

/** RFC 3550 Appendix A.1 constants. */
export const MAX_DROPOUT = 3000;
export const MAX_MISORDER = 100;
export const MIN_SEQUENTIAL = 2;
const SEQ_MOD = 0x1_0000;

export class RtpSequence {
  /** Wraps of the 16-bit number (A.1 `cycles` / 2¹⁶). */
  wraps = 0;
  /** Count restarts after a confirmed jump (A.1 `bad_seq`). */
  restarts = 0;
  readonly #maxMisorder: number;
  #maxSeq = 0;
  #extMax = 0;
  #badSeq = -1;

  /** @param maxMisorder packets behind the highest from which on a packet is a jump, not reordered (A.1: 100) */
  constructor(maxMisorder = MAX_MISORDER) {
    if (!(maxMisorder >= 1 && maxMisorder < SEQ_MOD - MAX_DROPOUT)) throw new RangeError(`maxMisorder ${maxMisorder} not in 1–${SEQ_MOD - MAX_DROPOUT - 1}`);
    this.#maxMisorder = maxMisorder;
  }

  /** Highest 16-bit number so far. */
  get maxSeq(): number {
    return this.#maxSeq;
  }

  /** The number that restarts the count after a refused jump, or −1. */
  get badSeq(): number {
    return this.#badSeq;
  }

  /** A source's first packet (A.1 init_seq): its extended number is its 16-bit number. */
  init(seq: number): number {
    this.#maxSeq = seq;
    this.#extMax = seq;
    this.#badSeq = -1;
    return seq;
  }

  /**
   * A.1 update_seq for a later packet.
   * @param packetsByTimestamp packets between the highest and this one by their timestamps (used on a restart only)
   * @returns the packet's extended sequence number, or −1 when it is refused as a jump
   */
  update(seq: number, packetsByTimestamp: number): number {
    const udelta = (seq - this.#maxSeq) & 0xffff;
    if (udelta < MAX_DROPOUT) {
      // In order, with a permissible gap (or the highest again: a duplicate).
      const ext = this.#extMax + udelta;
      if (udelta > 0) {
        if (seq < this.#maxSeq) this.wraps++;
        this.#maxSeq = seq;
        this.#extMax = ext;
      }
      return ext;
    }
    if (udelta <= SEQ_MOD - this.#maxMisorder) {
      // A very large jump: refused, unless this is the packet after the previous refused one.
      if (seq !== this.#badSeq) {
        this.#badSeq = (seq + 1) & 0xffff;
        return -1;
      }
      this.restarts++;
      const ext = this.#extMax + Math.min(SEQ_MOD - 1, Math.max(1, Math.round(packetsByTimestamp)));
      this.#maxSeq = seq;
      this.#extMax = ext;
      this.#badSeq = -1;
      return ext;
    }
    return this.#extMax - (SEQ_MOD - udelta); // reordered or duplicate, fewer than maxMisorder behind
  }
}
