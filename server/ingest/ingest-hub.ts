/**
 * Where every received datagram or WebSocket message goes: decode, check against the configured
 * array and input, hand to the stream's sequencer, count. Transports (udp.ts, websocket.ts) only
 * deliver bytes here.
 *
 * Limits and policies: at most `maxStreams` stream ids are tracked; when full, a stream that never
 * had a frame accepted is forgotten to make room, otherwise the new id's frames are rejected
 * (`too_many_streams`); the per-stream reject counts of a forgotten stream move to the hub-wide
 * `rejected` counters under the same reasons, so every refused message stays counted exactly once.
 * Which stream feeds the block sink (input.select): `pinned` = input.streamId only; `latest-active`
 * = input.streamId when given, else the first stream to become eligible, and later another eligible
 * stream once the processed one has been silent for `switchAfterMs`. A stream is eligible after
 * `eligibleAfterSamples` of consecutive valid samples (no refusal, gap or resync in between), so one
 * stray datagram can never take over. Until then its blocks wait (at most that many samples per
 * stream, the oldest dropped beyond it) and are processed first when it is chosen, so a stream's
 * opening samples are not lost to the wait. A switch flags a discontinuity. The others are
 * sequenced and counted so status shows them.
 *
 * With members (an array fed by several inputs), each member stream's blocks go to `memberSink`
 * instead, with its own channel count, and frame timings to `onTiming` (drift measurement).
 */
import { decodeFrame, decodeSamplesChecked, decodeSamplesInto, FRAME_REJECT_REASONS, type SampleCheck, type SampleEncoding } from '../../shared/frame.ts';
import type { Block, BlockSink } from '../../shared/types.ts';
import { Sequencer, type SequencerCounters, type SequencerOptions } from './sequencer.ts';

export type Transport = 'udp' | 'websocket';

/** Longest block a batch joins, samples per channel (about 21 ms at 48 kHz). */
export const COALESCE_FRAMES = 1024;

/** Reasons a decodable frame is refused for its stream. */
export const STREAM_REJECT_REASONS = ['rate_mismatch', 'channel_mismatch', 'encoding_mismatch', 'non_finite', 'beyond_bound', 'out_of_range', 'ahead_of_clock', 'resync_limited'] as const;
export type StreamRejectReason = (typeof STREAM_REJECT_REASONS)[number];
/** The reasons the sequencer counts (the others are decided here, before sequencing). */
const SEQUENCER_REASONS = { out_of_range: 'outOfRange', ahead_of_clock: 'aheadOfClock', resync_limited: 'resyncLimited' } as const satisfies Partial<Record<StreamRejectReason, keyof SequencerCounters>>;
type SequencerReason = keyof typeof SEQUENCER_REASONS;
const SEQUENCER_DETAIL: Record<SequencerReason, string> = {
  out_of_range: "is far from the stream's clock (beyond ingest.maxGapSeconds)",
  ahead_of_clock: 'is further ahead than the wall clock allows (ingest.jumpToleranceSeconds) and no following frame confirmed it',
  resync_limited: 'belongs to a confirmed jump while resyncs are at ingest.resyncLimit',
};
/** Reasons a message is refused before it reaches a stream. */
export const INGEST_REJECT_REASONS = [...FRAME_REJECT_REASONS.filter((r) => r !== 'non_finite'), 'too_many_streams', 'not_binary', 'too_large', 'queue_full'] as const;
export type IngestRejectReason = (typeof INGEST_REJECT_REASONS)[number];

