/**
 * What the Input panel and the status strip show about the input, from the server's status
 * document (`GET /api/status`): is anything arriving, which stream is processed and where it comes
 * from, how it was chosen, which frames are refused and why (in plain words), and the capture
 * command, RTP sessions and members of a merged array when the server reports them.
 *
 * Pure functions of the document. Every field is read defensively: the status JSON grows with the
 * server, so a missing or mistyped field is `null` (shown as "—") or an empty list (section hidden),
 * never a guess.
 */

import { num, obj, str, type Obj } from './status-summary.ts';
function objs(v: unknown): Obj[] {
  return Array.isArray(v) ? v.map(obj).filter((o): o is Obj => o !== null) : [];
}
function ints(v: unknown): number[] {
  return Array.isArray(v) ? v.filter((x): x is number => Number.isInteger(x)) : [];
}
function strs(v: unknown): string[] {
  return Array.isArray(v) ? v.filter((x): x is string => typeof x === 'string') : [];
}

/** A refusal reason: a short label for lists, and what it means for the title. */
export interface ReasonText {
  label: string;
  explain: string;
}

/**
 * Every refusal code the server counts (server/ingest/ingest-hub.ts, shared/frame.ts,
 * docs/wire-format.md), in plain words.
 */
export const REASON_TEXT: Readonly<Record<string, ReasonText>> = {
  // A decodable frame the stream cannot use (counted per stream).
  rate_mismatch: { label: 'wrong sample rate', explain: "the frame's sample rate is not the input's (input.sampleRateHz)" },
  channel_mismatch: { label: 'wrong channel count', explain: "the frame's channel count is not the array's (or not what the array file maps for this member)" },
  encoding_mismatch: { label: 'encoding not accepted', explain: "the frame's sample encoding is not among input.encodings" },
  non_finite: { label: 'NaN or infinite samples', explain: 'a float32 payload holds NaN or ±Infinity' },
  beyond_bound: { label: 'samples too loud', explain: 'a float32 sample is louder than input.maxFloatLevelDbfs' },
  out_of_range: { label: "far off the stream's clock", explain: "the frame's first sample is further from the stream's clock than ingest.maxGapSeconds, and no following frame confirmed the jump" },
  ahead_of_clock: { label: 'ahead of the wall clock', explain: 'the frame is further ahead than the wall clock allows (ingest.jumpToleranceSeconds), and no following frame confirmed it' },
  resync_limited: { label: 'too many clock jumps', explain: 'the frame belongs to a confirmed clock jump while resyncs are at ingest.resyncLimit' },
  // Bytes that are not a usable frame (counted before any stream).
  short_header: { label: 'shorter than a header', explain: 'the datagram or message is shorter than the 32-byte frame header' },
  bad_magic: { label: 'not a nullsteer frame', explain: 'the first four bytes are not the frame magic "NSFR"' },
  bad_version: { label: 'unknown frame version', explain: 'the frame version is not one this server reads' },
  bad_header_length: { label: 'bad header length', explain: 'the headerBytes field is below 32 or beyond the message' },
  bad_encoding: { label: 'unknown encoding code', explain: 'the encoding code is not 1–4 (int16, int24, int32, float32)' },
  bad_field: { label: 'invalid header field', explain: 'a header field is invalid: sample rate, channels or samples per channel 0, or firstSample beyond 2^53−1' },
  truncated: { label: 'payload cut short', explain: 'the payload is shorter than the header announces' },
  trailing_bytes: { label: 'bytes after the payload', explain: 'the payload is longer than the header announces' },
  too_many_streams: { label: 'too many streams', explain: 'ingest.maxStreams stream ids are already tracked' },
  not_binary: { label: 'text message', explain: 'a text message on the ingest WebSocket (frames are binary messages)' },
  too_large: { label: 'message too large', explain: 'a WebSocket message over ingest.websocket.maxMessageBytes (the connection is closed with 1009)' },
  queue_full: { label: 'receive queue full', explain: 'the UDP receive queue (ingest.udp.queueBytes) was full: the server could not keep up' },
};

/** Plain words for a refusal code; an unknown code reads as its words. */
export function reasonText(code: string): ReasonText {
  const t = Object.hasOwn(REASON_TEXT, code) ? REASON_TEXT[code] : undefined;
  if (t) return t;
  const words = code.replace(/_/g, ' ');
  return { label: words, explain: words };
}

