/**
 * Several inputs ("members": acquisition units, RTP sessions, own-format streams) merged into one
 * array on their shared sample clock.
 *
 * Every member delivers blocks of its own stream (after its own sequencer: contiguous, gaps already
 * zero-filled, jumps flagged `discontinuity`) numbered on a sample clock it shares with the others
 * (units locked to one PTP grandmaster, RFC 7273 `mediaclk:direct`; or senders numbering samples on
 * one clock). The merger keeps the channels each member maps to array positions (and its reference
 * channel) in a ring per member and releases the span [t, t + n) of the M-channel array
 *   - as soon as every member has it, or
 *   - holdMs after the first member had it (then the members without it are absent), or
 *   - when a member ran more than its ring ahead of t (the others absent for the released span).
 * Absent positions are zeros flagged in the output block's `absent`, so the covariance leaves them
 * out. A member's own gap samples (zeros its sequencer put in for lost packets) count as that member
 * having the samples, but they are no signal either: their positions are flagged absent too. The
 * output block is `gap: true` only when no position in it carries real samples.
 *
 * Start: the merger waits up to holdMs from the first member's first block for every member's first
 * block, then begins at the largest first sample among the members that arrived (the others' earlier
 * samples are dropped and counted `beforeStart`); a member arriving later joins as absent until its
 * samples reach the group.
 *
 * Clock: a block is on the group clock when it overlaps [t − bound, lead + bound] (lead = the
 * furthest sample any member delivered; bound defaults to the ring length); a member that jumped (a
 * restarted unit) rejoins there. Beyond it the member is off-clock: absent, its blocks counted and
 * dropped, until one lands within the bound. A gap block continuing the member's previous block (its
 * sequencer zero-filling a long outage) is always taken: its zeros are late or flagged anyway. When every live member is
 * off-clock and their positions agree, the whole group jumped: it starts over there and the next
 * output block carries `discontinuity: true`.
 *
 * Memory: each member's ring holds bufferSamples = next power of two ≥ fs·(holdMs + marginMs)/1000
 * + maxBlockFrames samples of its stored channels; the hold marks are a ring of MARK_SLOTS entries;
 * output blocks are at most maxBlockFrames long. After construction the only allocations per block
 * are the output block itself (data, and `absent` when a position is absent).
 *
 * Offset and drift: `timing()` feeds each member's {@link ArrivalDrift} (arrival time against media
 * time); when members name a reference channel, the references are cut out of every released span
 * and fed to a {@link ReferenceOffset} (GCC-PHAT) per member against the first member with a
 * reference.
 */
import type { Block, BlockSink, InputMapping } from '../../shared/types.ts';
import { ArrivalDrift, ReferenceOffset, type ArrivalDriftOptions, type ReferenceOffsetOptions } from './drift.ts';

export interface GroupMember {
  /** Shown in status (e.g. the array file's `source`). */
  name: string;
  /** Channel channels[i] of the member's stream feeds array position positions[i]. */
  channels: number[];
  positions: number[];
  /** A channel of the member's stream carrying the shared reference signal (need not feed a position). */
  referenceChannel?: number;
}

export interface GroupMergerOptions {
  /** M, the array's positions; every position is fed by exactly one member. */
  channels: number;
  sampleRateHz: number;
  /** Longest a span waits for a late member, ms (config ingest.groupHoldMs). */
  holdMs: number;
  members: GroupMember[];
  /** Output blocks are at most this long, samples (default 1024). */
  maxBlockFrames?: number;
  /** Ring length beyond holdMs, ms (default 100): room for block sizes and tick spacing. */
  marginMs?: number;
  /** How far from the group clock a member's block may be and still count as on it, samples (default: the ring length). */
  clockBoundSamples?: number;
  /** streamId of the output blocks (default 0). */
  streamId?: number;
  /** Warn when a member's reference offset exceeds this, µs (default 1e6/(10·6000) ≈ 16.7: a tenth of a period at 6 kHz). */
  warnAboveUs?: number;
  /** Warn when a member drifts more than this against the base member, ppm (default 1). */
  warnDriftPpm?: number;
  /** A member without frames for this long, ms, is not live (for the whole-group jump) and is warned about (default max(2·holdMs, 1000)). */
  silentAfterMs?: number;
  /** Options of each member's GCC-PHAT estimator (sample rate comes from the group). */
  reference?: Omit<ReferenceOffsetOptions, 'sampleRateHz'>;
  /** Options of each member's arrival-time drift estimator (sample rate comes from the group). */
  arrival?: Omit<ArrivalDriftOptions, 'sampleRateHz'>;
}

