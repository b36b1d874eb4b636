/**
 * Where every received datagram or WebSocket message goes: decode, check against the configured
 * array and input, hand to the stream's sequencer, count. Transports (udp.ts, websocket.ts) only
 * deliver bytes here.
 *
 * Limits and policies: at most `maxStreams` stream ids are tracked; when full, a stream that never
 * had a frame accepted is forgotten to make room, otherwise the new id's frames are rejected
 * (`too_many_streams`); the per-stream reject counts of a forgotten stream move to the hub-wide
 * `rejected` counters under the same reasons, so every refused message stays counted exactly once.
 * Only the selected stream (config input.streamId, or the first stream with
 * an accepted frame) feeds the block sink; the others are sequenced and counted so status shows them.
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
  /** Only this stream feeds the sink; null = the first stream with an accepted frame. */
  streamId: number | null;
  maxStreams: number;
  sequencer: SequencerOptions;
}

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
  readonly sequencer: Sequencer;
  readonly rejected = zeroCounts(STREAM_REJECT_REASONS);
  readonly meter = new RateMeter();
  encoding: SampleEncoding | null = null;
  firstSample: number | null = null;
  lastFrameMs: number | null = null;
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

  constructor(opts: IngestHubOptions, sink: BlockSink, nowMs = performance.now()) {
    this.#opts = opts;
    this.#maxFloatAbs = 10 ** (opts.maxFloatLevelDbfs / 20);
    this.#sink = sink;
    this.#selected = opts.streamId;
    this.#t0Ms = nowMs;
  }

  /** The stream feeding the sink, or null while none is chosen. */
  get selectedStream(): number | null {
    return this.#selected;
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
    let why: StreamRejectReason | null = null;
    let detail = '';
    if (f.sampleRateHz !== o.sampleRateHz) [why, detail] = ['rate_mismatch', `frame at ${f.sampleRateHz} Hz, input is ${o.sampleRateHz} Hz`];
    else if (f.channels !== o.channels) [why, detail] = ['channel_mismatch', `frame has ${f.channels} channels, the array has ${o.channels}`];
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
      this.lastRejected = { reason: why, detail, transport, streamId: f.streamId, atS: (nowMs - this.#t0Ms) / 1000 };
      return;
    }
    st.remote = remote;
    st.encoding = f.encoding;
    if (st.firstSample === null) st.firstSample = f.firstSample;
    if (direct) {
      if (this.#runFrames === 0) this.#openRun(f.streamId, f.firstSample, false);
      st.sequencer.acceptNext(f.sequence, f.firstSample, n, nowMs);
      this.#runFrames += n;
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
      this.lastRejected = { reason: dropped, detail: `firstSample ${f.firstSample} ${SEQUENCER_DETAIL[dropped]}`, transport, streamId: f.streamId, atS: (nowMs - this.#t0Ms) / 1000 };
    }
    st.meter.update(st.sequencer.counters.samplesAccepted, nowMs);
  }

  /** Release frames held too long; call every few milliseconds. */
  tick(nowMs = performance.now()): void {
    for (const st of this.#streams.values()) {
      st.sequencer.tick(nowMs);
      st.meter.update(st.sequencer.counters.samplesAccepted, nowMs);
    }
    this.#publish();
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
        channels: this.#opts.channels,
        encoding: st.encoding,
        firstSample: st.firstSample,
        nextSample: next < 0 ? null : next,
        ...counters,
        rejected: { ...st.rejected, out_of_range: outOfRange, ahead_of_clock: aheadOfClock, resync_limited: resyncLimited },
        resyncStorm: storm === null ? null : { sinceS: (storm.sinceMs - this.#t0Ms) / 1000, lastS: (storm.lastMs - this.#t0Ms) / 1000, framesDropped: storm.framesDropped },
        inputRateHz: st.meter.rate(nowMs),
        lastFrameAgoS: st.lastFrameMs === null ? null : (nowMs - st.lastFrameMs) / 1000,
      };
    });
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
    const st = new StreamState(id, transport, remote, () =>
      new Sequencer(id, this.#opts.sampleRateHz, this.#opts.channels, this.#opts.sequencer, (block) => {
        if (this.#selected === null) this.#selected = id;
        if (this.#selected === id) this.#forward(block);
      }),
    );
    this.#streams.set(id, st);
    return st;
  }
}
