/**
 * Real-time driver for a block generator (the scene simulator): hands blocks to a sink at the pace
 * of the wall clock.
 */

import type { Block, BlockSink } from '../../shared/types.ts';

/** What the driver needs from a generator; SceneSimulator satisfies it. */
export interface PacedGenerator {
  readonly sampleRateHz: number;
  readonly blockFrames: number;
  /** Next contiguous block. */
  next(): Block;
  /** Advance the clock without rendering; the next block must carry `discontinuity: true`. */
  skip(frames: number): void;
}

export interface SimulatorSourceOptions {
  /** Clock in milliseconds; default performance.now. Tests inject a fake one. */
  now?: () => number;
  /** Longest backlog rendered in one burst after a stall, seconds; the rest is skipped. Default 1. */
  maxCatchUpS?: number;
  /**
   * Longest a tick renders before it yields to the rest of the server, ms (default 10): blocks
   * still due wait for the next tick, and a backlog beyond maxCatchUpS is skipped as after a stall.
   * So a scene too large to render in real time (hundreds of channels) slows the stream, never
   * the server: REST and status stay answered.
   */
  maxTickMs?: number;
}

export interface SimulatorSourceStats {
  blocks: number;
  samples: number;
  skippedSamples: number;
  /** Ticks that ran out of time with blocks still due (the scene renders slower than real time). */
  yields: number;
}

/**
 * Real-time driver: hands the simulator's blocks to a sink at the pace of the wall clock. The
 * sample clock follows elapsed time since start(); after a stall the backlog is rendered at once up
 * to maxCatchUpS, and anything older is skipped (counted, and flagged by `discontinuity: true` on
 * the next block) so the stream resynchronises with the wall clock instead of lagging forever.
 */
export class SimulatorSource {
  readonly #sim: PacedGenerator;
  readonly #now: () => number;
  readonly #maxBurstBlocks: number;
  readonly #maxTickMs: number;
  #timer: ReturnType<typeof setInterval> | null = null;
  #sink: BlockSink | null = null;
  #onError: ((err: unknown) => void) | undefined;
  #startMs = 0;
  /** Samples handed out or skipped since start(): the stream's position on the wall clock. */
  #accounted = 0;
  #stats: SimulatorSourceStats = { blocks: 0, samples: 0, skippedSamples: 0, yields: 0 };

  constructor(sim: PacedGenerator, options: SimulatorSourceOptions = {}) {
    if (typeof sim !== 'object' || sim === null || typeof sim.next !== 'function' || typeof sim.skip !== 'function') {
      throw new TypeError('SimulatorSource: sim must be a SceneSimulator (next() and skip())');
    }
    const maxCatchUpS = options.maxCatchUpS ?? 1;
    if (!Number.isFinite(maxCatchUpS) || maxCatchUpS <= 0 || maxCatchUpS > 60) {
      throw Object.assign(new RangeError(`SimulatorSource: maxCatchUpS must be in (0, 60], got ${maxCatchUpS}`), { code: 'ERR_SIM_OPTION' });
    }
    this.#sim = sim;
    this.#now = options.now ?? (() => performance.now());
    this.#maxBurstBlocks = Math.max(1, Math.ceil((maxCatchUpS * sim.sampleRateHz) / sim.blockFrames));
    this.#maxTickMs = options.maxTickMs ?? 10;
    if (!(this.#maxTickMs > 0 && this.#maxTickMs <= 1000)) throw Object.assign(new RangeError(`SimulatorSource: maxTickMs must be in (0, 1000], got ${this.#maxTickMs}`), { code: 'ERR_SIM_OPTION' });
  }

  /**
   * Starts producing. The stream clock is re-based on the wall clock at every start(); blocks carry
   * on from the generator's current sample index. A sink that throws stops the source; the error
   * goes to onError, or is rethrown from the timer (an uncaught exception) when there is none, so it
   * is never lost.
   */
  start(sink: BlockSink, onError?: (err: unknown) => void): void {
    if (typeof sink !== 'function') throw new TypeError('SimulatorSource: sink must be a function');
    if (this.#timer !== null) throw new Error('SimulatorSource: already started');
    this.#sink = sink;
    this.#onError = onError;
    this.#startMs = this.#now();
    this.#accounted = 0;
    const blockMs = (1000 * this.#sim.blockFrames) / this.#sim.sampleRateHz;
    // Tick at half a block so a block leaves within ~half its duration of being due.
    const tickMs = Math.min(20, Math.max(1, blockMs / 2));
    this.#timer = setInterval(() => this.#tick(), tickMs);
    this.#timer.unref();
  }

  stop(): void {
    if (this.#timer !== null) clearInterval(this.#timer);
    this.#timer = null;
    this.#sink = null;
  }

  stats(): SimulatorSourceStats {
    return { ...this.#stats };
  }

  #tick(): void {
    const sim = this.#sim;
    const frames = sim.blockFrames;
    const tickStart = this.#now();
    // Multiplied before dividing: (290 / 1000) · 48 000 rounds to 13 919.99…, a block late.
    const elapsedSamples = Math.floor(((tickStart - this.#startMs) * sim.sampleRateHz) / 1000);
    let due = Math.floor((elapsedSamples - this.#accounted) / frames);
    if (due > this.#maxBurstBlocks) {
      const skipped = (due - this.#maxBurstBlocks) * frames;
      sim.skip(skipped);
      this.#accounted += skipped;
      this.#stats.skippedSamples += skipped;
      due = this.#maxBurstBlocks;
    }
    for (let k = 0; k < due; k++) {
      const sink = this.#sink;
      if (sink === null) return; // stopped by the sink itself
      // The tick's time is up: the rest stays due for the next tick (or is skipped if it grows).
      if (k > 0 && this.#now() - tickStart >= this.#maxTickMs) {
        this.#stats.yields++;
        return;
      }
      const block = sim.next();
      this.#accounted += frames;
      this.#stats.blocks += 1;
      this.#stats.samples += frames;
      try {
        sink(block);
      } catch (err) {
        const onError = this.#onError;
        this.stop();
        if (onError === undefined) throw err;
        onError(err);
        return;
      }
    }
  }
}
