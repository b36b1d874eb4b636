/**
 * One RTP session's packets → a contiguous block stream on one sample clock. Pure logic: the
 * socket is elsewhere (rtp-receiver.ts); packets come in with their arrival time.
 *
 * Source (RFC 3550 §8, Appendix A.1): the stream follows one SSRC. A packet of another SSRC is held
 * as a candidate (at most MAX_CANDIDATES SSRCs, one packet each, the oldest dropped first); when a
 * candidate's next packet in sequence follows (MIN_SEQUENTIAL = 2, A.1's probation) with no packet
 * of the current SSRC between them, that SSRC becomes the stream's: at the start, the first
 * source; later, the sender is taken to have restarted: the old timeline is flushed, `ssrcChanges`
 * counted, and the new one starts with `discontinuity: true`. One stray packet, or a second sender
 * interleaved with the current one, never takes over (its packets are counted `probation`). SSRC
 * changes are limited like resyncs (`resyncLimit` within `resyncWindowMs`, or once the current SSRC
 * has been silent for resyncWindowMs / resyncLimit).
 *
 * Sequence numbers (A.1, ./sequence.ts): extended across wraps (`seqWraps`); a jump of MAX_DROPOUT
 * (3000) or more packets drops the packet (`sequence_jump`) unless its successor follows, which
 * restarts the count (`seqRestarts`). Packets fewer than A.1's MAX_MISORDER (100) or the jitter
 * buffer's packet bound, whichever is larger, behind the highest are reordered or duplicates, so that
 * a packet the buffer may still use is never refused as a jump.
 *
 * Timestamps → sample index: timestamps are unwrapped against the highest placed one (signed
 * 32-bit difference; `tsWraps` counts the wraps of the 32-bit value) into a double, exact to 2⁵³.
 * RFC 7273: with `a=mediaclk:direct=OFFSET` the first packet's sample index is (timestamp −
 * OFFSET) mod 2³², the following ones continue it unwrapped, so units locked to one PTP
 * grandmaster share one sample clock (within the same 2³²-sample period: 24.9 h at 48 kHz).
 * Without mediaclk the sample index is the unwrapped timestamp itself (the first packet's raw value).
 *
 * Placement, jitter buffer and gaps: ../sequencer.ts, with the extended sequence number as its
 * sequence and the sample index as its position. A packet that continues the timeline is released
 * at once; one behind a hole waits until the oldest waiting packet is `jitterMs` old, or until more
 * than min(1024, max(16, ⌈2·jitterMs / ptime⌉)) packets wait (ptime from the SDP, 1 ms when absent;
 * the queue's bound); then the hole is lost and becomes zeros of exactly its length (`gap: true`).
 * Duplicates are dropped and counted; packets for a span already zero-filled are `late`, dropped.
 * A jump of more than `maxGapSeconds` (default 10 s) is never zero-filled: it is a resync
 * (`discontinuity: true`) once the next packet confirms it. Zero-fill is bounded by the wall clock
 * as the sequencer's header describes (a few packets cannot create unbounded zeros).
 *
 * Interarrival jitter: RFC 3550 §6.4.1 / A.8, J += (|D| − J)/16 over packets of the current SSRC,
 * reported in milliseconds.
 *
 * Batches: inside {@link RtpStream.batch} (the receiver's drain) contiguous packets are decoded
 * straight into a staging run and published as one block of up to COALESCE_FRAMES per channel when
 * the batch ends, so the stages after ingest run once per batch, not once per 6-sample packet.
 * Packets released together by tick() or flush() are joined the same way; outside those, every
 * placed packet is its own block.
 */
import type { Block, BlockSink } from '../../../shared/types.ts';
import { COALESCE_FRAMES } from '../ingest-hub.ts';
import { Sequencer, type ResyncStorm, type SequencerCounters, type SequencerOptions } from '../sequencer.ts';
import { checkRtpPayload, createRtpPacket, decodeLinearPcm, parseRtpPacket, RTP_PACKET_REJECT_REASONS, type RtpPacket } from './packet.ts';
import type { RtpSessionDescription } from './sdp.ts';
import { MAX_DROPOUT, MAX_MISORDER, RtpSequence } from './sequence.ts';

