/**
 * Per-channel levels of the incoming stream: rms over the last window (dBFS, re full scale 1.0 —
 * a full-scale sine reads −3 dBFS), peak hold, clipping count, and a dead-channel flag. O(M·n) per
 * block on the main thread, no allocation per block.
 *
 * Dead: rms below −100 dBFS, or more than `deadBelowMedianDb` below the median channel, over a
 * whole window. Clipping: samples with |x| ≥ 0.999 (counted, never reset except by reset()).
 */

export interface ChannelLevel {
  channel: number;
  levelDbfs: number;
  peakDbfs: number;
  peakHoldDbfs: number;
  clipped: number;
  dead: boolean;
  masked: boolean;
}

const FLOOR_DB = -200;
const CLIP = 0.999;

export class ChannelMeters {
  readonly channels: number;
  readonly windowSamples: number;
  readonly deadBelowMedianDb: number;
  readonly #sumSq: Float64Array;
  readonly #peak: Float64Array;
  readonly #levelDb: Float64Array;
  readonly #peakDb: Float64Array;
  readonly #holdDb: Float64Array;
  readonly #clipped: Float64Array;
  #n = 0;
  masked: boolean[];

  constructor(channels: number, sampleRateHz: number, windowS = 0.25, deadBelowMedianDb = 40) {
    this.channels = channels;
    this.windowSamples = Math.max(1, Math.round(windowS * sampleRateHz));
    this.deadBelowMedianDb = deadBelowMedianDb;
    this.#sumSq = new Float64Array(channels);
    this.#peak = new Float64Array(channels);
    this.#levelDb = new Float64Array(channels).fill(FLOOR_DB);
    this.#peakDb = new Float64Array(channels).fill(FLOOR_DB);
    this.#holdDb = new Float64Array(channels).fill(FLOOR_DB);
    this.#clipped = new Float64Array(channels);
    this.masked = Array(channels).fill(false);
  }

  /** One planar block, channel c sample i at data[c·frames + i]. */
  push(data: Float32Array, frames: number): void {
    const M = this.channels;
    for (let c = 0; c < M; c++) {
      let s = 0;
      let p = this.#peak[c];
      let clip = 0;
      for (let i = c * frames, e = i + frames; i < e; i++) {
        const x = data[i];
        s += x * x;
        const a = x < 0 ? -x : x;
        if (a > p) p = a;
        if (a >= CLIP) clip++;
      }
      this.#sumSq[c] += s;
      this.#peak[c] = p;
      this.#clipped[c] += clip;
    }
    this.#n += frames;
    if (this.#n >= this.windowSamples) this.#closeWindow();
  }

  #closeWindow(): void {
    for (let c = 0; c < this.channels; c++) {
      const ms = this.#sumSq[c] / this.#n;
      this.#levelDb[c] = ms > 0 ? 10 * Math.log10(ms) : FLOOR_DB;
      this.#peakDb[c] = this.#peak[c] > 0 ? 20 * Math.log10(this.#peak[c]) : FLOOR_DB;
      if (this.#peakDb[c] > this.#holdDb[c]) this.#holdDb[c] = this.#peakDb[c];
      this.#sumSq[c] = 0;
      this.#peak[c] = 0;
    }
    this.#n = 0;
  }

  /** Forget peak holds and clip counts. */
  reset(): void {
    this.#holdDb.fill(FLOOR_DB);
    this.#clipped.fill(0);
  }

  levels(): ChannelLevel[] {
    const sorted = Array.from(this.#levelDb).sort((a, b) => a - b);
    const median = sorted[Math.floor((sorted.length - 1) / 2)];
    return Array.from(this.#levelDb, (l, c) => ({
      channel: c,
      levelDbfs: l,
      peakDbfs: this.#peakDb[c],
      peakHoldDbfs: this.#holdDb[c],
      clipped: this.#clipped[c],
      dead: l < -100 || l < median - this.deadBelowMedianDb,
      masked: this.masked[c],
    }));
  }
}
