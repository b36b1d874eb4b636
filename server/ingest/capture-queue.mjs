// The shared queue between the capture thread (capture-reader.mjs, the producer) and the service's
// thread (capture.ts, the consumer): captured PCM in records, defined once for both threads (plain
// JavaScript, so the capture thread needs no TypeScript loader). Policy and layout:
//
// - Records, 8-byte aligned, in a byte ring (SharedArrayBuffer): u32 size (bytes with header and
//   padding; 0 = "skip to the ring's end"), u32 run (which start of the command read it), f64
//   sampleIndex (sample frames read before it, over every run), u32 frames, u32 reserved, then
//   frames × frameBytes of the command's own bytes (interleaved little-endian PCM).
// - HEAD and TAIL are byte counters that only grow (BigInt64, so they never wrap back onto an old
//   value); a position in the ring is counter mod capacity. HEAD is written only by the producer.
// - When a new record does not fit, the producer drops the OLDEST records (moves TAIL itself with a
//   compare-and-swap) and counts them: the capture command is never made to wait. The consumer
//   reads a record in place, converts it, and only then claims it with a compare-and-swap on TAIL;
//   if the producer dropped it meanwhile the swap fails and the converted copy is thrown away.
//   TAIL never returns to an old value, so a swap that succeeds proves nobody touched the record.
// - The timeline stays exact without a drop count: every record carries its sample index, and the
//   consumer fills the distance from what it delivered last to the next record it finds with zeros.

/** BigInt64 control slots (their own SharedArrayBuffer). */
export const CTRL_HEAD = 0;
export const CTRL_TAIL = 1;
/** Sample frames read from the command, every run (the next record's sampleIndex). */
export const CTRL_FRAMES_READ = 2;
/** Sample frames in records the producer dropped because the queue was full. */
export const CTRL_DROPPED_FRAMES = 3;
export const CTRL_DROPPED_RECORDS = 4;
export const CTRL_BYTES_READ = 5;
/** Bytes of a partial sample frame left when a run ended (thrown away: never split a frame). */
export const CTRL_BYTES_DISCARDED = 6;
/** Date.now() of the run's latest read, 0 before the first read of a run. */
export const CTRL_LAST_DATA_MS = 7;
/** Starts of the command so far (a replacement capture thread continues the count). */
export const CTRL_STARTS = 8;
export const CTRL_SLOTS = 9;

/** Int32 signal slots (their own SharedArrayBuffer). */
export const SIG_SLEEPING = 0;
export const SIG_BELL = 1;
/** 1 while a status message from the capture thread is on its way (at most one in flight). */
export const SIG_STATUS_PENDING = 2;
export const SIG_SLOTS = 4;

export const RECORD_HEADER = 24;
/** Sample frames in one record at most (one block each). */
export const MAX_RECORD_FRAMES = 1024;
/** Largest ring, bytes; a longer queueMs at a high channel count and rate is cut to it. */
export const MAX_QUEUE_BYTES = 256 * 1024 * 1024;

/** Up to a multiple of 8 (arithmetic, not bitwise: sizes before the bound may pass 2^31). */
const align8 = (n) => Math.ceil(n / 8) * 8;

/**
 * Ring size for `queueFrames` sample frames of `frameBytes` each: the audio, a header per record,
 * and two records of slack for the skip at the ring's end; at least four records, at most
 * MAX_QUEUE_BYTES. Records hold min(1024, queueFrames / 4) frames.
 */
export function queueSize(frameBytes, queueFrames) {
  const recordFrames = Math.max(1, Math.min(MAX_RECORD_FRAMES, Math.floor(queueFrames / 4)));
  const maxRecordBytes = align8(RECORD_HEADER + recordFrames * frameBytes);
  const records = Math.ceil(queueFrames / recordFrames);
  let capacityBytes = align8(queueFrames * frameBytes + records * (RECORD_HEADER + 8) + 2 * maxRecordBytes);
  capacityBytes = Math.min(MAX_QUEUE_BYTES, Math.max(capacityBytes, 4 * maxRecordBytes));
  // Audio the ring holds when every record is full-length.
  const perFrame = frameBytes + (RECORD_HEADER + 8) / recordFrames;
  const capacityFrames = Math.min(queueFrames, Math.floor((capacityBytes - 2 * maxRecordBytes) / perFrame));
  return { capacityBytes, recordFrames, maxRecordBytes, capacityFrames };
}

