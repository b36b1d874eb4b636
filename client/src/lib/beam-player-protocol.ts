/**
 * Messages between the dashboard's beam player (beam-player.svelte.ts, main thread) and its audio
 * worklet (beam-player-worklet.ts), a discriminated union on `type` each way.
 */

/** Set at the worklet's construction (AudioWorkletNode processorOptions). */
export interface PlayerOptions {
  /** Jitter buffer target: samples buffered before playing starts or resumes, ms. */
  targetMs: number;
  /** Jitter buffer capacity (the bound on delay and memory), ms; the oldest are dropped beyond. */
  capacityMs: number;
  /** Limiter ceiling, dBFS. */
  ceilingDbfs: number;
  /** Starting volume, dB. */
  volumeDb: number;
  /** Samples kept of what arrived and what was played, for checks (0: none). */
  recordSamples: number;
}

export type ToWorklet =
  /** Samples of the beam: `zerosBefore` zeros first (a gap of exactly that length), then `data`. */
  | { type: 'samples'; firstSample: number; zerosBefore: number; data: Float32Array }
  /** A new timeline starts with the next samples (the stream jumped): empty the buffer. */
  | { type: 'reset' }
  | { type: 'volume'; db: number };

export interface PlayerStats {
  /** Samples waiting in the jitter buffer. */
  bufferedSamples: number;
  pushedSamples: number;
  playedSamples: number;
  droppedSamples: number;
  underrunSamples: number;
  underruns: number;
  /** Largest output magnitude so far (after volume and limiter). */
  maxAbsOut: number;
  /** Samples the limiter turned down. */
  limitedSamples: number;
  /** Stream sample index of the next sample to play (null before the first). */
  readIndex: number | null;
  playing: boolean;
  /** Limiter ceiling as an amplitude (float32). */
  ceiling: number;
}

/** The first samples that reached the worklet and the first it played (before the volume), with their stream sample indices. */
export interface PlayerRecord {
  receivedFirstSample: number;
  received: Float32Array;
  /** Played samples are contiguous from playedFirstSample; recording stopped at the first drop or underrun. */
  playedFirstSample: number;
  played: Float32Array;
}

export type FromWorklet = ({ type: 'stats' } & PlayerStats) | ({ type: 'record' } & PlayerRecord);
