/**
 * One stream's sequencer: turns frames that may arrive lost, duplicated or out of order into a
 * contiguous block stream on the stream's own sample clock.
 *
 * Position on the timeline comes from each frame's `firstSample`, so a gap is filled with exactly the
 * missing number of zero samples and the clock never slips. Sequence numbers only serve the counters
 * (how many frames were lost, which arrived out of order).
 *
 * Queue limit and policy: at most `reorderWindowFrames` frames wait for a missing predecessor, each
 * for at most `reorderHoldMs`. When either limit is hit the missing range is declared lost, filled
 * with zeros, and the waiting frames are released. A frame for a range already filled arrives too
 * late: it is dropped and counted (`framesLate`); its samples are already zeros in the output.
 *
 * Zero-fill is bounded by the wall clock (`nowMs`, the frames' arrival times). A frame may open a
 * gap ahead of the furthest position so far only up to
 *   (time since the previous placed frame arrived)·fs·(1 + WALL_SLACK) + credit,
 * where the credit starts at `jumpToleranceSamples`, pays for the part of each gap the wall clock
 * does not cover, and is earned back FILL_PER_DATA_SAMPLE samples per data sample received (never
 * above the tolerance). So a stream at real time zero-fills any outage, a fast replay zero-fills
 * its losses up to 90 % of its frames, and a few datagrams cannot create more zeros than the
 * tolerance plus nine times the samples they carry. A frame further ahead is `ahead_of_clock`: dropped, unless
 * the next frame continues it (sequence +1, contiguous), which confirms a jump: the stream then
 * resynchronises to it (a `discontinuity`, no zeros), as for a jump beyond `maxGapSamples`.
 *
 * Resynchronisations are limited to `resyncLimit` within any `resyncWindowMs`; beyond that a
 * confirmed far-off run is dropped (`resync_limited`) and the sequencer reports a resync storm
 * (since when, frames dropped) instead of breaking the timeline (and any recording) each time.
 * During a storm a timeline that has received nothing for resyncWindowMs / resyncLimit may still
 * be left for a confirmed run, at most once per that time: a live timeline is kept, a dead one is
 * not held on to for a whole window.
 */
import type { Block, BlockSink } from '../../shared/types.ts';

export interface SequencerOptions {
  /** Frames held while waiting for a missing one (1–1024). */
  reorderWindowFrames: number;
  /** Longest a held frame waits before the gap before it is filled, milliseconds. */
  reorderHoldMs: number;
  /**
   * A jump of the clock larger than this (forwards or backwards, samples) is not zero-filled: after
   * two consecutive frames agree on the new position, the stream resynchronises to it and the next
   * block carries `discontinuity: true`. A single far-off frame is dropped as `out_of_range`.
   */
  maxGapSamples: number;
  /** Gap blocks are split into pieces of at most this many samples per channel. */
  maxGapBlockFrames: number;
  /**
   * Zero-fill beyond what the wall clock justifies, samples: the most a stream may jump ahead of
   * real time without confirmation, and the most its credit holds.
   */
  jumpToleranceSamples: number;
  /** At most this many resynchronisations within any `resyncWindowMs` (≥ 1). */
  resyncLimit: number;
  resyncWindowMs: number;
}

export const DEFAULT_SEQUENCER_OPTIONS: SequencerOptions = {
  reorderWindowFrames: 8,
  reorderHoldMs: 40,
  maxGapSamples: 480_000,
  maxGapBlockFrames: 4096,
  jumpToleranceSamples: 48_000,
  resyncLimit: 4,
  resyncWindowMs: 30_000,
};

/**
 * Allowance for the sender's clock running a little faster than ours and for arrival jitter: the
 * wall clock justifies (1 + WALL_SLACK)·fs samples per second.
 */
export const WALL_SLACK = 0.02;

/**
 * Zero-fill credit earned per data sample received. A stream faster than real time (a replay) that
 * loses frames is zero-filled while it loses less than FILL_PER_DATA_SAMPLE / (1 + FILL_PER_DATA_SAMPLE)
 * (90 %) of them; a sender's own datagrams can buy at most this many zeros per sample they carry.
 */
export const FILL_PER_DATA_SAMPLE = 9;

