/**
 * `GET /api/status`, polled once a second while the live connection is up, reduced to the figures
 * the status strip, array layout and channel list show. The status JSON is informational and grows
 * with the server, so every field is read defensively: a missing one is `null`, never a guess.
 */
import { getStatus } from './api.ts';

export const STATUS_POLL_MS = 1000;
/** An input gap or lost frame keeps the "input gaps" badge lit this long. */
const GAP_HOLD_MS = 5000;

export interface ChannelReport {
  index: number;
  /** Recent level, dBFS. */
  levelDb: number | null;
  /** Peak hold, dBFS. */
  peakHoldDb: number | null;
  /** Clipped samples counted by the server. */
  clipped: number | null;
  /** The server judges the channel dead (far below the others). */
  dead: boolean;
  /** Excluded from processing. */
  masked: boolean;
}

export interface StatusSummary {
  sourceKind: string | null;
  /** One-line description of the simulated scene, when the source is the simulator. */
  sceneSummary: string | null;
  sampleRateHz: number | null;
  streams: number;
  /** Of the selected stream (the one being processed). */
  inputRateHz: number | null;
  framesLost: number | null;
  gapSamples: number | null;
  /** Gap samples the processing side received (all streams' losses as the engine saw them). */
  timelineGapSamples: number | null;
  engineLoad: number | null;
  shedStep: number | null;
  /** Rows per second the engine produces now (the set rate divided while it sheds load). */
  effectiveRateHz: number | null;
  latencyP50Ms: number | null;
  liveClients: number | null;
  /** Channels the server excludes from processing, if it reports them. */
  maskedChannels: number[] | null;
  /** Per-channel levels, when the server reports them (status `channels`). */
  channels: ChannelReport[] | null;
}

type Obj = Record<string, unknown>;

function obj(v: unknown): Obj | null {
  return typeof v === 'object' && v !== null && !Array.isArray(v) ? (v as Obj) : null;
}
function num(v: unknown): number | null {
  return typeof v === 'number' && Number.isFinite(v) ? v : null;
}
function str(v: unknown): string | null {
  return typeof v === 'string' ? v : null;
}
function intList(v: unknown): number[] | null {
  return Array.isArray(v) && v.every((x) => Number.isInteger(x)) ? (v as number[]) : null;
}

/** The figures of a status document; absent or mistyped fields become null. */
export function summariseStatus(raw: Obj): StatusSummary {
  const source = obj(raw.source);
  const scenario = obj(source?.scenario);
  const input = obj(raw.input);
  const streams = Array.isArray(raw.streams) ? raw.streams.map(obj).filter((s): s is Obj => s !== null) : [];
  const selected = streams.find((s) => s.selected === true) ?? streams[0] ?? null;
  const engine = obj(raw.engine);
  const shed = obj(engine?.shed);
  const latency = obj(engine?.latencyMs);
  const live = obj(raw.live);
  const array = obj(raw.array);
  const timeline = obj(raw.timeline);
  let maskedChannels = intList(array?.maskedChannels) ?? intList(array?.masked) ?? intList(engine?.maskedChannels) ?? null;
  let channels: ChannelReport[] | null = null;
  if (Array.isArray(raw.channels)) {
    channels = raw.channels.map((c, i) => {
      const o = obj(c);
      const index = num(o?.channel) ?? num(o?.index) ?? i;
      return {
        index,
        levelDb: typeof c === 'number' ? num(c) : (num(o?.levelDbfs) ?? num(o?.levelDb)),
        peakHoldDb: num(o?.peakHoldDbfs),
        clipped: num(o?.clipped),
        dead: o?.dead === true,
        masked: o?.masked === true || (maskedChannels?.includes(index) ?? false),
      };
    });
    if (maskedChannels === null && raw.channels.every((c) => typeof obj(c)?.masked === 'boolean')) {
      maskedChannels = channels.filter((c) => c.masked).map((c) => c.index);
    }
  }
  return {
    sourceKind: str(source?.kind),
    sceneSummary: str(scenario?.summary),
    sampleRateHz: num(input?.sampleRateHz),
    streams: streams.length,
    inputRateHz: num(selected?.inputRateHz),
    framesLost: num(selected?.framesLost),
    gapSamples: num(selected?.gapSamples),
    timelineGapSamples: num(timeline?.gapSamples),
    engineLoad: num(engine?.load),
    shedStep: num(shed?.step),
    effectiveRateHz: num(shed?.spectrumRateHz),
    latencyP50Ms: num(latency?.p50),
    liveClients: num(live?.clients),
    maskedChannels,
    channels,
  };
}

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
    if (r.ok && obj(r.data)) {
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
