/**
 * An RTP session's description from its SDP text (RFC 4566 / RFC 8866), as far as receiving L16/L24
 * audio needs it: the SDP is parsed by `sdp-transform` (npm); this module picks the audio stream,
 * checks it against what the receiver supports, and explains every refusal by name.
 *
 * What is read, and from where:
 * - the first `m=audio` line (RFC 4566 §5.14): its port and first payload format (the default
 *   format, §5.14). Further audio media are ignored with a warning (e.g. the second stream of a
 *   redundant pair): one session, one stream. Transport must be `RTP/AVP` (RFC 3551).
 * - the format from `a=rtpmap:PT L16|L24/RATE[/CHANNELS]` (RFC 4566 §6, RFC 3551 §4.5.11, RFC 3190
 *   §4), channels 1 when absent; static payload types 10 and 11 (L16/44100/2 and L16/44100/1, RFC
 *   3551 Table 4) need no rtpmap.
 * - `c=` at media level, else session level (§5.7): address, multicast or not. A TTL or an address
 *   count after `/` is accepted; of several addresses (layered encoding) the first is used (warning).
 * - `a=ptime` (§6) in milliseconds, 0.125–4 ms (the packet times of AES67; RFC 3551 §4.5).
 * - `a=source-filter: incl` (RFC 4570), media level over session level: the sources of a
 *   source-specific multicast join. `excl` is refused (no portable socket call joins "all but").
 * - `a=ts-refclk` and `a=mediaclk` (RFC 7273 §4, §5), media level over session level;
 *   `mediaclk:direct=OFFSET` gives the media clock offset, `mediaclk:sender` none.
 */
import { isIP } from 'node:net';
import { parse } from 'sdp-transform';

export type RtpEncoding = 'L16' | 'L24';

export interface RtpSessionDescription {
  /** The session's name in the configuration (an array file's `inputs` source). */
  name: string;
  /** SDP `s=`. */
  sessionName: string;
  payloadType: number;
  encoding: RtpEncoding;
  sampleRateHz: number;
  channels: number;
  /** UDP port the stream is sent to (`m=`). */
  port: number;
  /** `c=` address without TTL or count. */
  connectionAddress: string;
  multicast: boolean;
  /** Sources of a source-specific multicast join (`a=source-filter: incl`), empty when none. */
  sourceFilter: string[];
  /** `a=ptime`, milliseconds, or null when absent. */
  packetTimeMs: number | null;
  /** RFC 7273 `a=mediaclk:direct=OFFSET` (0 ≤ OFFSET < 2³²), or null when absent or `sender`. */
  mediaClockOffset: number | null;
  /** RFC 7273 `a=ts-refclk` value(s), e.g. "ptp=IEEE1588-2008:39-A7-94-FF-FE-07-CB-D0:37", or null. */
  tsRefclk: string | null;
  /** What was ignored, in plain words (further audio media, extra addresses). */
  warnings: string[];
}

/** Sample rates received (AES67 and common practice). */
export const RTP_SAMPLE_RATES_HZ = [44100, 48000, 96000] as const;
export const RTP_MAX_CHANNELS = 1024;
export const RTP_MIN_PTIME_MS = 0.125;
export const RTP_MAX_PTIME_MS = 4;
/** Largest UDP payload over IPv4 (65 535 − 8 − 20 bytes). */
export const UDP_MAX_PAYLOAD_BYTES = 65507;
/** Longest SDP text read, characters (a session description is a few hundred). */
export const SDP_MAX_CHARS = 65536;
const RTP_HEADER_BYTES = 12;

