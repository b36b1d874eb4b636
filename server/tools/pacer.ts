/**
 * Real-time pacing for senders. The schedule is absolute: a sample `offset` samples after the start
 * is due at start + offset / (sampleRateHz · speed), measured on performance.now(). Timer lateness
 * therefore never accumulates (no drift), and a late wake-up is followed by a catch-up burst.
 *
 * Timers are not woken more often than every `batchMs`: when the next item is due sooner, the pacer
 * sleeps `batchMs` and the items that came due meanwhile go out back to back. That bounds timer
 * wake-ups to ~1/batchMs per second whatever the frame size, at the cost of up to `batchMs` of
 * jitter, and never sends anything early.
 */

export interface PacerOptions {
  /** Shortest sleep, milliseconds (default 5). */
  batchMs?: number;
  /** Clock in milliseconds, default performance.now (injectable for tests). */
  nowMs?: () => number;
}

/** Sleep `ms` milliseconds, or less if `signal` aborts; never rejects. */
export function sleepMs(ms: number, signal?: AbortSignal): Promise<void> {
  return new Promise((resolve) => {
    if (signal?.aborted) return resolve();
    const done = () => {
      clearTimeout(timer);
      signal?.removeEventListener('abort', done);
      resolve();
    };
    const timer = setTimeout(done, ms);
    signal?.addEventListener('abort', done, { once: true });
  });
}

export class Pacer {
  readonly #msPerSample: number;
  readonly #batchMs: number;
  readonly #nowMs: () => number;
  #startMs = Number.NaN;

  /**
   * @param sampleRateHz samples per second per channel of the stream being paced
   * @param speed multiple of real time, > 0 (2 = twice as fast)
   */
  constructor(sampleRateHz: number, speed: number, options: PacerOptions = {}) {
    if (!(sampleRateHz > 0) || !Number.isFinite(sampleRateHz)) throw new RangeError(`sampleRateHz ${sampleRateHz}, allowed > 0`);
    if (!(speed > 0) || !Number.isFinite(speed)) throw new RangeError(`speed ${speed}, allowed a finite number > 0`);
    const batchMs = options.batchMs ?? 5;
    if (!(batchMs >= 0) || !Number.isFinite(batchMs)) throw new RangeError(`batchMs ${batchMs}, allowed ≥ 0`);
    this.#msPerSample = 1000 / (sampleRateHz * speed);
    this.#batchMs = batchMs;
    this.#nowMs = options.nowMs ?? (() => performance.now());
  }

  /** Start the clock now: offset 0 is due immediately. */
  start(): void {
    this.#startMs = this.#nowMs();
  }

  /** Milliseconds after start() at which `offsetSamples` is due. */
  dueMs(offsetSamples: number): number {
    return offsetSamples * this.#msPerSample;
  }

  /** Milliseconds since start(). */
  elapsedMs(): number {
    return this.#nowMs() - this.#startMs;
  }

  /**
   * Resolve once `offsetSamples` is due (at once if it already is), or early if `signal` aborts.
   * Starts the clock on the first call if start() was not called.
   */
  async waitFor(offsetSamples: number, signal?: AbortSignal): Promise<void> {
    if (Number.isNaN(this.#startMs)) this.start();
    const due = this.dueMs(offsetSamples);
    let waitMs = due - this.elapsedMs();
    while (waitMs > 0 && !signal?.aborted) {
      await sleepMs(Math.max(waitMs, this.#batchMs), signal);
      waitMs = due - this.elapsedMs();
    }
  }
}
