/**
 * `GET /api/status`, polled once a second while the live connection is up, reduced to the figures
 * the status strip, array layout and channel list show (status-summary.ts), with the "input gaps"
 * badge's state.
 */
import { getStatus } from './api.ts';
import { summariseStatus, type StatusSummary } from './status-summary.ts';

export { summariseStatus, type ChannelReport, type StatusSummary } from './status-summary.ts';

export const STATUS_POLL_MS = 1000;
/** An input gap or lost frame keeps the "input gaps" badge lit this long. */
const GAP_HOLD_MS = 5000;

export class ServerStatus {
  #summary = $state.raw<StatusSummary | null>(null);
  #error = $state<string | null>(null);
  #inputGaps = $state(false);
  #updatedAtMs = $state(0);

  #timer: ReturnType<typeof setTimeout> | null = null;
  #running = false;
  #generation = 0;
  #lastLoss = -1;
  #gapSeenAtMs = -Infinity;

  get summary(): StatusSummary | null {
    return this.#summary;
  }
  /** Why the last poll failed, or null. */
  get error(): string | null {
    return this.#error;
  }
  /** Samples were lost on input within the last few seconds. */
  get inputGaps(): boolean {
    return this.#inputGaps;
  }
  get updatedAtMs(): number {
    return this.#updatedAtMs;
  }
  start(): void {
    if (this.#running) return;
    this.#running = true;
    this.#lastLoss = -1;
    void this.#poll(++this.#generation);
  }

  stop(): void {
    this.#running = false;
    this.#generation++;
    if (this.#timer) clearTimeout(this.#timer);
    this.#timer = null;
  }

  async #poll(gen: number): Promise<void> {
    const r = await getStatus();
    if (gen !== this.#generation) return;
    const now = performance.now();
    if (r.ok && typeof r.data === 'object' && r.data !== null && !Array.isArray(r.data)) {
      const s = summariseStatus(r.data);
      const loss = (s.gapSamples ?? 0) + (s.framesLost ?? 0) + (s.timelineGapSamples ?? 0);
      if (this.#lastLoss >= 0 && loss > this.#lastLoss) this.#gapSeenAtMs = now;
      this.#lastLoss = loss;
      this.#inputGaps = now - this.#gapSeenAtMs < GAP_HOLD_MS;
      this.#summary = s;
      this.#error = null;
      this.#updatedAtMs = now;
    } else {
      this.#error = r.ok ? 'status is not a JSON object' : r.message;
    }
    if (this.#running) this.#timer = setTimeout(() => void this.#poll(gen), STATUS_POLL_MS);
  }
}