export interface ReasonCount extends ReasonText {
  reason: string;
  count: number;
}

/** Non-zero counts of a `{ reason: count }` object, largest first (then by code). */
export function reasonCounts(v: unknown): ReasonCount[] {
  const o = obj(v);
  if (!o) return [];
  const out: ReasonCount[] = [];
  for (const [reason, c] of Object.entries(o)) {
    const count = num(c);
    if (count !== null && count > 0) out.push({ reason, count, ...reasonText(reason) });
  }
  return out.sort((a, b) => b.count - a.count || (a.reason < b.reason ? -1 : 1));
}

function addCounts(into: Map<string, number>, v: unknown): void {
  for (const r of reasonCounts(v)) into.set(r.reason, (into.get(r.reason) ?? 0) + r.count);
}

/** Whole numbers as ranges: [0, 1, 2, 3, 8, 9, 12] → "0–3, 8–9, 12". */
export function fmtRanges(list: readonly number[]): string {
  const v = [...new Set(list)].sort((a, b) => a - b);
  const parts: string[] = [];
  for (let i = 0; i < v.length; ) {
    let j = i;
    while (j + 1 < v.length && v[j + 1] === v[j] + 1) j++;
    parts.push(j === i ? String(v[i]) : `${v[i]}–${v[j]}`);
    i = j + 1;
  }
  return parts.join(', ');
}

/** "0.3 s ago", "42 s ago", "5 min ago", "3.2 h ago"; "—" when unknown. */
export function fmtAgo(s: number | null): string {
  if (s === null || !Number.isFinite(s)) return '—';
  const a = Math.max(0, s);
  if (a < 10) return `${a.toFixed(1)} s ago`;
  if (a < 120) return `${Math.round(a)} s ago`;
  if (a < 7200) return `${Math.round(a / 60)} min ago`;
  return `${(a / 3600).toFixed(1)} h ago`;
}

/** A signed figure with a real minus and an explicit plus: "+20.1", "−3.0"; "—" when null. */
export function fmtSigned(v: number | null, decimals: number): string {
  if (v === null || !Number.isFinite(v)) return '—';
  const s = Math.abs(v).toFixed(decimals);
  if (Number(s) === 0) return s;
  return `${v < 0 ? '−' : '+'}${s}`;
}

export interface StreamRow {
  streamId: number;
  selected: boolean;
  transport: string | null;
  remote: string | null;
  channels: number | null;
  encoding: string | null;
  framesAccepted: number | null;
  samplesAccepted: number | null;
  framesLost: number | null;
  gapSamples: number | null;
  /** Frames refused on this stream, all reasons. */
  refused: number;
  refusedBy: ReasonCount[];
  lastFrameAgoS: number | null;
  eligible: boolean | null;
  member: boolean;
  inputRateHz: number | null;
}

export interface SwitchView {
  from: number | null;
  to: number;
  reason: string;
  /** Plain words: "first stream", "stream 5 fell silent", "chosen by hand". */
  why: string;
  /** Seconds since the ingest started. */
  atS: number | null;
  /** How long ago, when the document gives the ingest's clock (else null). */
  agoS: number | null;
}

export interface RefusalView {
  reason: string;
  label: string;
  explain: string;
  /** The server's own words, e.g. "24-channel frames refused: the array has 8". */
  detail: string;
  transport: string | null;
  streamId: number | null;
  agoS: number | null;
}

export interface CaptureView {
  command: string;
  state: string | null;
  restarts: number | null;
  samplesRead: number | null;
  overruns: number | null;
  droppedSamples: number | null;
  lastExit: string | null;
  error: string | null;
  /** The command's last stderr lines, oldest first. */
  stderr: string[];
}

export interface RtpView {
  name: string;
  encoding: string | null;
  channels: number | null;
  sampleRateHz: number | null;
  address: string | null;
  port: number | null;
  multicast: boolean;
  packets: number | null;
  lost: number | null;
  duplicates: number | null;
  reordered: number | null;
  late: number | null;
  ssrc: number | null;
  ssrcChanges: number | null;
  jitterMs: number | null;
  tsRefclk: string | null;
  mediaClockOffset: number | null;
  lastPacketAgoS: number | null;
  refused: number;
  refusedBy: ReasonCount[];
  lastRejected: string | null;
}