/** A resync storm: confirmed far-off runs refused because the resync limit was reached. */
export interface ResyncStorm {
  /** When the first refusal of this storm happened (the `nowMs` clock). */
  sinceMs: number;
  /** The latest refusal. */
  lastMs: number;
  /** Frames dropped as resync_limited since the storm began. */
  framesDropped: number;
}

export interface SequencerCounters {
  framesAccepted: number;
  samplesAccepted: number;
  framesLost: number;
  framesDuplicated: number;
  framesReordered: number;
  framesLate: number;
  gaps: number;
  gapSamples: number;
  resyncs: number;
  /** Frames whose range partly overlapped samples already emitted; the new tail was kept. */
  framesTrimmed: number;
  /** Far-off frames (beyond maxGapSamples either way) not confirmed by the next frame. */
  outOfRange: number;
  /** Frames further ahead than the wall clock allows, not confirmed by the next frame. */
  aheadOfClock: number;
  /** Frames of a confirmed jump dropped because the resync limit was reached. */
  resyncLimited: number;
}

/** A frame after decoding: planar samples (channel c, sample i at data[c·frames + i]). */
export interface SequencedFrame {
  sequence: number;
  firstSample: number;
  frames: number;
  data: Float32Array;
}

interface Held extends SequencedFrame {
  arrivedMs: number;
}

/** A far-off frame waiting for its successor to confirm a jump; `counted` says where it is counted now. */
interface Candidate extends SequencedFrame {
  counted: 'outOfRange' | 'aheadOfClock' | 'resyncLimited';
}

const GAP_HISTORY = 32;
const U32 = 0x1_0000_0000;

/** Signed distance a − b between two uint32 sequence numbers, in (−2^31, 2^31]. */
function seqDiff(a: number, b: number): number {
  let d = (a - b) % U32;
  if (d > U32 / 2) d -= U32;
  else if (d <= -U32 / 2) d += U32;
  return d;
}

export class Sequencer {
  readonly counters: SequencerCounters = {
    framesAccepted: 0,
    samplesAccepted: 0,
    framesLost: 0,
    framesDuplicated: 0,
    framesReordered: 0,
    framesLate: 0,
    gaps: 0,
    gapSamples: 0,
    resyncs: 0,
    framesTrimmed: 0,
    outOfRange: 0,
    aheadOfClock: 0,
    resyncLimited: 0,
  };

  readonly #streamId: number;
  readonly #sampleRateHz: number;
  readonly #channels: number;
  readonly #opts: SequencerOptions;
  readonly #sink: BlockSink;
  /** Next sample index the output expects; −1 before the first frame. */
  #next = -1;
  /** Sequence number expected after the last emitted frame. */
  #nextSeq = 0;
  /** Highest sequence number seen so far (for out-of-order detection). */
  #maxSeq = 0;
  /** End (exclusive) of the furthest frame position seen so far (−∞ before the first frame). */
  #maxEnd = -Infinity;
  #held: Held[] = [];
  #pendingDiscontinuity = false;
  #resyncCandidate: Candidate | null = null;
  /** Zero-fill the wall clock does not cover that the stream may still make, samples (≤ tolerance). */
  #credit: number;
  /** Arrival of the latest frame placed on the timeline (−∞ before the first). */
  #lastPlacedMs = -Infinity;
  /** Times of the latest resyncs, a ring of resyncLimit entries (−∞ = none yet). */
  readonly #resyncTimes: Float64Array;
  #resyncNext = 0;
  #storm: ResyncStorm | null = null;
  readonly #samplesPerMs: number;
  /** Recent zero-filled ranges [start, end), to tell a late frame from a duplicate. */
  readonly #gapStart = new Float64Array(GAP_HISTORY);
  readonly #gapEnd = new Float64Array(GAP_HISTORY);
  #gapCount = 0;