export type GroupDropReason = 'channels' | 'rate' | 'malformed';

export interface GroupMemberStatus {
  name: string;
  /** Real samples received (per channel), gap samples not included. */
  samples: number;
  /** The sample after the member's last one on the group clock; null before its first block. */
  nextSample: number | null;
  /** How far the member is behind the leading member, ms; null before its first block or while off-clock. */
  lagMs: number | null;
  /** Gap blocks received (its own sequencer's zero fill) and their samples. */
  gaps: number;
  gapSamples: number;
  /** Runs of output blocks in which the member's positions were absent, and the samples absent. */
  absentSpans: number;
  absentSamples: number;
  /** Real samples that arrived after their span had been released (dropped). */
  lateSamples: number;
  /** Seconds since the member's last block; null before its first. */
  lastFrameAgoS: number | null;
  offClock: boolean;
  offClockBlocks: number;
  offClockSamples: number;
  /** Times the member came back onto the group clock after a jump or a spell off it. */
  rejoins: number;
  /** Samples dropped because they precede the group's start. */
  beforeStart: number;
  /** Blocks flagged `discontinuity` received. */
  discontinuities: number;
  /** Blocks refused, by reason, and the last refusal in plain words. */
  dropped: Record<GroupDropReason, number>;
  lastDrop: string | null;
  /** Method (a), arrival time against media time: drift against the local clock and against the base member. */
  drift: { ppm: number; relativePpm: number | null; offsetMs: number; points: number; spanS: number } | null;
  /** Method (b), GCC-PHAT on the reference channels against the base member; null for the base itself and without a reference signal. */
  reference: { offsetUs: number; driftPpm: number | null; quality: number; windows: number; spanS: number } | null;
  warning: string | null;
}

export interface GroupStatus {
  state: 'waiting' | 'running';
  /** The next sample the merger releases; null before the start. */
  nextSample: number | null;
  /** The furthest sample a member on the clock has delivered; null before any. */
  leadSample: number | null;
  releasedSamples: number;
  releasedBlocks: number;
  /** Output blocks released with a member lacking samples (by the hold time, the ring bound, a flush or a resync). */
  holdReleases: number;
  /** Of those, the ones the ring bound forced (a member far ahead). */
  forcedReleases: number;
  /** Times the whole group jumped and started over (output discontinuities). */
  resyncs: number;
  holdMs: number;
  /** Each member's ring, samples. */
  bufferSamples: number;
  /** The member the references are measured against; null without references. */
  referenceMember: string | null;
  /** The member the relative arrival drift is measured against (the first with an estimate). */
  driftBaseMember: string | null;
  members: GroupMemberStatus[];
}

/** Hold marks kept (leading-edge advances with their arrival times), a ring. */
export const MARK_SLOTS = 2048;

/** The counters a member keeps, as its status reports them. */
type MemberCounters = Pick<
  GroupMemberStatus,
  'samples' | 'gaps' | 'gapSamples' | 'absentSpans' | 'absentSamples' | 'lateSamples' | 'offClockBlocks' | 'offClockSamples' | 'rejoins' | 'beforeStart' | 'discontinuities' | 'dropped' | 'lastDrop'
>;

/** Per-member state. Rings are indexed by sample index & mask (sample indices are whole, ≥ 0). */
interface Member extends MemberCounters {
  readonly name: string;
  /** Stream channels stored: the mapped ones in mapping order, then the reference if it feeds no position. */
  readonly stored: Int32Array;
  readonly positions: Int32Array;
  /** Slot of the reference in `stored`, or −1. */
  readonly refSlot: number;
  /** Largest stream channel read; blocks need more channels than this. */
  readonly maxChannel: number;
  readonly ring: Float32Array;
  /** 1 where the ring holds zeros standing in (gap or hole), 0 for real samples. */
  readonly flags: Uint8Array;
  readonly arrival: ArrivalDrift;
  readonly reference: ReferenceOffset | null;
  /** While waiting for the start: first buffered sample. */
  first: number;
  /** Sample after the last delivered one on the group clock (NaN: none). */
  end: number;
  offClock: boolean;
  offClockEnd: number;
  lastPushMs: number;
  wasAbsent: boolean;
}

/** Kind of a member's samples in an output chunk. */
const REAL = 0;
const ZEROS = 1;
const NONE = 2;

/**
 * Merges members' blocks into M-channel blocks on the shared sample index. Single-threaded; call
 * {@link tick} regularly (e.g. every 10–20 ms) so spans waiting for a silent member are released
 * once the hold time has passed.
 */