export interface MemberView {
  name: string;
  source: string | null;
  positions: number[];
  samples: number | null;
  nextSample: number | null;
  lagMs: number | null;
  gaps: number | null;
  absentSpans: number | null;
  absentSamples: number | null;
  lastFrameAgoS: number | null;
  /** Clock rate against arrival times: ppm, regression points, span of the fit in s. */
  drift: { ppm: number | null; points: number | null; spanS: number | null } | null;
  /** Against the reference channel of the first unit (GCC-PHAT): µs, ppm, quality, span in s. */
  reference: { offsetUs: number | null; driftPpm: number | null; quality: number | null; spanS: number | null } | null;
  warning: string | null;
}

export interface GroupView {
  holdMs: number | null;
  warnAboveUs: number | null;
  holdReleases: number | null;
  members: MemberView[];
}

export interface InputView {
  /** 'simulator' | 'network' | 'capture' (or what a newer server says). */
  sourceKind: string | null;
  /** A source fed from outside (network or capture): "waiting" and refusals apply. */
  live: boolean;
  sampleRateHz: number | null;
  encodings: string[];
  /** Nothing received yet from a network or capture source. */
  waiting: boolean;
  mode: string | null;
  eligibleAfterMs: number | null;
  switchAfterS: number | null;
  selectedStreamId: number | null;
  /** The processed stream and where it comes from. */
  selected: { streamId: number; transport: string | null; remote: string | null; lastFrameAgoS: number | null } | null;
  switches: number | null;
  lastSwitch: SwitchView | null;
  streams: StreamRow[];
  /** Streams a hand switch may choose (own-format streams not part of a merged array). */
  choosable: number[];
  /** Refusals over the ingest and every stream and RTP session, by reason. */
  refused: { total: number; byReason: ReasonCount[]; last: RefusalView | null };
  /** Channels left out because their member was absent. */
  channelsOut: number[];
  capture: CaptureView | null;
  rtp: RtpView[];
  group: GroupView | null;
  /** Where a sender may send: "udp port 5004", "websocket /ingest" (from status.listeners). */
  listening: string[];
}

/** Plain words for why the processed stream changed. */
function switchWhy(reason: string, from: number | null, switchAfterS: number | null): string {
  if (reason === 'first') return 'first stream to become eligible';
  if (reason === 'manual') return 'chosen by hand';
  if (reason === 'silent') return `stream ${from ?? '—'} silent${switchAfterS !== null ? ` for ${switchAfterS} s` : ''}`;
  return reason.replace(/_/g, ' ');
}

function streamRow(s: Obj): StreamRow | null {
  const streamId = num(s.streamId);
  if (streamId === null) return null;
  const refusedBy = reasonCounts(s.rejected);
  return {
    streamId,
    selected: s.selected === true,
    transport: str(s.transport),
    remote: str(s.remote),
    channels: num(s.channels),
    encoding: str(s.encoding),
    framesAccepted: num(s.framesAccepted),
    samplesAccepted: num(s.samplesAccepted),
    framesLost: num(s.framesLost),
    gapSamples: num(s.gapSamples),
    refused: refusedBy.reduce((n, r) => n + r.count, 0),
    refusedBy,
    lastFrameAgoS: num(s.lastFrameAgoS),
    eligible: typeof s.eligible === 'boolean' ? s.eligible : null,
    member: s.member === true,
    inputRateHz: num(s.inputRateHz),
  };
}

function captureView(v: unknown): CaptureView | null {
  const c = obj(v);
  if (!c) return null;
  const argv = strs(c.command);
  const command = str(c.command) ?? (argv.length ? argv.join(' ') : '—');
  return {
    command,
    state: str(c.state),
    restarts: num(c.restarts),
    samplesRead: num(c.samplesRead),
    overruns: num(c.overruns),
    droppedSamples: num(c.droppedSamples),
    lastExit: str(c.lastExit),
    error: str(c.error),
    stderr: strs(c.stderr),
  };
}

