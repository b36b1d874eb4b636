/**
 * The channels processing uses: those the operator left in (PUT /api/channels/mask) and, of a
 * merged array, those whose member delivered the span (a block's `absent` flags). A channel whose
 * member was absent stays out for `holdSamples` after it returns, while the covariance still
 * remembers the zeros that stood in for it (about three time constants of the averaging), so a
 * member that comes back does not enter the scan with a half-faded row of the covariance.
 *
 * `apply` is called only when the combined set changes; at least one channel always stays in (if
 * every channel is absent the previous set is kept: the span is all zeros anyway).
 */
export class InputMask {
  readonly #channels: number;
  readonly #apply: (active: boolean[]) => void;
  #user: boolean[];
  /** Per channel: the sample index up to which it stays out (absent, or recently returned). */
  readonly #outUntil: Float64Array;
  #applied: boolean[];
  holdSamples: number;
  /** Spans (blocks) with at least one absent channel, and channel-samples left out for absence. */
  absentBlocks = 0;
  absentChannelSamples = 0;

  constructor(channels: number, holdSamples: number, apply: (active: boolean[]) => void) {
    this.#channels = channels;
    this.#apply = apply;
    this.holdSamples = holdSamples;
    this.#user = Array(channels).fill(true);
    this.#outUntil = new Float64Array(channels).fill(-Infinity);
    this.#applied = Array(channels).fill(true);
  }

  /** The operator's choice: true = in use. */
  setUser(active: boolean[]): void {
    this.#user = [...active];
    this.#update(-Infinity);
  }

  /** Channels left out now because their member was absent or has just returned. */
  get inputOut(): number[] {
    return this.#applied.flatMap((a, c) => (!a && this.#user[c] ? [c] : []));
  }

  /** Look at a block before it is processed. */
  observe(sampleIndex: number, frames: number, absent: Uint8Array | null | undefined): void {
    const end = sampleIndex + frames;
    if (absent) {
      let any = false;
      for (let c = 0; c < this.#channels; c++) {
        if (absent[c]) {
          any = true;
          this.absentChannelSamples += frames;
          this.#outUntil[c] = end + this.holdSamples;
        }
      }
      if (any) this.absentBlocks++;
    }
    this.#update(sampleIndex);
  }

  /** Called for every block: allocates only when the set of channels in use changes. */
  #update(at: number): void {
    let changed = false;
    let anyIn = false;
    for (let c = 0; c < this.#channels; c++) {
      const inUse = this.#user[c] && !(this.#outUntil[c] > at);
      if (inUse) anyIn = true;
      if (inUse !== this.#applied[c]) changed = true;
    }
    if (!changed || !anyIn) return;
    const next = this.#user.map((u, c) => u && !(this.#outUntil[c] > at));
    this.#applied = next;
    this.#apply(next);
  }
}