export class GroupMerger {
  readonly channels: number;
  readonly sampleRateHz: number;
  readonly holdMs: number;
  readonly maxBlockFrames: number;
  readonly bufferSamples: number;
  readonly clockBoundSamples: number;
  readonly streamId: number;
  readonly warnAboveUs: number;
  readonly warnDriftPpm: number;
  readonly silentAfterMs: number;
  readonly #sink: BlockSink;
  readonly #members: Member[];
  readonly #mask: number;
  /** Input blocks are handled in pieces of at most this many samples (a quarter ring). */
  readonly #piece: number;
  readonly #kind: Uint8Array;
  readonly #refBase: number;
  readonly #refScratchBase: Float32Array;
  readonly #refScratch: Float32Array;
  readonly #markEnd = new Float64Array(MARK_SLOTS);
  readonly #markMs = new Float64Array(MARK_SLOTS);
  readonly #markResolutionMs: number;
  #markHead = 0;
  #markCount = 0;
  #running = false;
  #firstArrivalMs = NaN;
  #startSample = 0;
  #t = 0;
  #lead = NaN;
  #pendingDiscontinuity = false;
  #releasedSamples = 0;
  #releasedBlocks = 0;
  #holdReleases = 0;
  #forcedReleases = 0;
  #resyncs = 0;