  constructor(streamId: number, sampleRateHz: number, channels: number, opts: SequencerOptions, sink: BlockSink) {
    if (!Number.isInteger(opts.reorderWindowFrames) || opts.reorderWindowFrames < 1 || opts.reorderWindowFrames > 1024) {
      throw new RangeError(`reorderWindowFrames ${opts.reorderWindowFrames} not in 1–1024`);
    }
    if (!(opts.reorderHoldMs >= 0)) throw new RangeError(`reorderHoldMs ${opts.reorderHoldMs} must be ≥ 0`);
    if (!(opts.maxGapSamples >= 1)) throw new RangeError(`maxGapSamples ${opts.maxGapSamples} must be ≥ 1`);
    if (!(opts.maxGapBlockFrames >= 1)) throw new RangeError(`maxGapBlockFrames ${opts.maxGapBlockFrames} must be ≥ 1`);
    if (!(opts.jumpToleranceSamples >= 0)) throw new RangeError(`jumpToleranceSamples ${opts.jumpToleranceSamples} must be ≥ 0`);
    if (!Number.isInteger(opts.resyncLimit) || opts.resyncLimit < 1) throw new RangeError(`resyncLimit ${opts.resyncLimit} must be an integer ≥ 1`);
    if (!(opts.resyncWindowMs >= 0)) throw new RangeError(`resyncWindowMs ${opts.resyncWindowMs} must be ≥ 0`);
    this.#credit = opts.jumpToleranceSamples;
    this.#resyncTimes = new Float64Array(opts.resyncLimit).fill(-Infinity);
    this.#samplesPerMs = (sampleRateHz / 1000) * (1 + WALL_SLACK);
    this.#streamId = streamId;
    this.#sampleRateHz = sampleRateHz;
    this.#channels = channels;
    this.#opts = opts;
    this.#sink = sink;
  }

  /** Next sample index the output will carry (−1 before the first frame). */
  get nextSample(): number {
    return this.#next;
  }

  /** Frames currently waiting for a missing predecessor. */
  get heldFrames(): number {
    return this.#held.length;
  }

  /** The current resync storm, or null when none (a storm ends with a resync or a quiet window). */
  stormAt(nowMs: number): ResyncStorm | null {
    const st = this.#storm;
    return st !== null && nowMs - st.lastMs <= this.#opts.resyncWindowMs ? { ...st } : null;
  }

  /** The resync storm as last seen (tests; status uses {@link stormAt}). */
  get resyncStorm(): ResyncStorm | null {
    return this.#storm === null ? null : { ...this.#storm };
  }

  /**
   * Whether a frame starting at `firstSample` is simply the next one: the stream has started,
   * nothing is held or pending, and it begins exactly where the output ends. Such a frame needs no
   * placement; the caller may take its samples itself and report it with {@link acceptNext}.
   */
  isNext(firstSample: number): boolean {
    return this.#next >= 0 && firstSample === this.#next && this.#held.length === 0 && !this.#pendingDiscontinuity;
  }

  /**
   * Count a frame for which {@link isNext} held as accepted and advance the output past it, without
   * emitting a block: the caller publishes its samples (the hub assembles runs of such frames into
   * one block). Same state and counters as {@link push} would leave.
   */
  acceptNext(sequence: number, firstSample: number, frames: number, nowMs: number): void {
    if (!this.isNext(firstSample) || !(frames >= 1)) throw new RangeError(`frame at ${firstSample} (${frames} samples) is not the next one (${this.#next})`);
    this.#resyncCandidate = null;
    this.#placed(frames, 0, nowMs);
    // In order by construction: it starts at the end of everything seen so far.
    this.#maxSeq = sequence;
    const end = firstSample + frames;
    if (end > this.#maxEnd) this.#maxEnd = end;
    this.#accepted(sequence, frames);
    this.#next = end;
  }

  /** A frame is placed on the timeline: it pays for the gap it opens and earns credit for its data. */
  #placed(frames: number, unpaid: number, nowMs: number): void {
    this.#credit = Math.min(this.#opts.jumpToleranceSamples, this.#credit - unpaid + FILL_PER_DATA_SAMPLE * frames);
    if (nowMs > this.#lastPlacedMs) this.#lastPlacedMs = nowMs;
  }

  /** A frame's samples (`frames` of them, after any trimmed head) reach the output. */
  #accepted(sequence: number, frames: number): void {
    this.counters.framesAccepted++;
    this.counters.samplesAccepted += frames;
    this.#nextSeq = (sequence + 1) % U32;
  }

