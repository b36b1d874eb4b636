/**
 * The capture queue (server/ingest/capture-queue.mjs) driven from one thread, producer and consumer
 * interleaved by hand: records come out whole and in order across the ring's end, a full queue drops
 * its oldest records and counts them, and a record the producer drops while the consumer is reading
 * it is refused at commit (the consumer's copy is thrown away). Expected values are the bytes the
 * test itself wrote; the drop rule is the one written in the module's comment.
 */
import { describe, expect, it } from 'vitest';
import {
  CaptureQueue,
  CTRL_DROPPED_FRAMES,
  CTRL_DROPPED_RECORDS,
  CTRL_SLOTS,
  MAX_QUEUE_BYTES,
  type PeekedRecord,
  queueSize,
  RECORD_HEADER,
} from '../../server/ingest/capture-queue.mjs';
import { mulberry32 } from '../helpers/random.ts';

function makeQueue(frameBytes: number, capacityBytes: number): CaptureQueue {
  return new CaptureQueue(new SharedArrayBuffer(capacityBytes), new SharedArrayBuffer(8 * CTRL_SLOTS), frameBytes);
}

/** Byte j of the frame at sample index s: a pattern the reader can check without a copy of it. */
const pattern = (s: number, j: number) => (s * 31 + j * 7) & 0xff;

function write(q: CaptureQueue, run: number, sampleIndex: number, frames: number): void {
  const at = q.reserve(frames * q.frameBytes) + RECORD_HEADER;
  for (let f = 0; f < frames; f++) for (let j = 0; j < q.frameBytes; j++) q.bytes[at + f * q.frameBytes + j] = pattern(sampleIndex + f, j);
  q.publish(run, sampleIndex, frames);
}

/** Peek, check the payload's pattern, commit; returns the record or null when empty. */
function take(q: CaptureQueue): PeekedRecord | null {
  const r: PeekedRecord = { tail: 0n, pos: 0, size: 0, run: 0, sampleIndex: 0, frames: 0 };
  if (!q.peek(r)) return null;
  const at = r.pos + RECORD_HEADER;
  for (let f = 0; f < r.frames; f++) {
    for (let j = 0; j < q.frameBytes; j++) {
      if (q.bytes[at + f * q.frameBytes + j] !== pattern(r.sampleIndex + f, j)) throw new Error(`payload differs at sample ${r.sampleIndex + f}`);
    }
  }
  expect(q.commit(r)).toBe(true);
  return r;
}

describe('capture queue', () => {
  it('sizes the ring for queueMs of audio plus headers and slack, within the bound', () => {
    // 4 channels × int32 = 16 bytes a frame; 100 ms at 48 kHz = 4800 frames → records of 1024.
    const s = queueSize(16, 4800);
    expect(s.recordFrames).toBe(1024);
    expect(s.maxRecordBytes).toBe(RECORD_HEADER + 1024 * 16);
    expect(s.capacityBytes % 8).toBe(0);
    expect(s.capacityBytes).toBeGreaterThanOrEqual(4800 * 16 + 2 * s.maxRecordBytes);
    expect(s.capacityFrames).toBe(4800);
    // A tiny queue: records of a quarter of it, ring at least four records.
    const t = queueSize(6, 40);
    expect(t.recordFrames).toBe(10);
    expect(t.capacityBytes).toBeGreaterThanOrEqual(4 * t.maxRecordBytes);
    // Far beyond the bound (1024 channels × float32 × 384 kHz × 60 s): cut to MAX_QUEUE_BYTES.
    const u = queueSize(4096, 384000 * 60);
    expect(u.capacityBytes).toBe(MAX_QUEUE_BYTES);
    expect(u.capacityFrames).toBeLessThan(384000 * 60);
    expect(u.capacityFrames).toBeGreaterThan((MAX_QUEUE_BYTES / 4096) * 0.9);
  });

  it('delivers records whole and in order over many laps of the ring, skipping its end', () => {
    const rnd = mulberry32(13);
    const q = makeQueue(12, 4096);
    let written = 0;
    let read = 0;
    for (let k = 0; k < 5000; k++) {
      const frames = 1 + Math.floor(rnd() * 80); // ≤ 80 × 12 + 24 bytes: under a quarter of the ring
      write(q, 1, written, frames);
      written += frames;
      // Read now and then, so the ring's fill level wanders without overflowing it.
      while (q.queuedBytes() > 2048 || rnd() < 0.3) {
        const r = take(q);
        if (!r) break;
        expect(r.sampleIndex).toBe(read);
        read += r.frames;
      }
    }
    for (let r = take(q); r; r = take(q)) {
      expect(r.sampleIndex).toBe(read);
      read += r.frames;
    }
    expect(read).toBe(written);
    expect(Number(q.ctrl[CTRL_DROPPED_FRAMES])).toBe(0);
    expect(q.queuedBytes()).toBe(0);
  });

  it('drops the oldest records when full and counts them; what remains continues the index', () => {
    const q = makeQueue(8, 1024); // records of 10 frames: 24 + 80 = 104 bytes
    let written = 0;
    for (let k = 0; k < 30; k++) {
      write(q, 1, written, 10);
      written += 10;
    }
    const droppedFrames = Number(q.ctrl[CTRL_DROPPED_FRAMES]);
    const droppedRecords = Number(q.ctrl[CTRL_DROPPED_RECORDS]);
    expect(droppedRecords).toBeGreaterThan(0);
    expect(droppedFrames).toBe(10 * droppedRecords);
    const first = take(q)!;
    // Oldest first out: the first record left starts exactly where the dropped ones ended.
    expect(first.sampleIndex).toBe(droppedFrames);
    let next = first.sampleIndex + first.frames;
    for (let r = take(q); r; r = take(q)) {
      expect(r.sampleIndex).toBe(next);
      next += r.frames;
    }
    expect(next).toBe(written);
  });

  it('refuses the commit of a record the producer dropped while it was being read', () => {
    const q = makeQueue(8, 1024);
    write(q, 7, 0, 10);
    const r: PeekedRecord = { tail: 0n, pos: 0, size: 0, run: 0, sampleIndex: 0, frames: 0 };
    expect(q.peek(r)).toBe(true);
    expect(r).toMatchObject({ run: 7, sampleIndex: 0, frames: 10 });
    // The consumer stalls here; the producer laps the ring and reuses the record's bytes.
    let written = 10;
    while (Number(q.ctrl[CTRL_DROPPED_RECORDS]) === 0 || q.bytes[r.pos + RECORD_HEADER] === pattern(0, 0)) {
      write(q, 8, written, 10);
      written += 10;
    }
    expect(q.commit(r)).toBe(false);
    // The next peek finds the oldest record still queued, intact.
    const s = take(q)!;
    expect(s.run).toBe(8);
    expect(s.sampleIndex).toBe(Number(q.ctrl[CTRL_DROPPED_FRAMES]));
  });
});