const U32 = 0x1_0000_0000;
/** Most packets the jitter buffer holds (the sequencer's own limit). */
export const MAX_BUFFER_PACKETS = 1024;
/** A candidate SSRC's packet not followed by its successor within this long is dropped, ms. */
export const CANDIDATE_EXPIRY_MS = 1000;
/** SSRCs waiting for their second packet at once (one packet each; the queue's bound). */
export const MAX_CANDIDATES = 4;
/** Largest packet kept as a candidate (a UDP datagram). */
const MAX_PACKET_BYTES = 65536;

/** A packet of an SSRC that is not (yet) the stream's, waiting for its successor. */
interface Candidate {
  ssrc: number;
  sequence: number;
  arrivalMs: number;
  remote: string;
  length: number;
  bytes: Uint8Array;
}

/** Reasons a packet is refused, all counted in `rejected`. */
export const RTP_STREAM_REJECT_REASONS = [...RTP_PACKET_REJECT_REASONS, 'probation', 'sequence_jump', 'out_of_range', 'ahead_of_clock', 'resync_limited', 'queue_full'] as const;
export type RtpStreamRejectReason = (typeof RTP_STREAM_REJECT_REASONS)[number];

export interface RtpStreamOptions {
  /** Longest a packet behind a hole waits for it, milliseconds (ingest.rtp.jitterMs, 0–1000). */
  jitterMs: number;
  /** The input's rate: must equal the SDP's (a mismatch throws at construction). */
  sampleRateHz: number;
  /** Block.streamId of this stream's blocks (default 0). */
  streamId?: number;
  /** Larger clock jumps resynchronise instead of zero-filling, seconds (default 10). */
  maxGapSeconds?: number;
  /** Zero-fill beyond what the wall clock covers, at most, seconds (default 1; see sequencer.ts). */
  jumpToleranceSeconds?: number;
  /** Resyncs (and SSRC changes) allowed within resyncWindowMs (default 4). */
  resyncLimit?: number;
  /** Default 30 000 ms. */
  resyncWindowMs?: number;
  /** Time origin of `atS` in status (default: construction time, performance.now()). */
  startMs?: number;
}

/**
 * Called for every packet placed on the timeline (not for duplicates, late or refused packets)
 * with its first sample's index and its arrival time (ms, the receive thread's clock mapped to
 * this thread's performance.now()): the raw material of drift measurement.
 */
export type RtpTimingCallback = (sampleIndex: number, arrivalMs: number) => void;

export interface RtpRejectNote {
  reason: RtpStreamRejectReason;
  detail: string;
  /** Seconds since startMs. */
  atS: number;
}

export interface RtpStreamStatus {
  name: string;
  streamId: number;
  encoding: 'L16' | 'L24';
  payloadType: number;
  sampleRateHz: number;
  channels: number;
  packetTimeMs: number | null;
  /** Datagrams handed to the stream, valid or not (queue drops not included). */
  datagrams: number;
  /** The SSRC followed now (null before the first confirmed packet). */
  ssrc: number | null;
  ssrcChanges: number;
  /** Packets whose samples reached the output. */
  packets: number;
  /** Samples per channel that reached the output as data (zeros of gaps not included). */
  samples: number;
  /** Packets whose samples became zeros (never arrived, or arrived too late). */
  lost: number;
  duplicates: number;
  /** Packets that arrived after one with a higher sequence number and were put back in order (RFC 4737 sense). */
  reordered: number;
  /** Packets that arrived after their span had been zero-filled (also counted in `lost`). */
  late: number;
  gaps: number;
  gapSamples: number;
  resyncs: number;
  /** Wraps of the 16-bit sequence number (RFC 3550 A.1 cycles), over every SSRC so far. */
  seqWraps: number;
  /** Restarts of the sequence count after a confirmed jump (A.1 bad_seq). */
  seqRestarts: number;
  /** Wraps of the 32-bit timestamp, over every SSRC so far. */
  tsWraps: number;
  /** Sample index of the first sample delivered on the current timeline, or null. */
  firstSampleIndex: number | null;
  /** Sample index the next block will start at, or null before the first. */
  nextSampleIndex: number | null;
  /** RFC 3550 A.8 interarrival jitter, milliseconds. */
  jitterMs: number;
  bufferedPackets: number;
  tsRefclk: string | null;
  mediaClockOffset: number | null;
  /** "address:port" of the last packet of the current SSRC, or null. */
  remote: string | null;
  rejected: Record<RtpStreamRejectReason, number>;
  lastRejected: RtpRejectNote | null;
  /** Confirmed jumps refused at the resync limit (null when none within the window). */
  resyncStorm: { sinceS: number; lastS: number; framesDropped: number } | null;
  lastPacketAgoS: number | null;
}