export interface IngestHubOptions {
  sampleRateHz: number;
  channels: number;
  encodings: readonly SampleEncoding[];
  /**
   * Float32 samples above this level (20·log10|x| dBFS, full scale = 0 dBFS) refuse their frame as
   * `beyond_bound`: finite but absurd values would swamp every covariance they enter.
   */
  maxFloatLevelDbfs: number;
  /** The stream processed first (pinned: the only one); null = the first eligible stream. */
  streamId: number | null;
  maxStreams: number;
  sequencer: SequencerOptions;
  /** How the processed stream is chosen; absent: latest-active, eligible at once, never switching. */
  selection?: SelectionOptions;
  /** Told of every change of the processed stream (journal, status). */
  onSwitch?: (s: StreamSwitch) => void;
  /**
   * Member streams of a merged array: stream id → the fewest channels its frames must carry (one
   * more than the highest channel it maps). Their blocks go to `memberSink`, not to the sink.
   */
  members?: ReadonlyMap<number, number>;
  memberSink?: (streamId: number, block: Block) => void;
  /** Each accepted frame of a member stream: its first sample and arrival time (drift). */
  onTiming?: (streamId: number, firstSample: number, arrivalMs: number) => void;
}

export interface SelectionOptions {
  mode: 'latest-active' | 'pinned';
  /** Consecutive valid samples before a stream may be processed. */
  eligibleAfterSamples: number;
  /** Silence of the processed stream after which another active stream takes over, ms (Infinity: never). */
  switchAfterMs: number;
}

export interface StreamSwitch {
  from: number | null;
  to: number;
  reason: 'first' | 'silent' | 'manual';
  /** Seconds since the hub started. */
  atS: number;
}

/** A stream counts as active while its last accepted frame is at most this old, ms. */
const ACTIVE_MS = 500;

export interface RejectNote {
  reason: string;
  detail: string;
  transport: Transport;
  streamId: number | null;
  /** Seconds since the hub started. */
  atS: number;
}

/** A resync storm in status: times in seconds since the hub started. */
export interface StormStatus {
  sinceS: number;
  lastS: number;
  framesDropped: number;
}

export interface StreamStatus extends Omit<SequencerCounters, 'outOfRange' | 'aheadOfClock' | 'resyncLimited'> {
  streamId: number;
  selected: boolean;
  transport: Transport | 'simulator';
  remote: string;
  sampleRateHz: number;
  channels: number;
  encoding: SampleEncoding | null;
  firstSample: number | null;
  nextSample: number | null;
  rejected: Record<StreamRejectReason, number>;
  /** Confirmed jumps being refused at the resync limit (null when none within the window). */
  resyncStorm: StormStatus | null;
  inputRateHz: number;
  lastFrameAgoS: number | null;
  /** When its last frame arrived, seconds since the hub started (the clock of `lastSwitch.atS`). */
  lastFrameAtS: number | null;
  /** Consecutive valid samples so far (since the last refusal, gap or resync). */
  runSamples: number;
  /** Has had enough consecutive valid samples to be processed. */
  eligible: boolean;
  /** A member of a merged array (its blocks go to the merger). */
  member: boolean;
  /** Channels its frames carry (the array's, or a member stream's own). */
  frameChannels: number | null;
}

function zeroCounts<K extends string>(keys: readonly K[]): Record<K, number> {
  return Object.fromEntries(keys.map((k) => [k, 0])) as Record<K, number>;
}

/** Samples-per-second meter over windows of about one second. */
export class RateMeter {
  #t0 = -1;
  #n0 = 0;
  #rate = 0;
  update(totalSamples: number, nowMs: number): void {
    if (this.#t0 < 0) {
      this.#t0 = nowMs;
      this.#n0 = totalSamples;
      return;
    }
    const dt = nowMs - this.#t0;
    if (dt >= 1000) {
      this.#rate = ((totalSamples - this.#n0) * 1000) / dt;
      this.#t0 = nowMs;
      this.#n0 = totalSamples;
    }
  }
  /** Last full-window rate; decays to 0 when nothing arrives for over two windows. */
  rate(nowMs: number): number {
    return this.#t0 >= 0 && nowMs - this.#t0 > 2000 ? 0 : this.#rate;
  }
}

