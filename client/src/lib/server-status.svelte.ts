/**
 * `GET /api/status`, polled once a second while the live connection is up, reduced to the figures
 * the status strip, array layout and channel list show (status-summary.ts) and to what the Input
 * panel shows (input-status.ts), with the "input gaps" and "input refused" badges' state.
 */
import { getStatus } from './api.ts';
import { inputCounts, summariseInput, watchRefusals, type InputView, type RefusalState } from './input-status.ts';
import { summariseStatus, type StatusSummary } from './status-summary.ts';
import { summariseBroker, type BrokerView } from './broker-status.ts';
// Issue 17: remote bin workers (status engine.remote).
import { summariseRemote, type RemoteView } from './remote-status.ts';

export { summariseStatus, type ChannelReport, type StatusSummary } from './status-summary.ts';

export const STATUS_POLL_MS = 1000;
/** An input gap or lost frame keeps the "input gaps" badge lit this long. */
const GAP_HOLD_MS = 5000;

export class ServerStatus {
  #summary = $state.raw<StatusSummary | null>(null);
  #error = $state<string | null>(null);
  #inputGaps = $state(false);
  #updatedAtMs = $state(0);
  #input = $state.raw<InputView | null>(null);
  #broker = $state.raw<BrokerView | null>(null);
  #refusing = $state(false);
  #remote = $state.raw<RemoteView | null>(null);
  #refusals: RefusalState | null = null;
  #polling = false;
  #again = false;

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
  /** The site broker (status `cluster`), null when none is configured. */
  get broker(): BrokerView | null {
    return this.#broker;
  }
  /** The engine's remote bin workers (status `engine.remote`), null when it has none. */
  get remote(): RemoteView | null {
    return this.#remote;
  }
  /** The input as the Input panel shows it (lib/input-status.ts). */
  get input(): InputView | null {
    return this.#input;
  }
  /** Frames are being refused and nothing has been accepted for a few seconds. */
  get refusing(): boolean {
    return this.#refusing;
  }

  start(): void {
    if (this.#running) return;
    this.#running = true;
    this.#lastLoss = -1;
    this.#refusals = null;
    void this.#poll(++this.#generation);
  }

  /** Ask now (after a change the dashboard made), then every STATUS_POLL_MS again. */
  refresh(): void {
    if (!this.#running) return;
    if (this.#polling) {
      this.#again = true;
      return;
    }
    if (this.#timer) clearTimeout(this.#timer);
    this.#timer = null;
    void this.#poll(this.#generation);
  }

  stop(): void {
    this.#running = false;
    this.#generation++;
    if (this.#timer) clearTimeout(this.#timer);
    this.#timer = null;
  }

  async #poll(gen: number): Promise<void> {
    this.#polling = true;
    const r = await getStatus();
    this.#polling = false;
    if (gen !== this.#generation) return;
    const now = performance.now();
    if (r.ok && typeof r.data === 'object' && r.data !== null && !Array.isArray(r.data)) {
      const s = summariseStatus(r.data);
      const loss = (s.gapSamples ?? 0) + (s.framesLost ?? 0) + (s.timelineGapSamples ?? 0);
      if (this.#lastLoss >= 0 && loss > this.#lastLoss) this.#gapSeenAtMs = now;
      this.#lastLoss = loss;
      this.#inputGaps = now - this.#gapSeenAtMs < GAP_HOLD_MS;
      this.#summary = s;
      this.#broker = summariseBroker(r.data);
      this.#remote = summariseRemote(r.data);
      const input = summariseInput(r.data);
      this.#refusals = watchRefusals(this.#refusals, inputCounts(input), now);
      this.#input = input;
      this.#refusing = input.live && this.#refusals.refusing;
      this.#error = null;
      this.#updatedAtMs = now;
    } else {
      this.#error = r.ok ? 'status is not a JSON object' : r.message;
    }
    if (!this.#running) return;
    if (this.#again) {
      this.#again = false;
      void this.#poll(gen);
      return;
    }
    this.#timer = setTimeout(() => void this.#poll(gen), STATUS_POLL_MS);
  }
}