  constructor(options: GroupMergerOptions, sink: BlockSink) {
    const { channels: m, sampleRateHz: fs, holdMs, members } = options;
    if (!Number.isInteger(m) || m < 1 || m > 65535) throw new RangeError(`GroupMerger: channels must be an integer in [1, 65535], got ${m}`);
    if (!(Number.isFinite(fs) && fs > 0 && fs <= 1e6)) throw new RangeError(`GroupMerger: sampleRateHz must be in (0, 1e6], got ${fs}`);
    if (!(Number.isFinite(holdMs) && holdMs > 0 && holdMs <= 60_000)) throw new RangeError(`GroupMerger: holdMs must be in (0, 60000], got ${holdMs}`);
    const maxBlock = options.maxBlockFrames ?? 1024;
    if (!Number.isInteger(maxBlock) || maxBlock < 1 || maxBlock > 1 << 20) throw new RangeError(`GroupMerger: maxBlockFrames must be an integer in [1, 2^20], got ${maxBlock}`);
    const marginMs = options.marginMs ?? 100;
    if (!(Number.isFinite(marginMs) && marginMs >= 0 && marginMs <= 60_000)) throw new RangeError(`GroupMerger: marginMs must be in [0, 60000], got ${marginMs}`);
    if (!Array.isArray(members) || members.length < 1 || members.length > 1024) throw new RangeError('GroupMerger: members must list 1–1024 members');
    this.channels = m;
    this.sampleRateHz = fs;
    this.holdMs = holdMs;
    this.maxBlockFrames = maxBlock;
    let cap = 1;
    const need = Math.ceil((fs * (holdMs + marginMs)) / 1000) + maxBlock;
    while (cap < need) cap *= 2;
    if (cap > 1 << 30) throw new RangeError(`GroupMerger: a ring of ${need} samples is too long`);
    this.bufferSamples = cap;
    this.#mask = cap - 1;
    this.#piece = Math.max(1, cap / 4);
    const bound = options.clockBoundSamples ?? cap;
    if (!Number.isInteger(bound) || bound < 1) throw new RangeError(`GroupMerger: clockBoundSamples must be a whole number ≥ 1, got ${bound}`);
    this.clockBoundSamples = bound;
    this.streamId = options.streamId ?? 0;
    this.warnAboveUs = options.warnAboveUs ?? 1e6 / (10 * 6000);
    this.warnDriftPpm = options.warnDriftPpm ?? 1;
    this.silentAfterMs = options.silentAfterMs ?? Math.max(2 * holdMs, 1000);
    this.#markResolutionMs = holdMs / (MARK_SLOTS / 2);
    this.#sink = sink;

    const fedBy = new Int32Array(m).fill(-1);
    const withRef = members.filter((x) => x.referenceChannel !== undefined).length;
    this.#refBase = withRef >= 2 ? members.findIndex((x) => x.referenceChannel !== undefined) : -1;
    this.#members = members.map((mem, i) => {
      const at = `GroupMerger: members[${i}] (${mem.name})`;
      if (!Array.isArray(mem.channels) || !Array.isArray(mem.positions) || mem.channels.length !== mem.positions.length || mem.channels.length < 1) {
        throw new RangeError(`${at}: channels and positions must be lists of equal, non-zero length`);
      }
      const seen = new Set<number>();
      for (const c of mem.channels) {
        if (!Number.isInteger(c) || c < 0 || c > 65534 || seen.has(c)) throw new RangeError(`${at}: channel ${c} is not a distinct whole number in [0, 65534]`);
        seen.add(c);
      }
      for (const p of mem.positions) {
        if (!Number.isInteger(p) || p < 0 || p >= m) throw new RangeError(`${at}: position ${p} is outside [0, ${m - 1}]`);
        if (fedBy[p] >= 0) throw new RangeError(`${at}: position ${p} is already fed by members[${fedBy[p]}]`);
        fedBy[p] = i;
      }
      const ref = mem.referenceChannel;
      if (ref !== undefined && (!Number.isInteger(ref) || ref < 0 || ref > 65534)) throw new RangeError(`${at}: referenceChannel ${ref} is not a whole number in [0, 65534]`);
      const stored = [...mem.channels];
      let refSlot = -1;
      if (ref !== undefined) {
        refSlot = stored.indexOf(ref);
        if (refSlot < 0) {
          refSlot = stored.length;
          stored.push(ref);
        }
      }
      const useRef = ref !== undefined && this.#refBase >= 0 && i !== this.#refBase;
      return {
        name: String(mem.name),
        stored: Int32Array.from(stored),
        positions: Int32Array.from(mem.positions),
        refSlot: this.#refBase >= 0 ? refSlot : -1,
        maxChannel: Math.max(...stored),
        ring: new Float32Array(stored.length * cap),
        flags: new Uint8Array(cap),
        arrival: new ArrivalDrift({ ...options.arrival, sampleRateHz: fs }),
        reference: useRef ? new ReferenceOffset({ ...options.reference, sampleRateHz: fs }) : null,
        first: NaN,
        end: NaN,
        offClock: false,
        offClockEnd: NaN,
        lastPushMs: NaN,
        wasAbsent: false,
        samples: 0,
        gaps: 0,
        gapSamples: 0,
        absentSpans: 0,
        absentSamples: 0,
        lateSamples: 0,
        offClockBlocks: 0,
        offClockSamples: 0,
        rejoins: 0,
        beforeStart: 0,
        discontinuities: 0,
        dropped: { channels: 0, rate: 0, malformed: 0 },
        lastDrop: null,
      } satisfies Member;
    });
    const unfed = fedBy.indexOf(-1);
    if (unfed >= 0) throw new RangeError(`GroupMerger: no member feeds position ${unfed}`);
    this.#kind = new Uint8Array(members.length);
    this.#refScratchBase = new Float32Array(this.#refBase >= 0 ? maxBlock : 0);
    this.#refScratch = new Float32Array(this.#refBase >= 0 ? maxBlock : 0);
  }

  /**
   * One block of member `member`'s own stream (its channels, its sample clock shared with the
   * others). Refused blocks are counted by reason, never thrown.
   * @param nowMs arrival time on the local monotonic clock, ms
   */
  push(member: number, block: Block, nowMs = performance.now()): void {
    const m = this.#member(member);
    const frames = block.frames;
    if (block.sampleRateHz !== this.sampleRateHz) {
      this.#drop(m, 'rate', `${block.sampleRateHz} Hz blocks refused: the array runs at ${this.sampleRateHz} Hz`);
      return;
    }
    if (!Number.isInteger(block.channels) || block.channels < 1 || block.channels <= m.maxChannel) {
      this.#drop(m, 'channels', `${block.channels}-channel blocks refused: its mapping reads channel ${m.maxChannel}`);
      return;
    }
    if (!Number.isSafeInteger(block.sampleIndex) || block.sampleIndex < 0 || !Number.isInteger(frames) || frames < 0 || !(block.data instanceof Float32Array) || block.data.length < block.channels * frames) {
      this.#drop(m, 'malformed', 'a block with a bad sample index, length or data was refused');
      return;
    }
    if (frames === 0) return;
    m.lastPushMs = nowMs;
    if (block.gap) {
      m.gaps++;
      m.gapSamples += frames;
    } else m.samples += frames;
    if (block.discontinuity) {
      m.discontinuities++;
      m.arrival.reset();
      m.reference?.reset();
    }
    const offClockBefore = m.offClockSamples;
    for (let off = 0; off < frames; off += this.#piece) this.#pushPiece(m, block, off, Math.min(this.#piece, frames - off), nowMs);
    if (m.offClockSamples > offClockBefore) m.offClockBlocks++;
    this.#releaseReady(nowMs);
  }

  /**
   * The media time of one packet or frame of a member and when it arrived (method (a) of the drift
   * estimate). Feed it before any jitter buffer, with the packet's own first sample index.
   */
  timing(member: number, sampleIndex: number, arrivalMs: number): void {
    this.#member(member).arrival.add(sampleIndex, arrivalMs);
  }

  /** Releases what the hold time allows and starts the group once the start wait is over. */
  tick(nowMs = performance.now()): void {
    this.#releaseReady(nowMs);
  }

  /** Releases everything buffered (members absent where they have no samples), e.g. at shutdown. */
  flush(): void {
    if (!this.#running) {
      if (!this.#members.some((m) => !Number.isNaN(m.end))) return;
      this.#start();
    }
    if (this.#lead > this.#t) this.#release(this.#lead, false);
  }

  #member(i: number): Member {
    const m = this.#members[i];
    if (!Number.isInteger(i) || m === undefined) throw new RangeError(`GroupMerger: no member ${i} (${this.#members.length} members)`);
    return m;
  }

  #drop(m: Member, reason: GroupDropReason, detail: string): void {
    m.dropped[reason]++;
    m.lastDrop = `member ${m.name}: ${detail}`;
  }

  /** Samples [off, off + n) of the block. */
  #pushPiece(m: Member, block: Block, off: number, n: number, nowMs: number): void {
    const s = block.sampleIndex + off;
    if (!this.#running) {
      if (Number.isNaN(m.end) || s !== m.end) {
        if (!Number.isNaN(m.end)) m.beforeStart += m.end - m.first;
        m.first = s;
      }
      this.#write(m, block, off, s, n);
      m.end = s + n;
      if (m.end - m.first > this.bufferSamples) {
        m.beforeStart += m.end - this.bufferSamples - m.first;
        m.first = m.end - this.bufferSamples;
      }
      if (Number.isNaN(this.#firstArrivalMs)) this.#firstArrivalMs = nowMs;
      this.#advanceLead(m.end, nowMs);
      if (this.#members.every((x) => !Number.isNaN(x.end))) this.#start();
      return;
    }
    const t = this.#t;
    const lead = Math.max(t, this.#lead);
    const bound = this.clockBoundSamples;
    // A gap block continuing the member's previous one (its sequencer zero-filling an outage longer
    // than the ring) is taken, late where its span is gone; any other block must land within the
    // bound of the group clock.
    const fill = block.gap && s === m.end && !m.offClock;
    if (!fill && !(s + n > t - bound && s < lead + bound)) {
      m.offClock = true;
      m.offClockEnd = s + n;
      if (this.#wholeGroupJumped(nowMs)) {
        // This piece begins the new start instead of being dropped.
        this.#resync();
        this.#pushPiece(m, block, off, n, nowMs);
        return;
      }
      m.offClockSamples += n;
      return;
    }
    if (m.offClock) {
      m.offClock = false;
      m.rejoins++;
    } else if (!Number.isNaN(m.end) && s !== m.end) m.rejoins++;
    // Room in the ring: a member more than the ring ahead of t forces the others' release.
    if (s + n - this.#t > this.bufferSamples) this.#release(s + n - this.bufferSamples, true);
    const t2 = this.#t;
    // Before this block, from the member's last sample (or from t, for a member that was behind, off
    // the clock or new): zeros, flagged. A jump forward needs no discontinuity flag for this.
    const holeStart = Number.isNaN(m.end) ? t2 : Math.max(m.end, t2);
    if (s > holeStart) this.#zeroRange(m, holeStart, s);
    if (s < t2) {
      const early = Math.min(s + n, t2) - s;
      if (!block.gap) {
        const before = Math.max(0, Math.min(s + early, this.#startSample) - s);
        m.beforeStart += before;
        m.lateSamples += early - before;
      }
      if (early < n) this.#write(m, block, off + early, s + early, n - early);
    } else this.#write(m, block, off, s, n);
    m.end = s + n;
    this.#advanceLead(m.end, nowMs);
  }

  /** Copies samples [off, off + n) of the block's stored channels to sample indices [s, s + n). */
  #write(m: Member, block: Block, off: number, s: number, n: number): void {
    const cap = this.bufferSamples;
    const mask = this.#mask;
    const frames = block.frames;
    const data = block.data;
    const stored = m.stored;
    const ring = m.ring;
    const flag = block.gap ? 1 : 0;
    const start = s & mask;
    const first = Math.min(n, cap - start);
    for (let c = 0; c < stored.length; c++) {
      const src = stored[c] * frames + off;
      const dst = c * cap;
      for (let i = 0; i < first; i++) ring[dst + start + i] = data[src + i];
      for (let i = first; i < n; i++) ring[dst + i - first] = data[src + i];
    }
    m.flags.fill(flag, start, start + first);
    if (first < n) m.flags.fill(flag, 0, n - first);
  }

  /** Zeros flagged as standing in over sample indices [from, to), to − from ≤ the ring. */
  #zeroRange(m: Member, from: number, to: number): void {
    const cap = this.bufferSamples;
    const start = from & this.#mask;
    const n = to - from;
    const first = Math.min(n, cap - start);
    for (let c = 0; c < m.stored.length; c++) {
      m.ring.fill(0, c * cap + start, c * cap + start + first);
      if (first < n) m.ring.fill(0, c * cap, c * cap + n - first);
    }
    m.flags.fill(1, start, start + first);
    if (first < n) m.flags.fill(1, 0, n - first);
  }

  /** The leading edge moved to `end`: note when, for the hold time (marks closer than the resolution merge). */
  #advanceLead(end: number, nowMs: number): void {
    if (!(end > this.#lead) && !Number.isNaN(this.#lead)) return;
    this.#lead = end;
    if (this.#markCount > 0) {
      const last = (this.#markHead + this.#markCount - 1) % MARK_SLOTS;
      if (nowMs - this.#markMs[last] < this.#markResolutionMs || this.#markCount === MARK_SLOTS) {
        this.#markEnd[last] = end;
        return;
      }
    }
    const slot = (this.#markHead + this.#markCount) % MARK_SLOTS;
    this.#markEnd[slot] = end;
    this.#markMs[slot] = nowMs;
    this.#markCount++;
  }

  /** Begins at the largest first sample among the members that arrived. */
  #start(): void {
    let t = -Infinity;
    for (const m of this.#members) if (!Number.isNaN(m.end) && m.first > t) t = m.first;
    for (const m of this.#members) {
      if (Number.isNaN(m.end)) continue;
      m.beforeStart += Math.min(m.end, t) - m.first;
    }
    this.#t = t;
    this.#startSample = t;
    this.#running = true;
    this.#popMarks();
  }

  /** Every live member (frames within silentAfterMs) is off the clock, at positions that agree. */
  #wholeGroupJumped(nowMs: number): boolean {
    let lo = Infinity;
    let hi = -Infinity;
    for (const m of this.#members) {
      if (!(nowMs - m.lastPushMs <= this.silentAfterMs)) continue;
      if (!m.offClock) return false;
      lo = Math.min(lo, m.offClockEnd);
      hi = Math.max(hi, m.offClockEnd);
    }
    return hi - lo <= this.clockBoundSamples;
  }

  /** The group jumped: release what is on the old clock, then wait for a new start. */
  #resync(): void {
    if (this.#lead > this.#t) this.#release(this.#lead, false);
    this.#resyncs++;
    this.#running = false;
    this.#firstArrivalMs = NaN;
    this.#lead = NaN;
    this.#markCount = 0;
    this.#pendingDiscontinuity = true;
    for (const m of this.#members) {
      m.end = NaN;
      m.first = NaN;
      m.offClock = false;
      m.wasAbsent = false;
      m.reference?.reset();
    }
  }

  #releaseReady(nowMs: number): void {
    if (!this.#running) {
      if (!Number.isNaN(this.#firstArrivalMs) && nowMs - this.#firstArrivalMs >= this.holdMs) this.#start();
      else return;
    }
    // Every member has it (an off-clock member counts as not having it: it is waited for like a
    // silent one, so it rejoins without losing a block).
    let limit = Infinity;
    for (const m of this.#members) {
      const e = m.offClock || Number.isNaN(m.end) ? -Infinity : m.end;
      if (e < limit) limit = e;
    }
    // Hold: the newest mark at least holdMs old bounds what has waited long enough.
    const old = nowMs - this.holdMs;
    for (let i = 0; i < this.#markCount; i++) {
      const slot = (this.#markHead + i) % MARK_SLOTS;
      if (this.#markMs[slot] > old) break;
      if (this.#markEnd[slot] > limit) limit = this.#markEnd[slot];
    }
    if (limit > this.#lead) limit = this.#lead;
    if (limit > this.#t) this.#release(limit, false);
  }

  /** Releases [t, limit) in blocks; `forced`: because a member ran a ring ahead. */
  #release(limit: number, forced: boolean): void {
    const members = this.#members;
    const kind = this.#kind;
    const mask = this.#mask;
    const cap = this.bufferSamples;
    while (this.#t < limit) {
      const t = this.#t;
      let u = Math.min(t + this.maxBlockFrames, limit);
      let missing = false;
      for (let i = 0; i < members.length; i++) {
        const m = members[i];
        if (m.offClock || !(m.end > t)) {
          kind[i] = NONE;
          missing = true;
          continue;
        }
        if (m.end < u) u = m.end;
        const flags = m.flags;
        const f = flags[t & mask];
        let j = t + 1;
        while (j < u && flags[j & mask] === f) j++;
        u = j;
        kind[i] = f === 0 ? REAL : ZEROS;
      }
      const n = u - t;
      const M = this.channels;
      const data = new Float32Array(M * n);
      let absent: Uint8Array | null = null;
      let real = false;
      for (let i = 0; i < members.length; i++) {
        const m = members[i];
        const pos = m.positions;
        if (kind[i] === REAL) {
          real = true;
          m.wasAbsent = false;
          const start = t & mask;
          const first = Math.min(n, cap - start);
          for (let c = 0; c < pos.length; c++) {
            const src = c * cap;
            const dst = pos[c] * n;
            for (let k = 0; k < first; k++) data[dst + k] = m.ring[src + start + k];
            for (let k = first; k < n; k++) data[dst + k] = m.ring[src + k - first];
          }
        } else {
          // Zeros standing in (the ring holds zeros for flagged samples; nothing to copy).
          absent ??= new Uint8Array(M);
          for (let c = 0; c < pos.length; c++) absent[pos[c]] = 1;
          if (!m.wasAbsent) m.absentSpans++;
          m.wasAbsent = true;
          m.absentSamples += n;
        }
      }
      if (missing) {
        this.#holdReleases++;
        if (forced) this.#forcedReleases++;
      }
      if (this.#refBase >= 0) this.#feedReferences(t, n);
      const discontinuity = this.#pendingDiscontinuity;
      this.#pendingDiscontinuity = false;
      this.#t = u;
      this.#releasedSamples += n;
      this.#releasedBlocks++;
      this.#popMarks();
      this.#sink({ streamId: this.streamId, sampleIndex: t, sampleRateHz: this.sampleRateHz, channels: M, frames: n, data, gap: !real, discontinuity, absent });
    }
  }

  /** Cuts the references out of the span [t, t + n) and hands them to each member's estimator. */
  #feedReferences(t: number, n: number): void {
    const members = this.#members;
    const kind = this.#kind;
    const base = members[this.#refBase];
    const baseReal = kind[this.#refBase] === REAL;
    if (baseReal) this.#copyReference(base, t, n, this.#refScratchBase);
    for (let i = 0; i < members.length; i++) {
      const m = members[i];
      if (!m.reference) continue;
      if (!baseReal || kind[i] !== REAL) {
        m.reference.skip();
        continue;
      }
      this.#copyReference(m, t, n, this.#refScratch);
      m.reference.push(this.#refScratchBase, this.#refScratch, n, t);
    }
  }

  #copyReference(m: Member, t: number, n: number, out: Float32Array): void {
    const cap = this.bufferSamples;
    const src = m.refSlot * cap;
    const mask = this.#mask;
    for (let k = 0; k < n; k++) out[k] = m.ring[src + ((t + k) & mask)];
  }

  #popMarks(): void {
    while (this.#markCount > 0 && this.#markEnd[this.#markHead] <= this.#t) {
      this.#markHead = (this.#markHead + 1) % MARK_SLOTS;
      this.#markCount--;
    }
  }

  status(nowMs = performance.now()): GroupStatus {
    const fs = this.sampleRateHz;
    const members = this.#members;
    let lead = -Infinity;
    for (const m of members) if (!m.offClock && m.end > lead) lead = m.end;
    const drifts = members.map((m) => m.arrival.estimate());
    const driftBase = drifts.findIndex((d) => d !== null);
    const out = members.map((m, i): GroupMemberStatus => {
      const d = drifts[i];
      const relativePpm = d && driftBase >= 0 && driftBase !== i ? d.ppm - drifts[driftBase]!.ppm : null;
      const r = m.reference?.estimate() ?? null;
      const hasEnd = !Number.isNaN(m.end);
      const ago = Number.isNaN(m.lastPushMs) ? null : Math.max(0, (nowMs - m.lastPushMs) / 1000);
      const status: GroupMemberStatus = {
        name: m.name,
        samples: m.samples,
        nextSample: hasEnd ? m.end : null,
        lagMs: hasEnd && !m.offClock && lead > -Infinity ? ((lead - m.end) / fs) * 1000 : null,
        gaps: m.gaps,
        gapSamples: m.gapSamples,
        absentSpans: m.absentSpans,
        absentSamples: m.absentSamples,
        lateSamples: m.lateSamples,
        lastFrameAgoS: ago,
        offClock: m.offClock,
        offClockBlocks: m.offClockBlocks,
        offClockSamples: m.offClockSamples,
        rejoins: m.rejoins,
        beforeStart: m.beforeStart,
        discontinuities: m.discontinuities,
        dropped: { ...m.dropped },
        lastDrop: m.lastDrop,
        drift: d ? { ppm: d.ppm, relativePpm, offsetMs: d.offsetMs, points: d.points, spanS: d.spanS } : null,
        reference: r ? { offsetUs: r.offsetUs, driftPpm: r.driftPpm, quality: r.quality, windows: r.windows, spanS: r.spanS } : null,
        warning: null,
      };
      status.warning = this.#warning(m, status, i === driftBase ? null : members[driftBase]?.name ?? null);
      return status;
    });
    return {
      state: this.#running ? 'running' : 'waiting',
      nextSample: this.#running ? this.#t : null,
      leadSample: lead > -Infinity ? lead : null,
      releasedSamples: this.#releasedSamples,
      releasedBlocks: this.#releasedBlocks,
      holdReleases: this.#holdReleases,
      forcedReleases: this.#forcedReleases,
      resyncs: this.#resyncs,
      holdMs: this.holdMs,
      bufferSamples: this.bufferSamples,
      referenceMember: this.#refBase >= 0 ? members[this.#refBase].name : null,
      driftBaseMember: driftBase >= 0 ? members[driftBase].name : null,
      members: out,
    };
  }

  /** The member's problems in plain words, most important first; null when there are none. */
  #warning(m: Member, s: GroupMemberStatus, driftBase: string | null): string | null {
    const notes: string[] = [];
    const refBase = this.#refBase >= 0 ? this.#members[this.#refBase].name : '';
    if (s.offClock) {
      const apart = (m.offClockEnd - (this.#running ? this.#t : m.offClockEnd)) / this.sampleRateHz;
      notes.push(`off the group's clock (its samples are ${fmt(apart, 1)} s from the others'): its blocks are dropped`);
    }
    if (s.lastFrameAgoS === null) notes.push('no frames yet');
    else if (s.lastFrameAgoS * 1000 > this.silentAfterMs) notes.push(`no frames for ${s.lastFrameAgoS.toFixed(1)} s`);
    if (s.reference && Math.abs(s.reference.offsetUs) > this.warnAboveUs) {
      notes.push(`offset ${fmt(s.reference.offsetUs, 1)} µs from ${refBase} exceeds ${this.warnAboveUs.toFixed(1)} µs (a tenth of a period at the band's top): set its offsetUs or lock the units to one clock`);
    }
    const refDrift = s.reference?.driftPpm ?? null;
    if (refDrift !== null && Math.abs(refDrift) > this.warnDriftPpm) {
      notes.push(`clock drifts ${fmt(refDrift, 1)} ppm against ${refBase} (${fmt(Math.abs(refDrift), 1)} µs more each second): lock the units to one clock`);
    } else if (refDrift === null && s.drift?.relativePpm != null && Math.abs(s.drift.relativePpm) > this.warnDriftPpm) {
      notes.push(`packets arrive at ${fmt(s.drift.relativePpm, 1)} ppm against ${driftBase}: the clocks are not locked`);
    }
    if (m.lastDrop) notes.push(m.lastDrop);
    return notes.length > 0 ? notes.join('; ') : null;
  }
}

function fmt(x: number, digits: number): string {
  const v = x.toFixed(digits);
  return x > 0 ? `+${v}` : v;
}

/**
 * Each array position's extra delay from its member's measured offset (the array file's
 * `inputs[].offsetUs`), µs, to add to the calibration delay: positions of a member without an
 * offset get 0.
 * @returns length M
 */
export function memberDelaysUs(inputs: InputMapping[], m: number): number[] {
  if (!Number.isInteger(m) || m < 0) throw new RangeError(`memberDelaysUs: M must be a whole number, got ${m}`);
  const out = new Array<number>(m).fill(0);
  for (const input of inputs) {
    const d = input.offsetUs ?? 0;
    if (!Number.isFinite(d)) throw new RangeError(`memberDelaysUs: ${input.source}: offsetUs must be finite, got ${d}`);
    for (const p of input.positions) {
      if (!Number.isInteger(p) || p < 0 || p >= m) throw new RangeError(`memberDelaysUs: ${input.source}: position ${p} is outside [0, ${m - 1}]`);
      out[p] = d;
    }
  }
  return out;
}