function rtpView(r: Obj, i: number): RtpView {
  const refusedBy = reasonCounts(r.rejected);
  return {
    name: str(r.name) ?? `session ${i + 1}`,
    encoding: str(r.encoding),
    channels: num(r.channels),
    sampleRateHz: num(r.sampleRateHz),
    address: str(r.address),
    port: num(r.port),
    multicast: r.multicast === true,
    packets: num(r.packets),
    lost: num(r.lost),
    duplicates: num(r.duplicates),
    reordered: num(r.reordered),
    late: num(r.late),
    ssrc: num(r.ssrc),
    ssrcChanges: num(r.ssrcChanges),
    jitterMs: num(r.jitterMs),
    tsRefclk: str(r.tsRefclk),
    mediaClockOffset: num(r.mediaClockOffset),
    lastPacketAgoS: num(r.lastPacketAgoS),
    refused: refusedBy.reduce((n, x) => n + x.count, 0),
    refusedBy,
    lastRejected: str(r.lastRejected),
  };
}

function memberView(m: Obj, i: number): MemberView {
  const d = obj(m.drift);
  const r = obj(m.reference);
  return {
    name: str(m.name) ?? `member ${i + 1}`,
    source: str(m.source),
    positions: ints(m.positions),
    samples: num(m.samples),
    nextSample: num(m.nextSample),
    lagMs: num(m.lagMs),
    gaps: num(m.gaps),
    absentSpans: num(m.absentSpans),
    absentSamples: num(m.absentSamples),
    lastFrameAgoS: num(m.lastFrameAgoS),
    drift: d ? { ppm: num(d.ppm), points: num(d.points), spanS: num(d.spanS) } : null,
    reference: r ? { offsetUs: num(r.offsetUs), driftPpm: num(r.driftPpm), quality: num(r.quality), spanS: num(r.spanS) } : null,
    warning: str(m.warning),
  };
}

/** The input part of a status document, ready to show. */
export function summariseInput(raw: Obj): InputView {
  const source = obj(raw.source);
  const input = obj(raw.input) ?? {};
  const sourceKind = str(source?.kind);
  const live = sourceKind === 'network' || sourceKind === 'capture';
  const streams = objs(raw.streams)
    .map(streamRow)
    .filter((s): s is StreamRow => s !== null);
  const ingest = obj(raw.ingest);
  const rtp = objs(input.rtp).map(rtpView);
  const groupRaw = obj(input.group);
  const group: GroupView | null = groupRaw
    ? { holdMs: num(groupRaw.holdMs), warnAboveUs: num(groupRaw.warnAboveUs), holdReleases: num(groupRaw.holdReleases), members: objs(groupRaw.members).map(memberView) }
    : null;
  const switchAfterS = num(input.switchAfterS);

  // The ingest's clock (seconds since it started, the clock of lastSwitch.atS and lastRejected.atS):
  // any stream that reports both when its last frame came and how long ago gives "now" on it.
  let ingestNowS: number | null = null;
  for (const s of objs(raw.streams)) {
    const at = num(s.lastFrameAtS);
    const ago = num(s.lastFrameAgoS);
    if (at !== null && ago !== null) {
      ingestNowS = at + ago;
      break;
    }
  }
  const agoOf = (atS: number | null) => (atS !== null && ingestNowS !== null ? Math.max(0, ingestNowS - atS) : null);

  const selectedRaw = obj(input.selected);
  const selectedRow = streams.find((s) => s.selected) ?? null;
  let selected: InputView['selected'] = null;
  if (selectedRaw && num(selectedRaw.streamId) !== null) {
    selected = { streamId: num(selectedRaw.streamId)!, transport: str(selectedRaw.transport), remote: str(selectedRaw.remote), lastFrameAgoS: num(selectedRaw.lastFrameAgoS) };
  } else if (selectedRow && live) {
    selected = { streamId: selectedRow.streamId, transport: selectedRow.transport, remote: selectedRow.remote, lastFrameAgoS: selectedRow.lastFrameAgoS };
  }

  const sw = obj(input.lastSwitch);
  const swTo = num(sw?.to);
  const lastSwitch: SwitchView | null =
    sw && swTo !== null
      ? {
          from: num(sw.from),
          to: swTo,
          reason: str(sw.reason) ?? '—',
          why: switchWhy(str(sw.reason) ?? '—', num(sw.from), switchAfterS),
          atS: num(sw.atS),
          agoS: agoOf(num(sw.atS)),
        }
      : null;

  // Every refusal counted once: the ingest-wide counters (messages refused before any stream, and
  // the counts of streams forgotten to make room) plus each stream's and each RTP session's own.
  const byReason = new Map<string, number>();
  addCounts(byReason, ingest?.rejected);
  for (const s of streams) for (const r of s.refusedBy) byReason.set(r.reason, (byReason.get(r.reason) ?? 0) + r.count);
  for (const r of rtp) for (const x of r.refusedBy) byReason.set(x.reason, (byReason.get(x.reason) ?? 0) + x.count);
  const refusedBy = reasonCounts(Object.fromEntries(byReason));
  const lr = obj(ingest?.lastRejected);
  const lrReason = str(lr?.reason);
  const last: RefusalView | null =
    lr && lrReason !== null
      ? { reason: lrReason, ...reasonText(lrReason), detail: str(lr.detail) ?? '', transport: str(lr.transport), streamId: num(lr.streamId), agoS: agoOf(num(lr.atS)) }
      : null;

  const listeners = obj(raw.listeners);
  const listening: string[] = [];
  const udpPort = num(obj(listeners?.udp)?.port);
  if (udpPort !== null) listening.push(`udp port ${udpPort}`);
  const wsPath = str(obj(listeners?.websocket)?.path);
  if (wsPath !== null) listening.push(`websocket ${wsPath}`);
  for (const r of rtp) if (r.address !== null && r.port !== null) listening.push(`rtp ${r.name} ${r.address}:${r.port}`);

  return {
    sourceKind,
    live,
    sampleRateHz: num(input.sampleRateHz),
    encodings: strs(input.encodings),
    waiting: live && input.waiting === true,
    mode: str(input.mode),
    eligibleAfterMs: num(input.eligibleAfterMs),
    switchAfterS,
    selectedStreamId: num(input.selectedStreamId),
    selected,
    switches: num(input.switches),
    lastSwitch,
    streams,
    choosable: sourceKind === 'network' && group === null ? streams.filter((s) => !s.member).map((s) => s.streamId) : [],
    refused: { total: refusedBy.reduce((n, r) => n + r.count, 0), byReason: refusedBy, last },
    channelsOut: ints(input.channelsOut),
    capture: captureView(input.capture),
    rtp,
    group,
    listening,
  };
}