export class CaptureQueue {
  /**
   * @param {SharedArrayBuffer} ring byte ring, length a multiple of 8
   * @param {SharedArrayBuffer} ctrl CTRL_SLOTS BigInt64 words
   * @param {number} frameBytes bytes of one sample frame (channels × bytes per sample)
   */
  constructor(ring, ctrl, frameBytes) {
    this.bytes = new Uint8Array(ring);
    this.view = new DataView(ring);
    this.ctrl = new BigInt64Array(ctrl);
    this.cap = ring.byteLength;
    this.frameBytes = frameBytes;
    /** Producer: where the reserved record goes and the head after it. */
    this.at = 0;
    this.size = 0;
    this.nextHead = 0;
  }

  /** Bytes the ring holds now (records, headers, and a skip at the end). */
  queuedBytes() {
    return Number(Atomics.load(this.ctrl, CTRL_HEAD) - Atomics.load(this.ctrl, CTRL_TAIL));
  }

  // ---- producer (capture thread) ----

  /**
   * Room for a record of `payloadBytes`, dropping the oldest records while it does not fit (never
   * waits). Returns the byte offset of the record's header; write the payload after RECORD_HEADER,
   * then publish(). The record must be at most a quarter of the ring.
   */
  reserve(payloadBytes) {
    const size = align8(RECORD_HEADER + payloadBytes);
    const cap = this.cap;
    const head = Number(Atomics.load(this.ctrl, CTRL_HEAD));
    const pos = head % cap;
    const skip = cap - pos < size ? cap - pos : 0;
    for (;;) {
      const tail = Atomics.load(this.ctrl, CTRL_TAIL);
      if (head + skip + size - Number(tail) <= cap) break;
      this.#dropOldest(tail);
    }
    if (skip) this.view.setUint32(pos, 0, true);
    this.at = skip ? 0 : pos;
    this.size = size;
    this.nextHead = head + skip + size;
    return this.at;
  }

  /** Make the reserved record visible to the consumer (`frames` × frameBytes = the reserved payload). */
  publish(run, sampleIndex, frames) {
    const v = this.view;
    const at = this.at;
    v.setUint32(at, this.size, true);
    v.setUint32(at + 4, run, true);
    v.setFloat64(at + 8, sampleIndex, true);
    v.setUint32(at + 16, frames, true);
    v.setUint32(at + 20, 0, true);
    Atomics.store(this.ctrl, CTRL_HEAD, BigInt(this.nextHead));
  }

  #dropOldest(tail) {
    const t = Number(tail);
    const pos = t % this.cap;
    const size = this.view.getUint32(pos, true);
    const frames = size === 0 ? 0 : this.view.getUint32(pos + 16, true);
    const next = size === 0 ? t + (this.cap - pos) : t + size;
    if (Atomics.compareExchange(this.ctrl, CTRL_TAIL, tail, BigInt(next)) !== tail) return; // the consumer took it
    if (size !== 0) {
      Atomics.add(this.ctrl, CTRL_DROPPED_FRAMES, BigInt(frames));
      Atomics.add(this.ctrl, CTRL_DROPPED_RECORDS, 1n);
    }
  }

  // ---- consumer (service's thread) ----

  /**
   * The oldest record, read in place into `out` ({ tail, pos, size, run, sampleIndex, frames });
   * false when the queue is empty. The payload is at out.pos + RECORD_HEADER. Nothing is claimed
   * until commit(); until then the producer may drop the record and reuse its bytes.
   */
  peek(out) {
    const cap = this.cap;
    const v = this.view;
    for (;;) {
      const tail = Atomics.load(this.ctrl, CTRL_TAIL);
      if (tail === Atomics.load(this.ctrl, CTRL_HEAD)) return false;
      const t = Number(tail);
      const pos = t % cap;
      const size = v.getUint32(pos, true);
      if (size === 0) {
        Atomics.compareExchange(this.ctrl, CTRL_TAIL, tail, BigInt(t + (cap - pos)));
        continue;
      }
      const frames = pos + RECORD_HEADER <= cap ? v.getUint32(pos + 16, true) : -1;
      if (size % 8 !== 0 || pos + size > cap || frames < 1 || RECORD_HEADER + frames * this.frameBytes > size) {
        // Bytes overwritten after the producer dropped this record: TAIL has moved on.
        if (Atomics.load(this.ctrl, CTRL_TAIL) !== tail) continue;
        throw new Error(`capture queue: malformed record at ${pos} (size ${size}, frames ${frames})`);
      }
      out.tail = tail;
      out.pos = pos;
      out.size = size;
      out.run = v.getUint32(pos + 4, true);
      out.sampleIndex = v.getFloat64(pos + 8, true);
      out.frames = frames;
      return true;
    }
  }

  /** Claim the record peek() returned; false if the producer dropped it meanwhile (discard the copy). */
  commit(out) {
    return Atomics.compareExchange(this.ctrl, CTRL_TAIL, out.tail, out.tail + BigInt(out.size)) === out.tail;
  }
}