type Counted = Pick<SequencerCounters, 'framesAccepted' | 'samplesAccepted' | 'framesLost' | 'framesDuplicated' | 'framesReordered' | 'framesLate' | 'gaps' | 'gapSamples' | 'resyncs'>;
const COUNTED: (keyof Counted)[] = ['framesAccepted', 'samplesAccepted', 'framesLost', 'framesDuplicated', 'framesReordered', 'framesLate', 'gaps', 'gapSamples', 'resyncs'];

const hex = (ssrc: number) => `0x${ssrc.toString(16).padStart(8, '0')}`;

export class RtpStream {
  readonly description: RtpSessionDescription;
  readonly #sink: BlockSink;
  readonly #onTiming: RtpTimingCallback | null;
  readonly #streamId: number;
  readonly #fs: number;
  readonly #channels: number;
  readonly #bytesPerSample: 2 | 3;
  readonly #frameBytes: number;
  readonly #seqOpts: SequencerOptions;
  readonly #maxMisorder: number;
  readonly #t0Ms: number;
  readonly #pkt: RtpPacket = createRtpPacket();

  readonly #rejected = Object.fromEntries(RTP_STREAM_REJECT_REASONS.map((r) => [r, 0])) as Record<RtpStreamRejectReason, number>;
  #lastRejected: RtpRejectNote | null = null;
  /** Counters of the timelines of earlier SSRCs. */
  readonly #retired: Counted = { framesAccepted: 0, samplesAccepted: 0, framesLost: 0, framesDuplicated: 0, framesReordered: 0, framesLate: 0, gaps: 0, gapSamples: 0, resyncs: 0 };
  #retiredFar = { outOfRange: 0, aheadOfClock: 0, resyncLimited: 0 };

  /** The current SSRC's timeline (null before the first). */
  #seq: Sequencer | null = null;
  #ssrc: number | null = null;
  #ssrcChanges = 0;
  readonly #changeTimes: Float64Array;
  #changeNext = 0;
  #lastPacketMs = -Infinity;
  #datagrams = 0;
  #remote: string | null = null;
  #firstSampleIndex: number | null = null;
  /** The next block starts a new timeline (after an SSRC change). */
  #pendingDiscontinuity = false;

  /** RFC 3550 A.1 state of the current SSRC. */
  #sequence: RtpSequence;
  /** Wraps and restarts of earlier SSRCs' sequence numbers. */
  #seqWrapsBefore = 0;
  #seqRestartsBefore = 0;

  // Timestamp unwrap of the current SSRC.
  #anchored = false;
  #maxTs = 0;
  #maxTsIndex = 0;
  #tsWraps = 0;

  // RFC 3550 A.8 interarrival jitter, timestamp units.
  #jitter = 0;
  #prevTransit = 0;
  #haveTransit = false;

  /** Packets of other SSRCs waiting for their successors, oldest first; slots keep their buffers. */
  readonly #cands: Candidate[] = [];
  #candCount = 0;

  // The run being assembled inside a batch (planar, stride COALESCE_FRAMES).
  #stage: Float32Array | null = null;
  #runFrames = 0;
  #runStart = 0;
  #runDiscontinuity = false;
  #batching = false;

