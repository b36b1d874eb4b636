/**
 * The dashboard player's jitter buffer (one beam, mono float32), used inside the audio worklet
 * (beam-player-worklet.ts). A ring of fixed capacity, allocated once:
 * - it starts (and restarts after an underrun) only once `targetSamples` are buffered, so small
 *   irregularities in the WebSocket's delivery do not reach the ear;
 * - when a push would overfill it, the oldest samples are dropped and counted (`droppedSamples`),
 *   down to the target: the delay stays bounded by the capacity whatever the clocks do, and a
 *   sender's clock a little faster than the sound card's costs one skip now and then, not a small
 *   one at every push;
 * - a pull that finds it empty while playing plays zeros, counted as underrun samples and events.
 * It tracks the stream's sample index of its read position (`readIndex`), so what is played can be
 * matched to what the server sent.
 */
export interface JitterBufferOptions {
  /** Ring size, samples: the bound on memory and on the delay (push beyond it drops the oldest). */
  capacitySamples: number;
  /** Samples buffered before playing starts or resumes; 1 ≤ target ≤ capacity. */
  targetSamples: number;
}

export class JitterBuffer {
  readonly capacity: number;
  readonly target: number;
  readonly #ring: Float32Array;
  #read = 0;
  #size = 0;
  #playing = false;
  /** Stream sample index of the next sample a pull takes; null before the first push. */
  readIndex: number | null = null;
  pushedSamples = 0;
  playedSamples = 0;
  droppedSamples = 0;
  underrunSamples = 0;
  underruns = 0;

  constructor(opts: JitterBufferOptions) {
    const { capacitySamples: cap, targetSamples: t } = opts;
    if (!Number.isInteger(cap) || cap < 1) throw new RangeError(`capacitySamples ${cap}: a positive integer`);
    if (!Number.isInteger(t) || t < 1 || t > cap) throw new RangeError(`targetSamples ${t}: an integer 1–${cap}`);
    this.capacity = cap;
    this.target = t;
    this.#ring = new Float32Array(cap);
  }

  /** Samples waiting. */
  get size(): number {
    return this.#size;
  }

  /** Playing (false while filling to the target, at the start and after an underrun). */
  get playing(): boolean {
    return this.#playing;
  }

  /**
   * Append `n` samples of `x` (from `offset`), or `n` zeros when `x` is null (a gap in the stream).
   * @param firstIndex stream sample index of the first one; used only when the buffer is empty and
   *   has no index yet (the first push, or after {@link reset})
   */
  push(x: Float32Array | null, offset: number, n: number, firstIndex: number): void {
    if (n <= 0) return;
    if (this.readIndex === null) this.readIndex = firstIndex;
    const cap = this.capacity;
    // More than fits at once: only the newest `cap` can stay; the rest counts as dropped at once.
    if (n > cap) {
      const lost = n - cap;
      this.#dropOldest(this.#size);
      this.droppedSamples += lost;
      this.readIndex += lost;
      this.pushedSamples += lost;
      offset += lost;
      n = cap;
    }
    // Full: drop the oldest so that the target is left after this push (all of them when n > target).
    if (this.#size + n > cap) this.#dropOldest(Math.min(this.#size, this.#size + n - this.target));
    let w = (this.#read + this.#size) % cap;
    const ring = this.#ring;
    for (let i = 0; i < n; i++) {
      ring[w] = x === null ? 0 : x[offset + i];
      if (++w === cap) w = 0;
    }
    this.#size += n;
    this.pushedSamples += n;
  }

  /**
   * Fill `out[0 … n)` with the next samples: zeros while filling to the target, and zeros for what
   * is missing after playing ran dry (an underrun: playing stops until the target is reached again).
   * @returns samples taken from the stream (the rest of out is zeros)
   */
  pull(out: Float32Array, n = out.length): number {
    if (!this.#playing) {
      if (this.#size >= this.target) this.#playing = true;
      else {
        out.fill(0, 0, n);
        return 0;
      }
    }
    const take = Math.min(n, this.#size);
    const cap = this.capacity;
    const ring = this.#ring;
    let r = this.#read;
    for (let i = 0; i < take; i++) {
      out[i] = ring[r];
      if (++r === cap) r = 0;
    }
    this.#read = r;
    this.#size -= take;
    this.playedSamples += take;
    if (this.readIndex !== null) this.readIndex += take;
    if (take < n) {
      out.fill(0, take, n);
      this.underrunSamples += n - take;
      this.underruns++;
      this.#playing = false;
    }
    return take;
  }

  /** Empty it and forget the index (a new timeline starts with the next push); counters stay. */
  reset(): void {
    this.#read = 0;
    this.#size = 0;
    this.#playing = false;
    this.readIndex = null;
  }

  #dropOldest(k: number): void {
    this.#read = (this.#read + k) % this.capacity;
    this.#size -= k;
    this.droppedSamples += k;
    if (this.readIndex !== null) this.readIndex += k;
  }
}
