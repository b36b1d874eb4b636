// Types of capture-queue.mjs (the capture thread's shared queue).
export declare const CTRL_HEAD: 0;
export declare const CTRL_TAIL: 1;
export declare const CTRL_FRAMES_READ: 2;
export declare const CTRL_DROPPED_FRAMES: 3;
export declare const CTRL_DROPPED_RECORDS: 4;
export declare const CTRL_BYTES_READ: 5;
export declare const CTRL_BYTES_DISCARDED: 6;
export declare const CTRL_LAST_DATA_MS: 7;
export declare const CTRL_STARTS: 8;
export declare const CTRL_SLOTS: 9;
export declare const SIG_SLEEPING: 0;
export declare const SIG_BELL: 1;
export declare const SIG_STATUS_PENDING: 2;
export declare const SIG_SLOTS: 4;
export declare const RECORD_HEADER: 24;
export declare const MAX_RECORD_FRAMES: 1024;
export declare const MAX_QUEUE_BYTES: number;

export interface QueueSize {
  capacityBytes: number;
  recordFrames: number;
  maxRecordBytes: number;
  capacityFrames: number;
}
export declare function queueSize(frameBytes: number, queueFrames: number): QueueSize;

/** A record as peek() found it; the payload is at pos + RECORD_HEADER. */
export interface PeekedRecord {
  tail: bigint;
  pos: number;
  size: number;
  run: number;
  sampleIndex: number;
  frames: number;
}

export declare class CaptureQueue {
  constructor(ring: SharedArrayBuffer, ctrl: SharedArrayBuffer, frameBytes: number);
  readonly bytes: Uint8Array;
  readonly view: DataView;
  readonly ctrl: BigInt64Array;
  readonly cap: number;
  readonly frameBytes: number;
  queuedBytes(): number;
  reserve(payloadBytes: number): number;
  publish(run: number, sampleIndex: number, frames: number): void;
  peek(out: PeekedRecord): boolean;
  commit(out: PeekedRecord): boolean;
}