/** Error catalogue of this layer: code → what it means. */
export const SDP_ERRORS = {
  ERR_SDP_SYNTAX: 'not a session description (no v=0 line) or too long',
  ERR_SDP_NO_AUDIO: 'no m=audio line',
  ERR_SDP_TRANSPORT: 'transport is not RTP/AVP',
  ERR_SDP_PORT: 'port missing or outside 1–65535',
  ERR_SDP_PAYLOAD: 'payload format is not L16 or L24, or has no rtpmap',
  ERR_SDP_RATE: 'sample rate not 44100, 48000 or 96000 Hz',
  ERR_SDP_CHANNELS: 'channel count outside 1–1024',
  ERR_SDP_PTIME: 'packet time outside 0.125–4 ms, or a packet larger than a UDP datagram',
  ERR_SDP_CONNECTION: 'no usable c= address',
  ERR_SDP_SOURCE_FILTER: 'a=source-filter that cannot be joined',
  ERR_SDP_MEDIACLK: 'a=mediaclk that is not direct=OFFSET or sender',
} as const;
export type SdpErrorCode = keyof typeof SDP_ERRORS;

/** A session description that cannot be received; the message names the session and the problem. */
export class SdpError extends Error {
  readonly code: SdpErrorCode;
  readonly session: string;
  constructor(code: SdpErrorCode, session: string, problem: string) {
    super(`SDP of RTP session "${session}": ${problem}`);
    this.name = 'SdpError';
    this.code = code;
    this.session = session;
  }
}

/** What sdp-transform gives for the fields read here (its own types call tsRefClocks one object; it is a list). */
interface ParsedLevel {
  connection?: { version?: number; ip?: string };
  sourceFilter?: { filterMode?: string; netType?: string; addressTypes?: string; destAddress?: string; srcList?: string | number };
  tsRefClocks?: { clksrc?: string | number; clksrcExt?: string | number }[] | { clksrc?: string | number; clksrcExt?: string | number };
  mediaClk?: { id?: string | number; mediaClockName?: string | number; mediaClockValue?: string | number; rateNumerator?: string | number; rateDenominator?: string | number };
}
interface ParsedMedia extends ParsedLevel {
  type?: string;
  port?: number | string;
  protocol?: string;
  payloads?: string | number;
  rtp: { payload: number; codec: string; rate?: number; encoding?: number | string }[];
  ptime?: number | string;
}
interface ParsedSession extends ParsedLevel {
  version?: number;
  name?: string;
  media: ParsedMedia[];
}

/** Static payload types of RFC 3551 Table 4 that are linear PCM. */
const STATIC_L16: Record<number, { rate: number; channels: number }> = { 10: { rate: 44100, channels: 2 }, 11: { rate: 44100, channels: 1 } };

function isMulticast(address: string): boolean {
  if (isIP(address) === 4) {
    const first = Number(address.split('.')[0]);
    return first >= 224 && first <= 239; // 224.0.0.0/4 (RFC 5771)
  }
  return /^ff/i.test(address); // ff00::/8 (RFC 4291 §2.7)
}

/**
 * Parse one session's SDP.
 * @param text the SDP file's contents
 * @param name the session's configured name (used in errors and carried in the result)
 * @throws SdpError naming the problem when the stream cannot be received
 */