  /** Take one decoded frame. `nowMs` is a monotonic clock (performance.now()). */
  push(frame: SequencedFrame, nowMs: number): void {
    const c = this.counters;
    const start = frame.firstSample;
    const end = start + frame.frames;
    let unpaid = 0;
    if (this.#next < 0) {
      // Not started: the first frames wait like any others, so a reordered opening is sorted too.
      if (this.#held.length === 0) this.#maxSeq = frame.sequence;
    } else {
      const frontier = Math.max(this.#next, this.#maxEnd);
      const ahead = start - frontier;
      if (ahead > this.#opts.maxGapSamples || this.#next - end > this.#opts.maxGapSamples) {
        this.#farFrame(frame, nowMs, 'outOfRange');
        return;
      }
      const wall = this.#wallSamples(nowMs);
      if (ahead > wall + this.#credit) {
        this.#farFrame(frame, nowMs, 'aheadOfClock');
        return;
      }
      this.#resyncCandidate = null;
      if (end <= this.#next) {
        if (this.#inRecentGap(start, end)) c.framesLate++;
        else c.framesDuplicated++;
        return;
      }
      // The part of a new gap the wall clock does not cover is paid from the credit (below).
      if (ahead > wall) unpaid = ahead - wall;
    }
    // Insert sorted by firstSample; a frame at a position already held is a duplicate.
    const held = this.#held;
    let i = held.length;
    while (i > 0 && held[i - 1].firstSample > start) i--;
    if (i > 0 && held[i - 1].firstSample === start) {
      c.framesDuplicated++;
      return;
    }
    this.#placed(frame.frames, unpaid, nowMs);
    // Reordered: its sequence number is below one seen before it (the RFC 4737 sense). A frame that
    // lands beyond every position seen so far is in order whatever its number: a sequence that went
    // backwards there is a sender that reset its counter (placement is by sample index).
    if (seqDiff(frame.sequence, this.#maxSeq) < 0 && start < this.#maxEnd) c.framesReordered++;
    else this.#maxSeq = frame.sequence;
    if (end > this.#maxEnd) this.#maxEnd = end;
    held.splice(i, 0, { ...frame, arrivedMs: nowMs });
    if (this.#next < 0) {
      if (held.length > this.#opts.reorderWindowFrames) this.#start();
      return;
    }
    this.#drain();
    while (held.length > this.#opts.reorderWindowFrames) this.#fillToHead();
  }

  #start(): void {
    this.#keepOpeningRun();
    const head = this.#held[0];
    this.#next = head.firstSample;
    this.#nextSeq = head.sequence;
    this.#drain();
    while (this.#held.length > this.#opts.reorderWindowFrames) this.#fillToHead();
  }

  /**
   * The opening frames were held without a clock to check them against. Split them (sorted by
   * position) where consecutive positions are more than maxGapSamples apart and keep the run with
   * the most frames (on a tie, the one holding the first arrival); the others are far-off frames,
   * dropped as out_of_range. Without this one stray frame among the first would be zero-filled up to.
   */
  #keepOpeningRun(): void {
    const held = this.#held;
    if (held.length < 2) return;
    // The opening frames arrived within this span: the wall clock justifies that much, plus the tolerance.
    let t0 = Infinity;
    let t1 = -Infinity;
    for (const h of held) {
      t0 = Math.min(t0, h.arrivedMs);
      t1 = Math.max(t1, h.arrivedMs);
    }
    const split = Math.min(this.#opts.maxGapSamples, (t1 - t0) * this.#samplesPerMs + this.#opts.jumpToleranceSamples);
    let best = { from: 0, to: 0, first: Infinity };
    let from = 0;
    let first = held[0].arrivedMs;
    for (let i = 1; i <= held.length; i++) {
      if (i === held.length || held[i].firstSample - held[i - 1].firstSample > split) {
        const len = i - from;
        const bestLen = best.to - best.from;
        if (len > bestLen || (len === bestLen && first < best.first)) best = { from, to: i, first };
        from = i;
        if (i < held.length) first = held[i].arrivedMs;
      } else if (held[i].arrivedMs < first) first = held[i].arrivedMs;
    }
    const dropped = held.length - (best.to - best.from);
    if (dropped === 0) return;
    // Beyond maxGapSamples from the run kept: out of range; nearer, only too far for the wall clock.
    const lo = held[best.from].firstSample;
    const hi = held[best.to - 1].firstSample + held[best.to - 1].frames;
    for (let i = 0; i < held.length; i++) {
      if (i >= best.from && i < best.to) continue;
      const h = held[i];
      const far = h.firstSample - hi > this.#opts.maxGapSamples || lo - (h.firstSample + h.frames) > this.#opts.maxGapSamples;
      if (far) this.counters.outOfRange++;
      else this.counters.aheadOfClock++;
    }
    held.splice(best.to);
    held.splice(0, best.from);
    const last = held[held.length - 1];
    this.#maxSeq = last.sequence;
    this.#maxEnd = last.firstSample + last.frames;
  }

  /** Release frames that waited longer than the hold time. Call periodically. */
  tick(nowMs: number): void {
    const held = this.#held;
    const hold = this.#opts.reorderHoldMs;
    if (this.#next < 0 && held.length > 0 && nowMs - this.#oldestArrival() >= hold) this.#start();
    while (held.length > 0 && nowMs - this.#oldestArrival() >= hold) this.#fillToHead();
  }

  /** Arrival time of the frame that has waited longest (held is sorted by position, not arrival). */
  #oldestArrival(): number {
    let t = Infinity;
    for (const h of this.#held) if (h.arrivedMs < t) t = h.arrivedMs;
    return t;
  }

  /** Release everything held, filling the gaps before it (end of stream). */
  flush(): void {
    if (this.#next < 0 && this.#held.length > 0) this.#start();
    while (this.#held.length > 0) this.#fillToHead();
  }

  /** Wall-clock time since the previous placed frame arrived, as samples (with the slack). */
  #wallSamples(nowMs: number): number {
    const dt = nowMs - this.#lastPlacedMs;
    return dt > 0 ? dt * this.#samplesPerMs : 0;
  }

  /**
   * Whether a resync may happen now: while fewer than resyncLimit happened in the window; beyond
   * that, only away from a timeline that has had no frame for window/limit, and no sooner than
   * window/limit after the last resync (a stream whose sender jumped for good is not dropped for a
   * whole window, and a live timeline is never taken away during a storm).
   */
  #resyncAllowed(nowMs: number): boolean {
    const times = this.#resyncTimes;
    const windowMs = this.#opts.resyncWindowMs;
    if (nowMs - times[this.#resyncNext] >= windowMs) return true;
    const spacingMs = windowMs / times.length;
    const lastMs = times[(this.#resyncNext + times.length - 1) % times.length];
    return nowMs - this.#lastPlacedMs >= spacingMs && nowMs - lastMs >= spacingMs;
  }

  #farFrame(frame: SequencedFrame, nowMs: number, kind: 'outOfRange' | 'aheadOfClock'): void {
    const c = this.counters;
    const cand = this.#resyncCandidate;
    if (cand !== null && frame.firstSample === cand.firstSample + cand.frames && seqDiff(frame.sequence, cand.sequence) === 1) {
      // Two consecutive frames agree on a new timeline: the sender restarted or skipped ahead.
      if (!this.#resyncAllowed(nowMs)) {
        // A storm: keep the timeline, drop the run (its next frame is checked again).
        const st = (this.#storm ??= { sinceMs: nowMs, lastMs: nowMs, framesDropped: 0 });
        st.lastMs = nowMs;
        if (cand.counted !== 'resyncLimited') {
          c[cand.counted]--;
          c.resyncLimited++;
          st.framesDropped++;
        }
        c.resyncLimited++;
        st.framesDropped++;
        this.#resyncCandidate = { ...frame, counted: 'resyncLimited' };
        return;
      }
      this.flush();
      c.resyncs++;
      c[cand.counted]--; // the candidate is accepted after all
      // A jump forward within maxGapSamples skips frames the sender numbered and sent: they never
      // arrived, so they are lost, when the sequence moved no further than the position did (not a
      // restarted counter). Beyond maxGapSamples the sender's clock itself jumped: nothing to count.
      const skipped = seqDiff(cand.sequence, this.#nextSeq);
      const jumped = cand.firstSample - this.#next;
      if (skipped > 0 && jumped > 0 && jumped <= this.#opts.maxGapSamples && skipped <= Math.ceil(jumped / cand.frames)) c.framesLost += skipped;
      this.#resyncTimes[this.#resyncNext] = nowMs;
      this.#resyncNext = (this.#resyncNext + 1) % this.#resyncTimes.length;
      this.#storm = null;
      this.#next = cand.firstSample;
      this.#nextSeq = cand.sequence;
      this.#maxSeq = frame.sequence;
      this.#maxEnd = frame.firstSample + frame.frames;
      this.#credit = this.#opts.jumpToleranceSamples;
      this.#lastPlacedMs = nowMs;
      this.#pendingDiscontinuity = true;
      this.#resyncCandidate = null;
      this.#held.push({ ...cand, arrivedMs: nowMs }, { ...frame, arrivedMs: nowMs });
      this.#drain();
      return;
    }
    c[kind]++;
    this.#resyncCandidate = { ...frame, counted: kind };
  }

  #inRecentGap(start: number, end: number): boolean {
    const n = Math.min(this.#gapCount, GAP_HISTORY);
    for (let k = 0; k < n; k++) {
      if (start < this.#gapEnd[k] && end > this.#gapStart[k]) return true;
    }
    return false;
  }

  /** Emit every held frame that continues the output. */
  #drain(): void {
    const held = this.#held;
    while (held.length > 0 && held[0].firstSample <= this.#next) {
      const f = held.shift()!;
      const end = f.firstSample + f.frames;
      if (end <= this.#next) {
        this.counters.framesDuplicated++;
        continue;
      }
      if (f.firstSample < this.#next) {
        this.counters.framesTrimmed++;
        this.#emitData(f, this.#next - f.firstSample);
      } else {
        this.#emitData(f, 0);
      }
    }
  }

  /** Declare the range before the first held frame lost, fill it with zeros, then drain. */
  #fillToHead(): void {
    const head = this.#held[0];
    const missing = head.firstSample - this.#next;
    if (missing > this.#opts.maxGapSamples) {
      // Never zero-fill a jump beyond maxGapSamples (it could be up to 2^53 samples): treat it as a
      // resynchronisation instead. The checks in push() and #keepOpeningRun() keep this from happening.
      this.counters.resyncs++;
      this.#pendingDiscontinuity = true;
      this.#next = head.firstSample;
    } else if (missing > 0) {
      const c = this.counters;
      c.gaps++;
      c.gapSamples += missing;
      const lostBySeq = seqDiff(head.sequence, this.#nextSeq);
      c.framesLost += lostBySeq > 0 ? lostBySeq : 1;
      const k = this.#gapCount++ % GAP_HISTORY;
      this.#gapStart[k] = this.#next;
      this.#gapEnd[k] = head.firstSample;
      let left = missing;
      while (left > 0) {
        const n = Math.min(left, this.#opts.maxGapBlockFrames);
        this.#emit(this.#next, n, new Float32Array(n * this.#channels), true);
        left -= n;
      }
    }
    this.#drain();
  }

  #emitData(f: SequencedFrame, skip: number): void {
    let data = f.data;
    let frames = f.frames;
    if (skip > 0) {
      frames = f.frames - skip;
      data = new Float32Array(frames * this.#channels);
      for (let ch = 0; ch < this.#channels; ch++) {
        data.set(f.data.subarray(ch * f.frames + skip, (ch + 1) * f.frames), ch * frames);
      }
    }
    this.#accepted(f.sequence, frames);
    this.#emit(f.firstSample + skip, frames, data, false);
  }

  #emit(sampleIndex: number, frames: number, data: Float32Array, gap: boolean): void {
    const block: Block = {
      streamId: this.#streamId,
      sampleIndex,
      sampleRateHz: this.#sampleRateHz,
      channels: this.#channels,
      frames,
      data,
      gap,
      discontinuity: this.#pendingDiscontinuity,
    };
    this.#pendingDiscontinuity = false;
    this.#next = sampleIndex + frames;
    this.#sink(block);
  }
}