  /**
   * @param description the session's SDP, parsed
   * @param opts jitter buffer and clock rules; `sampleRateHz` is the input's, checked against the SDP
   * @param sink receives the blocks (planar float32, sampleIndex on the stream's clock)
   * @param onTiming optional: first sample index and arrival time of every placed packet
   * @throws RangeError when the SDP's rate differs from the input's, or an option is out of range
   */
  constructor(description: RtpSessionDescription, opts: RtpStreamOptions, sink: BlockSink, onTiming?: RtpTimingCallback) {
    const d = description;
    if (opts.sampleRateHz !== d.sampleRateHz) {
      throw new RangeError(`RTP session "${d.name}" is ${d.sampleRateHz} Hz (its SDP), the input is ${opts.sampleRateHz} Hz (input.sampleRateHz): they must be equal`);
    }
    if (!(opts.jitterMs >= 0 && opts.jitterMs <= 1000)) throw new RangeError(`RTP session "${d.name}": jitterMs ${opts.jitterMs} not in 0–1000`);
    this.description = d;
    this.#sink = sink;
    this.#onTiming = onTiming ?? null;
    this.#streamId = opts.streamId ?? 0;
    this.#fs = d.sampleRateHz;
    this.#channels = d.channels;
    this.#bytesPerSample = d.encoding === 'L24' ? 3 : 2;
    this.#frameBytes = this.#channels * this.#bytesPerSample;
    this.#t0Ms = opts.startMs ?? performance.now();
    const bound = RtpStream.bufferPackets(opts.jitterMs, d.packetTimeMs);
    this.#maxMisorder = Math.max(MAX_MISORDER, bound + 1);
    this.#sequence = new RtpSequence(this.#maxMisorder);
    const resyncLimit = opts.resyncLimit ?? 4;
    this.#seqOpts = {
      reorderWindowFrames: bound,
      reorderHoldMs: opts.jitterMs,
      maxGapSamples: Math.round((opts.maxGapSeconds ?? 10) * this.#fs),
      maxGapBlockFrames: 4096,
      jumpToleranceSamples: Math.round((opts.jumpToleranceSeconds ?? 1) * this.#fs),
      resyncLimit,
      resyncWindowMs: opts.resyncWindowMs ?? 30_000,
    };
    // Checks the options once, here, rather than at the first packet.
    new Sequencer(0, this.#fs, this.#channels, this.#seqOpts, () => {});
    this.#changeTimes = new Float64Array(resyncLimit).fill(-Infinity);
  }

  /** The jitter buffer's bound in packets for a hold time and packet time (ms; null: 1 ms). */
  static bufferPackets(jitterMs: number, packetTimeMs: number | null): number {
    return Math.min(MAX_BUFFER_PACKETS, Math.max(16, Math.ceil((2 * jitterMs) / (packetTimeMs ?? 1))));
  }

  /**
   * Take one datagram. Never throws on bad input: a refused packet is counted by reason.
   * @param arrivalMs arrival time on a monotonic clock (performance.now() of this thread)
   * @param remote "address:port" of the sender, for status
   */
  receive(bytes: Uint8Array, arrivalMs: number, remote = ''): void {
    this.#datagrams++;
    const p = this.#pkt;
    const problem = parseRtpPacket(bytes, p) ?? checkRtpPayload(p, this.description.payloadType, this.#frameBytes);
    if (problem !== null) {
      this.#reject(problem.reason, problem.detail, arrivalMs);
      return;
    }
    if (p.ssrc !== this.#ssrc) {
      this.#otherSsrc(bytes, p, arrivalMs, remote);
      return;
    }
    while (this.#candCount > 0) this.#dropCandidate(0, 'probation', `SSRC ${hex(this.#cands[0].ssrc)} sent a packet but the current SSRC ${hex(this.#ssrc)} went on: not a restart`, arrivalMs);
    this.#accept(bytes, p, arrivalMs, remote);
  }

  /** Count `count` packets refused before they reached this stream (e.g. the receive queue was full). */
  refuse(reason: RtpStreamRejectReason, count: number, detail: string, nowMs = performance.now()): void {
    this.#rejected[reason] += count;
    this.#lastRejected = { reason, detail, atS: (nowMs - this.#t0Ms) / 1000 };
  }

  /** Release packets held too long and expire a candidate SSRC; call every few milliseconds. */
  tick(nowMs: number): void {
    while (this.#candCount > 0 && nowMs - this.#cands[0].arrivalMs >= CANDIDATE_EXPIRY_MS) {
      this.#dropCandidate(0, 'probation', `SSRC ${hex(this.#cands[0].ssrc)} sent one packet and no successor within ${CANDIDATE_EXPIRY_MS} ms`, nowMs);
    }
    // Packets released together (the end of a wait) join into blocks as inside a batch.
    this.batch(() => this.#seq?.tick(nowMs));
  }

  /** Release everything held, filling the holes before it (shutdown, end of a test). */
  flush(): void {
    while (this.#candCount > 0) this.#dropCandidate(0, 'probation', `SSRC ${hex(this.#cands[0].ssrc)} sent one packet and no successor before the end`, this.#cands[0].arrivalMs);
    this.batch(() => this.#seq?.flush());
  }

  /** Receive several packets at once (the receiver's drain): contiguous samples become one block. */
  batch(fn: () => void): void {
    const outer = this.#batching;
    this.#batching = true;
    try {
      fn();
    } finally {
      this.#batching = outer;
      if (!outer) this.#publish();
    }
  }

  status(nowMs = performance.now()): RtpStreamStatus {
    const d = this.description;
    const c = this.#counted();
    const seq = this.#seq;
    const far = this.#far();
    const storm: ResyncStorm | null = seq?.stormAt(nowMs) ?? null;
    const next = seq?.nextSample ?? -1;
    return {
      name: d.name,
      streamId: this.#streamId,
      encoding: d.encoding,
      payloadType: d.payloadType,
      sampleRateHz: d.sampleRateHz,
      channels: d.channels,
      packetTimeMs: d.packetTimeMs,
      datagrams: this.#datagrams,
      ssrc: this.#ssrc,
      ssrcChanges: this.#ssrcChanges,
      packets: c.framesAccepted,
      samples: c.samplesAccepted,
      lost: c.framesLost,
      duplicates: c.framesDuplicated,
      reordered: c.framesReordered,
      late: c.framesLate,
      gaps: c.gaps,
      gapSamples: c.gapSamples,
      resyncs: c.resyncs,
      seqWraps: this.#seqWrapsBefore + this.#sequence.wraps,
      seqRestarts: this.#seqRestartsBefore + this.#sequence.restarts,
      tsWraps: this.#tsWraps,
      firstSampleIndex: this.#firstSampleIndex,
      nextSampleIndex: next < 0 ? null : next,
      jitterMs: (this.#jitter / this.#fs) * 1000,
      bufferedPackets: seq?.heldFrames ?? 0,
      tsRefclk: d.tsRefclk,
      mediaClockOffset: d.mediaClockOffset,
      remote: this.#remote,
      rejected: { ...this.#rejected, out_of_range: far.outOfRange, ahead_of_clock: far.aheadOfClock, resync_limited: this.#rejected.resync_limited + far.resyncLimited },
      lastRejected: this.#lastRejected,
      resyncStorm: storm === null ? null : { sinceS: (storm.sinceMs - this.#t0Ms) / 1000, lastS: (storm.lastMs - this.#t0Ms) / 1000, framesDropped: storm.framesDropped },
      lastPacketAgoS: this.#lastPacketMs === -Infinity ? null : (nowMs - this.#lastPacketMs) / 1000,
    };
  }

  #counted(): Counted {
    const out = { ...this.#retired };
    const now = this.#seq?.counters;
    if (now) for (const k of COUNTED) out[k] += now[k];
    return out;
  }

  #far(): { outOfRange: number; aheadOfClock: number; resyncLimited: number } {
    const r = this.#retiredFar;
    const s = this.#seq?.counters;
    return s ? { outOfRange: r.outOfRange + s.outOfRange, aheadOfClock: r.aheadOfClock + s.aheadOfClock, resyncLimited: r.resyncLimited + s.resyncLimited } : { ...r };
  }

  #reject(reason: RtpStreamRejectReason, detail: string, nowMs: number): void {
    this.#rejected[reason]++;
    this.#lastRejected = { reason, detail, atS: (nowMs - this.#t0Ms) / 1000 };
  }

  /** A packet of an SSRC other than the current one: hold it, or take it as the sender's restart. */
  #otherSsrc(bytes: Uint8Array, p: RtpPacket, arrivalMs: number, remote: string): void {
    const i = this.#findCandidate(p.ssrc);
    if (i >= 0 && p.sequence === ((this.#cands[i].sequence + 1) & 0xffff)) {
      if (!this.#changeAllowed(arrivalMs)) {
        // The candidate is refused; this packet takes its place and may try again.
        this.#dropCandidate(i, 'resync_limited', `SSRC ${hex(p.ssrc)} would replace ${hex(this.#ssrc!)}, but ${this.#changeTimes.length} changes happened within ${this.#seqOpts.resyncWindowMs} ms and ${hex(this.#ssrc!)} is still sending`, arrivalMs);
        this.#hold(bytes, p, arrivalMs, remote);
        return;
      }
      const cand = this.#cands[i];
      // The other candidates lose: one source at a time.
      for (let k = this.#candCount - 1; k >= 0; k--) {
        if (k !== i) this.#dropCandidate(k, 'probation', `SSRC ${hex(this.#cands[k].ssrc)}: SSRC ${hex(p.ssrc)} was confirmed first`, arrivalMs);
      }
      this.#switchTo(p.ssrc, arrivalMs);
      // Both packets start the new timeline: the candidate first, then this one (p is reused, so re-read).
      const first = createRtpPacket();
      const held = cand.bytes.subarray(0, cand.length);
      parseRtpPacket(held, first);
      this.#accept(held, first, cand.arrivalMs, cand.remote);
      this.#candCount = 0;
      parseRtpPacket(bytes, p);
      this.#accept(bytes, p, arrivalMs, remote);
      return;
    }
    if (i >= 0) this.#dropCandidate(i, 'probation', `SSRC ${hex(p.ssrc)} packet ${this.#cands[i].sequence} was not followed by ${(this.#cands[i].sequence + 1) & 0xffff} (RFC 3550 A.1 probation)`, arrivalMs);
    this.#hold(bytes, p, arrivalMs, remote);
  }

  #findCandidate(ssrc: number): number {
    for (let k = 0; k < this.#candCount; k++) if (this.#cands[k].ssrc === ssrc) return k;
    return -1;
  }

  /** Refuse candidate k (counted once, for `reason`); the later ones move up, its buffer goes last. */
  #dropCandidate(k: number, reason: RtpStreamRejectReason, detail: string, nowMs: number): void {
    this.#reject(reason, detail, nowMs);
    const [slot] = this.#cands.splice(k, 1);
    this.#cands.push(slot);
    this.#candCount--;
  }

  /** Keep `p` as its SSRC's candidate (no candidate of that SSRC is held); the oldest makes room. */
  #hold(bytes: Uint8Array, p: RtpPacket, arrivalMs: number, remote: string): void {
    if (this.#candCount === MAX_CANDIDATES) this.#dropCandidate(0, 'probation', `SSRC ${hex(this.#cands[0].ssrc)}: more than ${MAX_CANDIDATES} unconfirmed sources at once`, arrivalMs);
    if (this.#cands.length === this.#candCount) this.#cands.push({ ssrc: 0, sequence: 0, arrivalMs: 0, remote: '', length: 0, bytes: new Uint8Array(MAX_PACKET_BYTES) });
    const c = this.#cands[this.#candCount++];
    c.ssrc = p.ssrc;
    c.sequence = p.sequence;
    c.arrivalMs = arrivalMs;
    c.remote = remote;
    c.length = bytes.length;
    c.bytes.set(bytes);
  }

  #changeAllowed(nowMs: number): boolean {
    if (this.#ssrc === null) return true;
    const times = this.#changeTimes;
    const windowMs = this.#seqOpts.resyncWindowMs;
    if (nowMs - times[this.#changeNext] >= windowMs) return true;
    return nowMs - this.#lastPacketMs >= windowMs / times.length;
  }

  /** Start a new timeline for `ssrc`: the old one is flushed and kept in the counters. */
  #switchTo(ssrc: number, nowMs: number): void {
    const old = this.#seq;
    if (old !== null) {
      old.flush();
      for (const k of COUNTED) this.#retired[k] += old.counters[k];
      this.#retiredFar.outOfRange += old.counters.outOfRange;
      this.#retiredFar.aheadOfClock += old.counters.aheadOfClock;
      this.#retiredFar.resyncLimited += old.counters.resyncLimited;
      this.#ssrcChanges++;
      this.#changeTimes[this.#changeNext] = nowMs;
      this.#changeNext = (this.#changeNext + 1) % this.#changeTimes.length;
      this.#pendingDiscontinuity = true;
    }
    this.#ssrc = ssrc;
    this.#seq = new Sequencer(this.#streamId, this.#fs, this.#channels, this.#seqOpts, (b) => this.#forward(b));
    this.#anchored = false;
    this.#seqWrapsBefore += this.#sequence.wraps;
    this.#seqRestartsBefore += this.#sequence.restarts;
    this.#sequence = new RtpSequence(this.#maxMisorder);
    this.#haveTransit = false;
    this.#jitter = 0;
    this.#firstSampleIndex = null;
  }

  /** A packet of the current SSRC with a valid header and payload. */
  #accept(bytes: Uint8Array, p: RtpPacket, arrivalMs: number, remote: string): void {
    const seq = this.#seq!;
    this.#lastPacketMs = arrivalMs;
    this.#remote = remote;
    const frames = p.payloadLength / this.#frameBytes;
    // Signed 32-bit timestamp difference from the highest placed packet (0 for a timeline's first).
    const dTs = this.#anchored ? (p.timestamp - this.#maxTs) | 0 : 0;
    // RFC 3550 A.1 update_seq, with the extended number of this packet.
    const sq = this.#sequence;
    const ext = this.#anchored ? sq.update(p.sequence, dTs / frames) : sq.init(p.sequence);
    if (ext < 0) {
      this.#reject('sequence_jump', `sequence ${p.sequence} is ${(p.sequence - sq.maxSeq) & 0xffff} after ${sq.maxSeq} (${MAX_DROPOUT} or more); taken only if ${sq.badSeq} follows`, arrivalMs);
      return;
    }

    // Timestamp → sample index.
    if (!this.#anchored) {
      this.#anchored = true;
      this.#maxTs = p.timestamp;
      const offset = this.description.mediaClockOffset ?? 0;
      this.#maxTsIndex = (p.timestamp - offset) >>> 0; // RFC 7273: (timestamp − offset) mod 2^32
    }
    const index = this.#maxTsIndex + dTs;
    const sequence = ext % U32;

    // Place it: straight into the run when it simply continues the output inside a batch.
    const c = seq.counters;
    let placed: boolean;
    const resyncs = c.resyncs;
    if (this.#batching && frames <= COALESCE_FRAMES && seq.isNext(index) && !this.#pendingDiscontinuity) {
      if (this.#runFrames > 0 && (this.#runStart + this.#runFrames !== index || this.#runFrames + frames > COALESCE_FRAMES)) this.#publish();
      if (this.#runFrames === 0) this.#openRun(index, false);
      decodeLinearPcm(bytes, p.payloadOffset, frames, this.#channels, this.#bytesPerSample, this.#staging(), COALESCE_FRAMES, this.#runFrames);
      seq.acceptNext(sequence, index, frames, arrivalMs);
      this.#runFrames += frames;
      placed = true;
    } else {
      const data = new Float32Array(this.#channels * frames);
      decodeLinearPcm(bytes, p.payloadOffset, frames, this.#channels, this.#bytesPerSample, data, frames, 0);
      const far = c.outOfRange;
      const ahead = c.aheadOfClock;
      const limited = c.resyncLimited;
      const dup = c.framesDuplicated;
      const late = c.framesLate;
      seq.push({ sequence, firstSample: index, frames, data }, arrivalMs);
      if (c.outOfRange > far || c.aheadOfClock > ahead || c.resyncLimited > limited) {
        const why = c.resyncLimited > limited ? 'belongs to a confirmed jump while resyncs are at their limit' : c.outOfRange > far ? `is more than ${this.#seqOpts.maxGapSamples} samples from the stream's clock` : 'is further ahead than the wall clock allows';
        this.#lastRejected = { reason: c.resyncLimited > limited ? 'resync_limited' : c.outOfRange > far ? 'out_of_range' : 'ahead_of_clock', detail: `timestamp ${p.timestamp} (sample ${index}) ${why}; kept only if the next packet confirms it`, atS: (arrivalMs - this.#t0Ms) / 1000 };
        return;
      }
      placed = c.framesDuplicated === dup && c.framesLate === late;
    }
    // RFC 3550 A.8: D = (R_j − R_i) − (S_j − S_i) in timestamp units, J += (|D| − J)/16.
    const transit = (arrivalMs * this.#fs) / 1000 - index;
    if (this.#haveTransit) this.#jitter += (Math.abs(transit - this.#prevTransit) - this.#jitter) / 16;
    this.#prevTransit = transit;
    this.#haveTransit = true;
    if (!placed) return;
    if (dTs > 0 || c.resyncs > resyncs) {
      if (dTs > 0 && p.timestamp < this.#maxTs) this.#tsWraps++;
      this.#maxTs = p.timestamp;
      this.#maxTsIndex = index;
    }
    this.#onTiming?.(index, arrivalMs);
  }

  /** A block from the sequencer: straight on outside a batch, else joined to the run being assembled. */
  #forward(block: Block): void {
    if (this.#pendingDiscontinuity) {
      block.discontinuity = true;
      this.#pendingDiscontinuity = false;
    }
    if (this.#firstSampleIndex === null) this.#firstSampleIndex = block.sampleIndex;
    const joins = this.#runFrames > 0 && !block.discontinuity && !block.gap && block.sampleIndex === this.#runStart + this.#runFrames && this.#runFrames + block.frames <= COALESCE_FRAMES;
    if (!joins) this.#publish();
    if (!this.#batching || block.gap || block.frames > COALESCE_FRAMES) {
      this.#sink(block);
      return;
    }
    if (this.#runFrames === 0) this.#openRun(block.sampleIndex, block.discontinuity);
    const stage = this.#staging();
    const k = block.frames;
    const at = this.#runFrames;
    const src = block.data;
    for (let ch = 0; ch < this.#channels; ch++) {
      const o = ch * COALESCE_FRAMES + at;
      const q = ch * k;
      for (let i = 0; i < k; i++) stage[o + i] = src[q + i];
    }
    this.#runFrames += k;
  }

  #openRun(sampleIndex: number, discontinuity: boolean): void {
    this.#runStart = sampleIndex;
    this.#runDiscontinuity = discontinuity;
  }

  #staging(): Float32Array {
    return (this.#stage ??= new Float32Array(this.#channels * COALESCE_FRAMES));
  }

  /** Publish the run being assembled as a block of its own (the staging buffer is reused). */
  #publish(): void {
    const total = this.#runFrames;
    if (total === 0) return;
    const m = this.#channels;
    const stage = this.#staging();
    const data = new Float32Array(m * total);
    for (let ch = 0; ch < m; ch++) data.set(stage.subarray(ch * COALESCE_FRAMES, ch * COALESCE_FRAMES + total), ch * total);
    this.#runFrames = 0;
    this.#sink({ streamId: this.#streamId, sampleIndex: this.#runStart, sampleRateHz: this.#fs, channels: m, frames: total, data, gap: false, discontinuity: this.#runDiscontinuity });
  }
}