class StreamState {
  sequencer: Sequencer;
  readonly rejected = zeroCounts(STREAM_REJECT_REASONS);
  readonly meter = new RateMeter();
  encoding: SampleEncoding | null = null;
  firstSample: number | null = null;
  lastFrameMs: number | null = null;
  /** Last accepted frame's arrival. */
  lastAcceptMs = -Infinity;
  runSamples = 0;
  /** The sequencer's counters when the run was last updated. */
  seenSamples = 0;
  seenGaps = 0;
  seenResyncs = 0;
  /** Blocks waiting while the stream is not processed (latest-active), oldest first. */
  readonly pending: Block[] = [];
  pendingFrames = 0;
  /** Chosen with nothing waiting: its next block starts a new timeline. */
  markNextDiscontinuity = false;
  /** Channels of a member stream's frames (fixed by its first accepted frame). */
  frameChannels: number | null = null;
  constructor(
    readonly streamId: number,
    readonly transport: Transport,
    public remote: string,
    seq: (s: StreamState) => Sequencer,
  ) {
    this.sequencer = seq(this);
  }
}

export class IngestHub {
  /** Messages refused before reaching a stream, plus the stream rejects of streams forgotten to make room. */
  readonly rejected: Record<IngestRejectReason | StreamRejectReason, number> = { ...zeroCounts(INGEST_REJECT_REASONS), ...zeroCounts(STREAM_REJECT_REASONS) };
  lastRejected: RejectNote | null = null;
  messages = 0;
  readonly #opts: IngestHubOptions;
  readonly #sink: BlockSink;
  readonly #streams = new Map<number, StreamState>();
  readonly #t0Ms: number;
  /**
   * The run being assembled inside a batch: contiguous samples of the selected stream in a staging
   * buffer (planar, stride COALESCE_FRAMES), published as one block when the batch ends or the run
   * cannot grow.
   */
  #stage: Float32Array | null = null;
  #runFrames = 0;
  #runStart = 0;
  #runStream = 0;
  #runDiscontinuity = false;
  #batching = false;
  /** The float32 bound as an amplitude, full-scale units. */
  readonly #maxFloatAbs: number;
  #selected: number | null;
  readonly #selection: SelectionOptions;
  switches = 0;
  lastSwitch: StreamSwitch | null = null;

  constructor(opts: IngestHubOptions, sink: BlockSink, nowMs = performance.now()) {
    this.#opts = opts;
    this.#maxFloatAbs = 10 ** (opts.maxFloatLevelDbfs / 20);
    this.#sink = sink;
    this.#selection = opts.selection ?? { mode: 'latest-active', eligibleAfterSamples: 0, switchAfterMs: Infinity };
    this.#selected = opts.members ? null : opts.streamId;
    this.#t0Ms = nowMs;
  }

  /** The stream feeding the sink, or null while none is chosen. */
  get selectedStream(): number | null {
    return this.#selected;
  }

  get selectionMode(): SelectionOptions['mode'] {
    return this.#selection.mode;
  }

  /**
   * Process `streamId` from now on (PUT /api/input/stream). False when no such stream is tracked
   * or the hub feeds a merged array (its members are fixed by the array file).
   */
  select(streamId: number, nowMs = performance.now()): boolean {
    const st = this.#streams.get(streamId);
    if (!st || this.#opts.members) return false;
    if (streamId !== this.#selected) this.#switchTo(st, 'manual', nowMs);
    return true;
  }

  #eligible(st: StreamState): boolean {
    return st.runSamples >= this.#selection.eligibleAfterSamples && st.runSamples > 0;
  }

  /**
   * Count the samples the stream's sequencer released since the last look into its run of
   * consecutive valid samples; a gap or a resync in between starts the run again.
   */
  #updateRun(st: StreamState): void {
    const sc = st.sequencer.counters;
    const delta = sc.samplesAccepted - st.seenSamples;
    if (sc.gaps !== st.seenGaps || sc.resyncs !== st.seenResyncs) st.runSamples = 0;
    st.runSamples += delta;
    st.seenSamples = sc.samplesAccepted;
    st.seenGaps = sc.gaps;
    st.seenResyncs = sc.resyncs;
  }

