/**
 * Listening to one beam of the beam-audio stream (`outputs.streamPath`, server/outputs/stream-out.ts):
 * the frames carry every beam at once, float32, one channel per beam in the order of `GET /api/beams`
 * (the engine's beam list), in the ingest wire format of shared/frame.ts. These helpers take one
 * beam's channel out of a frame and keep its samples on the stream's sample clock: a sample-index
 * jump becomes zeros of exactly its length, a repeated or late frame is skipped, and a jump beyond
 * `maxGapSamples` (a restarted server, a clock reset) starts a new timeline instead of a flood of zeros.
 * Used by `nullsteer listen` (server/tools/listen.ts) and the dashboard's player (client/src/lib/beam-player.svelte.ts).
 */
import { decodeFrame, MAX_FRAME_BYTES, FRAME_HEADER_BYTES, type FrameRejectReason } from './frame.ts';

/** Most samples of one channel a frame can carry (a one-channel float32 frame of the largest size). */
export const MAX_BEAM_FRAME_SAMPLES = Math.floor((MAX_FRAME_BYTES - FRAME_HEADER_BYTES) / 4);

export type BeamFrameRejectReason = FrameRejectReason | 'not_float32' | 'no_such_channel' | 'non_finite';

export type BeamFrameResult =
  | { ok: true; firstSample: number; sampleRateHz: number; channels: number; frames: number; sequence: number }
  | { ok: false; reason: BeamFrameRejectReason; detail: string };

/**
 * Copy channel `channel` of a beam-audio frame into `out[0 … frames)`.
 * @param out length ≥ {@link MAX_BEAM_FRAME_SAMPLES} (any frame fits); written only when the answer is ok
 */
export function readBeamChannel(bytes: Uint8Array, channel: number, out: Float32Array): BeamFrameResult {
  const r = decodeFrame(bytes);
  if (!r.ok) return r;
  const f = r.frame;
  if (f.encoding !== 'float32') return { ok: false, reason: 'not_float32', detail: `encoding ${f.encoding}; beam audio is float32` };
  if (!Number.isInteger(channel) || channel < 0 || channel >= f.channels) return { ok: false, reason: 'no_such_channel', detail: `channel ${channel} of a ${f.channels}-channel frame` };
  const n = f.samplesPerChannel;
  if (out.length < n) throw new RangeError(`out holds ${out.length} samples, the frame ${n}`);
  const dv = new DataView(f.payload.buffer, f.payload.byteOffset, f.payload.byteLength);
  const stride = 4 * f.channels;
  // First pass checks, second writes: `out` is left untouched by a refused frame.
  for (let i = 0, p = 4 * channel; i < n; i++, p += stride) {
    const v = dv.getFloat32(p, true);
    if (!Number.isFinite(v)) return { ok: false, reason: 'non_finite', detail: `sample ${i} is ${v}` };
  }
  for (let i = 0, p = 4 * channel; i < n; i++, p += stride) out[i] = dv.getFloat32(p, true);
  return { ok: true, firstSample: f.firstSample, sampleRateHz: f.sampleRateHz, channels: f.channels, frames: n, sequence: f.sequence };
}

/** Where a frame's samples go on the listener's timeline. */
export interface Placement {
  /** Zeros to write before the frame's samples (a gap of exactly this many samples). */
  zeros: number;
  /** Leading samples of the frame already written (an overlap); `skip === frames` drops the frame. */
  skip: number;
  /** The frame starts a new timeline (first frame, or a jump beyond maxGapSamples): no zeros, nothing skipped. */
  restart: boolean;
}

/**
 * One listener's sample clock. `place` says what to write for each frame so that the output is
 * sample-exact: gaps as zeros of their length, overlaps skipped; counters say what happened.
 */
export class BeamTimeline {
  /** Largest jump filled with zeros; beyond it (either way) the timeline restarts. */
  readonly maxGapSamples: number;
  /** Sample index of the next sample to write; null before the first frame. */
  next: number | null = null;
  /** First sample index of the current timeline. */
  start: number | null = null;
  gaps = 0;
  gapSamples = 0;
  /** Frames wholly before `next` (repeated or late), dropped. */
  lateFrames = 0;
  /** Samples skipped because they were written already (late frames and overlaps). */
  overlapSamples = 0;
  /** Jumps beyond maxGapSamples (the timeline restarted there). */
  restarts = 0;

  constructor(maxGapSamples: number) {
    if (!Number.isInteger(maxGapSamples) || maxGapSamples < 0) throw new RangeError(`maxGapSamples ${maxGapSamples}: a non-negative integer`);
    this.maxGapSamples = maxGapSamples;
  }

  /** Place a frame of `frames` samples starting at `firstSample`; the answer is reused (do not keep it). */
  place(firstSample: number, frames: number): Placement {
    const p = this.#out;
    p.zeros = 0;
    p.skip = 0;
    p.restart = false;
    const next = this.next;
    if (next === null || firstSample - next > this.maxGapSamples || next - firstSample > this.maxGapSamples) {
      if (next !== null) this.restarts++;
      p.restart = true;
      this.start = firstSample;
      this.next = firstSample + frames;
      return p;
    }
    if (firstSample > next) {
      p.zeros = firstSample - next;
      this.gaps++;
      this.gapSamples += p.zeros;
    } else if (firstSample < next) {
      p.skip = Math.min(frames, next - firstSample);
      this.overlapSamples += p.skip;
      if (p.skip === frames) {
        this.lateFrames++;
        return p;
      }
    }
    this.next = firstSample + frames;
    return p;
  }

  readonly #out: Placement = { zeros: 0, skip: 0, restart: false };
}

/**
 * The channel of beam `beamId` in the stream, given the beam list (GET /api/beams, in its order) and
 * the frame's channel count: −1 when the beam is not listed, or when the list and the frame disagree
 * on the number of beams (the list is stale: fetch it again).
 */
export function beamChannel(listIds: readonly (number | string)[], beamId: number, frameChannels: number): number {
  if (listIds.length !== frameChannels) return -1;
  for (let i = 0; i < listIds.length; i++) if (Number(listIds[i]) === beamId) return i;
  return -1;
}

/** The channel count of a frame (its header's, checked by decodeFrame), or null when it is not a valid frame. */
export function frameChannels(bytes: Uint8Array): number | null {
  const r = decodeFrame(bytes);
  return r.ok ? r.frame.channels : null;
}