/** What came in so far: samples taken (streams, capture) and items refused (frames, messages, packets). */
export interface InputCounts {
  accepted: number;
  refused: number;
}

export function inputCounts(v: InputView): InputCounts {
  let accepted = 0;
  for (const s of v.streams) accepted += s.samplesAccepted ?? 0;
  accepted += v.capture?.samplesRead ?? 0;
  for (const r of v.rtp) accepted += r.packets ?? 0;
  return { accepted, refused: v.refused.total };
}

/** The refusal watch between polls: when each counter last grew, on the caller's clock (ms). */
export interface RefusalState {
  counts: InputCounts;
  refusedAtMs: number;
  acceptedAtMs: number;
  /** Frames are being refused and nothing has been accepted within the hold time. */
  refusing: boolean;
}

/** A refusal, or an accepted sample, counts as recent this long (ms). */
export const REFUSAL_HOLD_MS = 5000;

/**
 * Next state of the refusal watch from the newest counts. On the first look a refusal counts as
 * recent when nothing at all has been accepted (every frame so far was refused); afterwards only
 * growth counts. Counters that fall (a restarted server) start the watch again.
 */
export function watchRefusals(prev: RefusalState | null, counts: InputCounts, nowMs: number, holdMs = REFUSAL_HOLD_MS): RefusalState {
  const fresh = prev === null || counts.accepted < prev.counts.accepted || counts.refused < prev.counts.refused;
  let refusedAtMs: number;
  let acceptedAtMs: number;
  if (fresh) {
    refusedAtMs = counts.refused > 0 && counts.accepted === 0 ? nowMs : -Infinity;
    acceptedAtMs = counts.accepted > 0 ? nowMs : -Infinity;
  } else {
    refusedAtMs = counts.refused > prev.counts.refused ? nowMs : prev.refusedAtMs;
    acceptedAtMs = counts.accepted > prev.counts.accepted ? nowMs : prev.acceptedAtMs;
  }
  const refusing = nowMs - refusedAtMs < holdMs && nowMs - acceptedAtMs >= holdMs;
  return { counts, refusedAtMs, acceptedAtMs, refusing };
}