  /** After a frame of `st` was placed: choose it if nothing is processed, or if the processed one fell silent. */
  #consider(st: StreamState, nowMs: number): void {
    if (this.#opts.members || this.#selection.mode === 'pinned' || st.streamId === this.#selected || !this.#eligible(st)) return;
    if (this.#selected === null) {
      this.#switchTo(st, 'first', nowMs);
      return;
    }
    const cur = this.#streams.get(this.#selected);
    const silentMs = cur ? nowMs - cur.lastAcceptMs : Infinity;
    if (silentMs >= this.#selection.switchAfterMs) this.#switchTo(st, 'silent', nowMs);
  }

  /** The processed stream silent too long: the most recently active eligible stream takes over. */
  #checkSilence(nowMs: number): void {
    if (this.#opts.members || this.#selection.mode === 'pinned' || this.#selected === null) return;
    const cur = this.#streams.get(this.#selected);
    if (cur && nowMs - cur.lastAcceptMs < this.#selection.switchAfterMs) return;
    let best: StreamState | null = null;
    for (const st of this.#streams.values()) {
      if (st === cur || !this.#eligible(st) || nowMs - st.lastAcceptMs > ACTIVE_MS) continue;
      if (!best || st.lastAcceptMs > best.lastAcceptMs) best = st;
    }
    if (best) this.#switchTo(best, 'silent', nowMs);
  }

  #switchTo(st: StreamState, reason: StreamSwitch['reason'], nowMs: number): void {
    this.#publish();
    const from = this.#selected;
    this.#selected = st.streamId;
    const sw: StreamSwitch = { from, to: st.streamId, reason, atS: (nowMs - this.#t0Ms) / 1000 };
    this.switches++;
    this.lastSwitch = sw;
    // The new stream's waiting blocks go first; after another stream its clock is not ours: a discontinuity.
    let first = from !== null;
    const waiting = st.pending.splice(0);
    st.pendingFrames = 0;
    if (waiting.length === 0 && first) st.markNextDiscontinuity = true;
    for (const b of waiting) {
      this.#forward(first ? { ...b, discontinuity: true } : b);
      first = false;
    }
    this.#opts.onSwitch?.(sw);
  }

  /** A block of a stream that is not processed: kept (bounded) in case it is chosen. */
  #hold(st: StreamState, block: Block): void {
    if (this.#selection.mode === 'pinned') return;
    st.pending.push(block);
    st.pendingFrames += block.frames;
  }

  /**
   * Keep at most the latest eligibleAfterSamples (whole blocks) of a stream that is not processed.
   * Called after each frame and tick, not per block: the blocks one frame releases are all kept
   * until the choice after that frame is made.
   */
  #trim(st: StreamState): void {
    if (st.streamId === this.#selected) return;
    const keep = Math.max(this.#selection.eligibleAfterSamples, 1);
    while (st.pending.length > 1 && st.pendingFrames - st.pending[0].frames >= keep) st.pendingFrames -= st.pending.shift()!.frames;
  }

  /** Every block a stream's sequencer releases. */
  #streamBlock(st: StreamState, block: Block): void {
    if (this.#opts.members?.has(st.streamId)) {
      this.#opts.memberSink?.(st.streamId, block);
      return;
    }
    if (this.#opts.members) return;
    if (this.#selected === st.streamId) {
      if (st.markNextDiscontinuity) {
        st.markNextDiscontinuity = false;
        block = { ...block, discontinuity: true };
      }
      this.#forward(block);
    } else this.#hold(st, block);
  }

  /** Count `count` messages refused by their transport before decoding (text message, oversize, queue full). */
  refuse(reason: IngestRejectReason, detail: string, transport: Transport, nowMs = performance.now(), count = 1): void {
    this.messages += count;
    this.rejected[reason] += count;
    this.lastRejected = { reason, detail, transport, streamId: null, atS: (nowMs - this.#t0Ms) / 1000 };
  }

  /** Take one datagram or message. Never throws on bad input: it is counted instead. */
  receive(bytes: Uint8Array, transport: Transport, remote: string, nowMs = performance.now()): void {
    const r = decodeFrame(bytes);
    if (!r.ok) {
      this.refuse(r.reason as IngestRejectReason, r.detail, transport, nowMs);
      return;
    }
    const f = r.frame;
    const st = this.#stream(f.streamId, transport, remote);
    if (st === null) {
      this.refuse('too_many_streams', `stream ${f.streamId}: ${this.#opts.maxStreams} streams already tracked`, transport, nowMs);
      return;
    }
    this.messages++;
    st.lastFrameMs = nowMs;
    const o = this.#opts;
    const member = o.members?.get(f.streamId);
    let why: StreamRejectReason | null = null;
    let detail = '';
    if (f.sampleRateHz !== o.sampleRateHz) [why, detail] = ['rate_mismatch', `frame at ${f.sampleRateHz} Hz, input is ${o.sampleRateHz} Hz`];
    else if (member !== undefined) {
      if (st.frameChannels !== null && f.channels !== st.frameChannels) [why, detail] = ['channel_mismatch', `${f.channels}-channel frame: stream ${f.streamId} has sent ${st.frameChannels}-channel frames`];
      else if (f.channels < member) [why, detail] = ['channel_mismatch', `${f.channels}-channel frame: the array's inputs map channel ${member - 1} of stream ${f.streamId}`];
    } else if (f.channels !== o.channels) [why, detail] = ['channel_mismatch', `${f.channels}-channel frames refused: the array has ${o.channels}`];
    else if (!o.encodings.includes(f.encoding)) [why, detail] = ['encoding_mismatch', `frame is ${f.encoding}, accepted: ${o.encodings.join(', ')}`];
    // The common case, inside a batch: the selected stream's next frame, decoded straight into the
    // run being assembled (no buffer of its own, nothing for the sequencer to hold).
    const n = f.samplesPerChannel;
    const direct = why === null && this.#batching && f.streamId === this.#selected && n <= COALESCE_FRAMES && st.sequencer.isNext(f.firstSample);
    let data: Float32Array | null = null;
    if (why === null) {
      let check: SampleCheck;
      if (direct) {
        if (this.#runFrames > 0 && (this.#runStart + this.#runFrames !== f.firstSample || this.#runFrames + n > COALESCE_FRAMES)) this.#publish();
        check = decodeSamplesInto(f, this.#staging(), COALESCE_FRAMES, this.#runFrames, this.#maxFloatAbs);
      } else {
        data = new Float32Array(f.channels * n);
        check = decodeSamplesChecked(f, data, this.#maxFloatAbs);
      }
      if (check === 'non_finite') [why, detail] = ['non_finite', 'float32 payload holds NaN or ±Infinity'];
      else if (check === 'beyond_bound') [why, detail] = ['beyond_bound', `float32 sample beyond ${o.maxFloatLevelDbfs} dBFS (|x| > ${this.#maxFloatAbs.toPrecision(6)} full scale)`];
    }
    if (why !== null) {
      st.rejected[why]++;
      st.runSamples = 0;
      this.lastRejected = { reason: why, detail, transport, streamId: f.streamId, atS: (nowMs - this.#t0Ms) / 1000 };
      return;
    }
    st.remote = remote;
    st.encoding = f.encoding;
    if (member !== undefined && st.frameChannels === null) {
      // A member stream's channel count is its own (at least what the array maps): its sequencer
      // is made for it now, before it has placed anything.
      st.frameChannels = f.channels;
      if (f.channels !== member) st.sequencer = this.#sequencer(st, f.channels);
    }
    if (st.firstSample === null) st.firstSample = f.firstSample;
    if (direct) {
      if (this.#runFrames === 0) this.#openRun(f.streamId, f.firstSample, false);
      st.sequencer.acceptNext(f.sequence, f.firstSample, n, nowMs);
      this.#runFrames += n;
      this.#updateRun(st);
      st.lastAcceptMs = nowMs;
      st.meter.update(st.sequencer.counters.samplesAccepted, nowMs);
      return;
    }
    const sc = st.sequencer.counters;
    const far = sc.outOfRange;
    const ahead = sc.aheadOfClock;
    const limited = sc.resyncLimited;
    st.sequencer.push({ sequence: f.sequence, firstSample: f.firstSample, frames: n, data: data! }, nowMs);
    const dropped: SequencerReason | null = sc.resyncLimited > limited ? 'resync_limited' : sc.aheadOfClock > ahead ? 'ahead_of_clock' : sc.outOfRange > far ? 'out_of_range' : null;
    if (dropped !== null) {
      st.runSamples = 0;
      this.lastRejected = { reason: dropped, detail: `firstSample ${f.firstSample} ${SEQUENCER_DETAIL[dropped]}`, transport, streamId: f.streamId, atS: (nowMs - this.#t0Ms) / 1000 };
    } else {
      st.lastAcceptMs = nowMs;
      if (member !== undefined) o.onTiming?.(f.streamId, f.firstSample, nowMs);
    }
    this.#updateRun(st);
    this.#consider(st, nowMs);
    this.#trim(st);
    st.meter.update(st.sequencer.counters.samplesAccepted, nowMs);
  }

  /** Release frames held too long; call every few milliseconds. */
  tick(nowMs = performance.now()): void {
    for (const st of this.#streams.values()) {
      st.sequencer.tick(nowMs);
      st.meter.update(st.sequencer.counters.samplesAccepted, nowMs);
    }
    this.#publish();
    this.#checkSilence(nowMs);
    for (const st of this.#streams.values()) {
      // Blocks the hold time released may belong to a stream that is eligible but not yet chosen.
      this.#updateRun(st);
      this.#consider(st, nowMs);
      this.#trim(st);
    }
  }

  /** Release everything held (shutdown, end of a replay). */
  flush(): void {
    for (const st of this.#streams.values()) st.sequencer.flush();
    this.#publish();
  }

  /**
   * Receive a batch of messages (a transport that has several at once): contiguous data blocks of
   * the selected stream are joined, up to {@link COALESCE_FRAMES} per channel, and published when the
   * batch ends, so the stages after ingest run once per batch instead of once per small frame.
   */
  batch(fn: () => void): void {
    this.#batching = true;
    try {
      fn();
    } finally {
      this.#batching = false;
      this.#publish();
    }
  }

  /** A block of the selected stream: straight on outside a batch, else joined to the run being assembled. */
  #forward(block: Block): void {
    const joins = this.#runFrames > 0 && !block.discontinuity && !block.gap && block.sampleIndex === this.#runStart + this.#runFrames && this.#runFrames + block.frames <= COALESCE_FRAMES;
    if (!joins) this.#publish();
    if (!this.#batching || block.gap || block.frames > COALESCE_FRAMES) {
      this.#sink(block);
      return;
    }
    if (this.#runFrames === 0) this.#openRun(block.streamId, block.sampleIndex, block.discontinuity);
    const stage = this.#staging();
    const k = block.frames;
    const at = this.#runFrames;
    const src = block.data;
    // Plain loops: a subarray per channel would cost more than the copy for frames of a few samples.
    for (let c = 0; c < block.channels; c++) {
      const o = c * COALESCE_FRAMES + at;
      const p = c * k;
      for (let i = 0; i < k; i++) stage[o + i] = src[p + i];
    }
    this.#runFrames += k;
  }

  #openRun(streamId: number, sampleIndex: number, discontinuity: boolean): void {
    this.#runStream = streamId;
    this.#runStart = sampleIndex;
    this.#runDiscontinuity = discontinuity;
  }

  /** The run's buffer: channel c's samples at c·COALESCE_FRAMES, allocated once. */
  #staging(): Float32Array {
    return (this.#stage ??= new Float32Array(this.#opts.channels * COALESCE_FRAMES));
  }

  /** Publish the run being assembled as one block of its own (the staging buffer is reused). */
  #publish(): void {
    const total = this.#runFrames;
    if (total === 0) return;
    const m = this.#opts.channels;
    const stage = this.#staging();
    const data = new Float32Array(m * total);
    for (let c = 0; c < m; c++) data.set(stage.subarray(c * COALESCE_FRAMES, c * COALESCE_FRAMES + total), c * total);
    this.#runFrames = 0;
    this.#sink({ streamId: this.#runStream, sampleIndex: this.#runStart, sampleRateHz: this.#opts.sampleRateHz, channels: m, frames: total, data, gap: false, discontinuity: this.#runDiscontinuity });
  }

  status(nowMs = performance.now()): StreamStatus[] {
    return [...this.#streams.values()].map((st) => {
      const { outOfRange, aheadOfClock, resyncLimited, ...counters } = st.sequencer.counters;
      const next = st.sequencer.nextSample;
      const storm = st.sequencer.stormAt(nowMs);
      return {
        streamId: st.streamId,
        selected: st.streamId === this.#selected,
        transport: st.transport,
        remote: st.remote,
        sampleRateHz: this.#opts.sampleRateHz,
        channels: st.frameChannels ?? this.#opts.channels,
        encoding: st.encoding,
        firstSample: st.firstSample,
        nextSample: next < 0 ? null : next,
        ...counters,
        rejected: { ...st.rejected, out_of_range: outOfRange, ahead_of_clock: aheadOfClock, resync_limited: resyncLimited },
        resyncStorm: storm === null ? null : { sinceS: (storm.sinceMs - this.#t0Ms) / 1000, lastS: (storm.lastMs - this.#t0Ms) / 1000, framesDropped: storm.framesDropped },
        inputRateHz: st.meter.rate(nowMs),
        lastFrameAgoS: st.lastFrameMs === null ? null : (nowMs - st.lastFrameMs) / 1000,
        lastFrameAtS: st.lastFrameMs === null ? null : (st.lastFrameMs - this.#t0Ms) / 1000,
        runSamples: st.runSamples,
        eligible: this.#eligible(st),
        member: this.#opts.members?.has(st.streamId) ?? false,
        frameChannels: this.#opts.members?.has(st.streamId) ? st.frameChannels : this.#opts.channels,
      };
    });
  }

  #sequencer(st: StreamState, channels: number): Sequencer {
    return new Sequencer(st.streamId, this.#opts.sampleRateHz, channels, this.#opts.sequencer, (block) => this.#streamBlock(st, block));
  }

  #stream(id: number, transport: Transport, remote: string): StreamState | null {
    const have = this.#streams.get(id);
    if (have) return have;
    if (this.#streams.size >= this.#opts.maxStreams) {
      const idle = [...this.#streams.values()].find((s) => s.sequencer.counters.framesAccepted === 0 && s.sequencer.heldFrames === 0);
      if (!idle) return null;
      this.#streams.delete(idle.streamId);
      // Keep its counts: the messages were refused and must stay counted once.
      for (const r of STREAM_REJECT_REASONS) this.rejected[r] += r in SEQUENCER_REASONS ? idle.sequencer.counters[SEQUENCER_REASONS[r as SequencerReason]] : idle.rejected[r];
    }
    const st: StreamState = new StreamState(id, transport, remote, (s) => this.#sequencer(s, this.#opts.members?.get(id) ?? this.#opts.channels));
    this.#streams.set(id, st);
    return st;
  }
}
