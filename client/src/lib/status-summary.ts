/**
 * The figures of a `GET /api/status` document that the status strip, array layout and channel list
 * show. The status JSON is informational and grows with the server, so every field is read
 * defensively: a missing one is `null`, never a guess. (A plain module: unit tests import it.)
 */

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

/** A status document's object, read field by field: the readers below never guess a missing value. */
export type Obj = Record<string, unknown>;

export function obj(v: unknown): Obj | null {
  return typeof v === 'object' && v !== null && !Array.isArray(v) ? (v as Obj) : null;
}
export function num(v: unknown): number | null {
  return typeof v === 'number' && Number.isFinite(v) ? v : null;
}
export function str(v: unknown): string | null {
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
  // The processed stream; none while nothing is chosen (a server that does not say which one is
  // processed: its first stream).
  const saysSelected = streams.some((s) => typeof s.selected === 'boolean');
  const selected = streams.find((s) => s.selected === true) ?? (saysSelected ? null : (streams[0] ?? null));
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
