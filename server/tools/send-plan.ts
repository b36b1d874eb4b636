/**
 * What every `nullsteer send` decides before its first frame, whether it reads a file or standard
 * input: the stream id, the samples per frame, and the transport.
 */
import { randomInt } from 'node:crypto';
import { FRAME_HEADER_BYTES, MAX_FRAME_BYTES, maxSamplesPerFrame, MTU_FRAME_BYTES, type SampleEncoding } from '../../shared/frame.ts';
import { openUdpTransport, openWsTransport, type FrameTransport } from './frame-transport.ts';
import { optionError, sendError } from './send-errors.ts';

export type SendTarget = { kind: 'udp'; host: string; port: number } | { kind: 'ws'; url: string };

export const DEFAULT_UDP_TARGET: SendTarget = { kind: 'udp', host: '127.0.0.1', port: 9750 };

/** Default largest WebSocket frame, bytes: large enough to amortise per-message cost, ≤ MAX_FRAME_BYTES. */
export const WS_FRAME_BYTES = 16384;

/** The shape of one sample frame (one instant across all channels) of the input. */
export interface RowShape {
  channels: number;
  encoding: SampleEncoding;
  /** channels × bytesPerSample(encoding). */
  blockAlignBytes: number;
}

export function checkInt(option: string, v: number, min: number, max: number): void {
  if (!Number.isSafeInteger(v) || v < min || v > max) throw optionError(option, v, 'out of range', `an integer ${min}–${max}`);
}

/**
 * A fresh stream id for one run: uniform over 1–2^32−1 (crypto.randomInt), so two runs of the
 * sender (or two senders) are told apart by the server without anyone choosing ids. 0 is left out so
 * a random id never looks like an unset field.
 */
export function randomStreamId(): number {
  return randomInt(1, 0x100000000);
}

/** ERR_SEND_OPTION: the frames' firstSample would pass 2^53 − 1 (docs/wire-format.md). */
export function clockOverflow(startSample: number, sent: number) {
  return optionError('startSample', startSample, `the sample clock would pass 2^53 − 1 after ${sent} samples`, `an integer 0–${Number.MAX_SAFE_INTEGER} leaving room for the samples sent`);
}

/** The given stream id (checked to be a uint32), or a fresh random one. */
export function resolveStreamId(streamId: number | undefined): number {
  if (streamId === undefined) return randomStreamId();
  checkInt('streamId', streamId, 0, 0xffffffff);
  return streamId;
}

/** Samples per channel per frame for this input and target, or ERR_SEND_OPTION naming the option. */
export function resolveSamplesPerFrame(shape: RowShape, target: SendTarget, options: { samplesPerFrame?: number; maxFrameBytes?: number }): number {
  const { channels, encoding, blockAlignBytes } = shape;
  const smallest = FRAME_HEADER_BYTES + blockAlignBytes;
  if (smallest > MAX_FRAME_BYTES) {
    throw sendError('ERR_SEND_TOO_WIDE', `one sample of ${channels} channels × ${encoding} makes a ${smallest}-byte frame, over the ${MAX_FRAME_BYTES}-byte limit`);
  }
  const most = maxSamplesPerFrame(channels, encoding, MAX_FRAME_BYTES);
  if (options.samplesPerFrame !== undefined) {
    const n = options.samplesPerFrame;
    if (!Number.isSafeInteger(n) || n < 1 || n > most) {
      throw optionError('samplesPerFrame', n, `a frame of ${channels}-channel ${encoding} holds at most ${most} samples (${MAX_FRAME_BYTES}-byte limit)`, `1–${most}`);
    }
    return n;
  }
  const limit = options.maxFrameBytes ?? (target.kind === 'udp' ? MTU_FRAME_BYTES : WS_FRAME_BYTES);
  if (!Number.isSafeInteger(limit) || limit < smallest || limit > MAX_FRAME_BYTES) {
    throw optionError('maxFrameBytes', limit, `one sample of ${channels}-channel ${encoding} needs a ${smallest}-byte frame`, `${smallest}–${MAX_FRAME_BYTES}`);
  }
  return maxSamplesPerFrame(channels, encoding, limit);
}

export function openTransport(target: SendTarget, wsMaxBufferedBytes?: number): Promise<FrameTransport> {
  return target.kind === 'udp' ? openUdpTransport(target.host, target.port) : openWsTransport(target.url, { maxBufferedBytes: wsMaxBufferedBytes });
}