export function parseSessionSdp(text: string, name: string): RtpSessionDescription {
  const fail = (code: SdpErrorCode, problem: string): never => {
    throw new SdpError(code, name, problem);
  };
  if (typeof text !== 'string' || text.length > SDP_MAX_CHARS) fail('ERR_SDP_SYNTAX', `the text is longer than ${SDP_MAX_CHARS} characters`);
  const sdp = parse(text) as unknown as ParsedSession;
  if (sdp.version !== 0) fail('ERR_SDP_SYNTAX', 'no "v=0" line: this is not a session description');
  const warnings: string[] = [];

  const audio = sdp.media.filter((m) => m.type === 'audio');
  const unreadable = sdp.media.filter((m) => m.type === undefined).length;
  if (audio.length === 0) {
    const others = sdp.media.filter((m) => m.type !== undefined).map((m) => m.type);
    fail('ERR_SDP_NO_AUDIO', `no "m=audio" line (media found: ${others.length > 0 ? others.join(', ') : 'none'}${unreadable > 0 ? `; ${unreadable} m= line(s) unreadable` : ''})`);
  }
  const media = audio[0];
  if (audio.length > 1) warnings.push(`${audio.length} audio media: only the first (port ${media.port}) is received`);
  if (unreadable > 0) warnings.push(`${unreadable} m= line(s) could not be read and were ignored`);

  if (media.protocol !== 'RTP/AVP') fail('ERR_SDP_TRANSPORT', `transport "${media.protocol ?? ''}" is not RTP/AVP`);
  const port = Number(media.port);
  if (!Number.isInteger(port) || port < 1 || port > 65535) fail('ERR_SDP_PORT', `port ${media.port ?? '(none)'} is not in 1–65535`);

  // The format: the m= line's first payload type.
  const firstFormat = String(media.payloads ?? '').trim().split(/\s+/)[0];
  const payloadType = Number(firstFormat);
  if (firstFormat === '' || !Number.isInteger(payloadType) || payloadType < 0 || payloadType > 127) fail('ERR_SDP_PAYLOAD', `the m=audio line names no payload type 0–127 (got "${firstFormat}")`);
  const map = media.rtp.find((r) => r.payload === payloadType);
  let codec: string;
  let sampleRateHz: number;
  let channels: number;
  if (map) {
    codec = String(map.codec).toUpperCase(); // media subtype names are case-insensitive (RFC 4855 §3)
    sampleRateHz = Number(map.rate);
    channels = map.encoding === undefined || map.encoding === '' ? 1 : Number(map.encoding);
  } else if (STATIC_L16[payloadType]) {
    codec = 'L16';
    ({ rate: sampleRateHz, channels } = STATIC_L16[payloadType]);
  } else {
    fail('ERR_SDP_PAYLOAD', `payload type ${payloadType} has no "a=rtpmap" line (only the static types 10 and 11 are L16 without one)`);
  }
  if (codec! !== 'L16' && codec! !== 'L24') fail('ERR_SDP_PAYLOAD', `payload type ${payloadType} is ${map!.codec}/${map!.rate}: only L16 and L24 are received`);
  if (!(RTP_SAMPLE_RATES_HZ as readonly number[]).includes(sampleRateHz!)) fail('ERR_SDP_RATE', `sample rate ${map?.rate} Hz is not one of ${RTP_SAMPLE_RATES_HZ.join(', ')}`);
  if (!Number.isInteger(channels!) || channels! < 1 || channels! > RTP_MAX_CHANNELS) fail('ERR_SDP_CHANNELS', `${map?.encoding} channels is not in 1–${RTP_MAX_CHANNELS}`);
  const encoding = codec! as RtpEncoding;

  let packetTimeMs: number | null = null;
  if (media.ptime !== undefined) {
    packetTimeMs = Number(media.ptime);
    if (String(media.ptime).trim() === '' || !(packetTimeMs >= RTP_MIN_PTIME_MS && packetTimeMs <= RTP_MAX_PTIME_MS)) {
      fail('ERR_SDP_PTIME', `a=ptime:${media.ptime} is not in ${RTP_MIN_PTIME_MS}–${RTP_MAX_PTIME_MS} ms`);
    }
    const bytes = RTP_HEADER_BYTES + Math.ceil((packetTimeMs * sampleRateHz!) / 1000) * channels! * (encoding === 'L24' ? 3 : 2);
    if (bytes > UDP_MAX_PAYLOAD_BYTES) fail('ERR_SDP_PTIME', `a packet of ${packetTimeMs} ms × ${channels!} channels ${encoding} is ${bytes} bytes, more than a UDP datagram holds (${UDP_MAX_PAYLOAD_BYTES})`);
  }

  // c=: media level over session level. "ADDRESS[/TTL][/COUNT]" (RFC 4566 §5.7).
  const conn = media.connection ?? sdp.connection;
  if (!conn || !conn.ip) fail('ERR_SDP_CONNECTION', 'no "c=IN IP4|IP6 ADDRESS" line at session or media level');
  const parts = String(conn!.ip).split('/');
  const connectionAddress = parts[0];
  const ipVersion = isIP(connectionAddress);
  if (ipVersion === 0) fail('ERR_SDP_CONNECTION', `c= address "${connectionAddress}" is not an IPv4 or IPv6 address (host names are not resolved)`);
  if (conn!.version !== ipVersion) fail('ERR_SDP_CONNECTION', `c= says IP${conn!.version} but "${connectionAddress}" is IPv${ipVersion}`);
  const multicast = isMulticast(connectionAddress);
  const count = Number(ipVersion === 4 && multicast ? parts[2] ?? 1 : parts[1] ?? 1);
  if (count > 1) warnings.push(`c= gives ${count} addresses from ${connectionAddress}: only the first is received`);

  // a=source-filter (RFC 4570): media level over session level.
  const filter = media.sourceFilter ?? sdp.sourceFilter;
  let sourceFilter: string[] = [];
  if (filter) {
    const lines = text.match(/^a=source-filter:/gm)?.length ?? 0;
    if (lines > (media.sourceFilter ? 1 : 0) + (sdp.sourceFilter ? 1 : 0)) fail('ERR_SDP_SOURCE_FILTER', 'several a=source-filter lines at one level: give all sources on one line');
    if (filter.filterMode !== 'incl') fail('ERR_SDP_SOURCE_FILTER', `a=source-filter: ${filter.filterMode} is not supported (only incl)`);
    if (filter.destAddress !== '*' && filter.destAddress !== connectionAddress) fail('ERR_SDP_SOURCE_FILTER', `a=source-filter names destination ${filter.destAddress}, the c= address is ${connectionAddress}`);
    sourceFilter = String(filter.srcList ?? '').trim().split(/\s+/).filter((s) => s !== '');
    const bad = sourceFilter.find((s) => isIP(s) !== ipVersion);
    if (sourceFilter.length === 0 || bad !== undefined) fail('ERR_SDP_SOURCE_FILTER', `a=source-filter source "${bad ?? ''}" is not an IPv${ipVersion} address`);
    if (!multicast) warnings.push('a=source-filter on a unicast address is ignored');
  }

  // RFC 7273: a=ts-refclk (one or more) and a=mediaclk, media level over session level.
  const clocks = media.tsRefClocks ?? sdp.tsRefClocks;
  const clockList = clocks === undefined ? [] : Array.isArray(clocks) ? clocks : [clocks];
  const tsRefclk = clockList.length === 0 ? null : clockList.map((c) => (c.clksrcExt === undefined ? String(c.clksrc) : `${c.clksrc}=${c.clksrcExt}`)).join(', ');
  const clk = media.mediaClk ?? sdp.mediaClk;
  let mediaClockOffset: number | null = null;
  if (clk) {
    const kind = String(clk.mediaClockName ?? '');
    if (clk.rateNumerator !== undefined && Number(clk.rateNumerator) !== Number(clk.rateDenominator)) {
      fail('ERR_SDP_MEDIACLK', `a=mediaclk rate=${clk.rateNumerator}/${clk.rateDenominator}: a media clock off the nominal rate is not supported`);
    }
    if (kind === 'direct') {
      const raw = String(clk.mediaClockValue ?? '');
      const offset = Number(raw);
      if (!/^\d+$/.test(raw) || !(offset < 2 ** 32)) fail('ERR_SDP_MEDIACLK', `a=mediaclk:direct=${raw}: the offset must be an integer in 0–4294967295`);
      mediaClockOffset = offset;
    } else if (kind !== 'sender') {
      fail('ERR_SDP_MEDIACLK', `a=mediaclk:${kind} is not supported (direct=OFFSET or sender)`);
    }
  }

  return {
    name,
    sessionName: sdp.name ?? '',
    payloadType,
    encoding,
    sampleRateHz: sampleRateHz!,
    channels: channels!,
    port,
    connectionAddress,
    multicast,
    sourceFilter,
    packetTimeMs,
    mediaClockOffset,
    tsRefclk,
    warnings,
  };
}
