/**
 * A site of arrays: what edge servers publish on the site's NATS broker and what the site service
 * reads, defined once. Every message from the broker is validated here against a closed schema
 * before it is used: a malformed or foreign message is refused with the path of the first problem,
 * and the reader counts it and goes on.
 *
 * Frames (README "A site of arrays"):
 * - site frame: x east, y north, z up, metres, origin where the site plan puts it;
 * - an array's pose on the site: `positionM` (its origin in the site frame) and `headingDeg`, the
 *   site azimuth of the array's +x axis, counter-clockwise from site +x. Arrays are taken as level
 *   (their x–y plane horizontal), so an array azimuth φ is the site azimuth φ + heading and the
 *   elevation is the same in both frames.
 *
 * Subjects, under `nullsteer.SITE.NODE.`:
 * - `rows`    the existing binary spectrum row (shared/messages.ts), core NATS (not kept);
 * - `peaks`   {@link PeakMessage} JSON, one per spectrum row with peaks, also kept by JetStream;
 * - `status`  {@link NodeStatusMessage} JSON every second: heartbeat, pose, health, clock;
 * - `journal` {@link JournalMessage} JSON, one per journal entry, kept by JetStream.
 * JetStream: one stream per site, `NULLSTEER_SITE`, over `nullsteer.SITE.*.peaks` and
 * `nullsteer.SITE.*.journal`, with the retention of cluster.durableMaxAgeS / durableMaxBytes.
 */
import type { JournalEntry } from './session.ts';

export const SITE_MESSAGE_VERSION = 1;
/** Site and node names: NATS subject tokens without wildcards or dots. */
export const SITE_NAME = /^[A-Za-z0-9_-]{1,32}$/;
/** Peaks per peak message (a row carries at most this many per method). */
export const MAX_SITE_PEAKS = 16;
/** Largest JSON message accepted from the broker, bytes. */
export const MAX_SITE_MESSAGE_BYTES = 64 * 1024;

export type SiteSubjectKind = 'rows' | 'peaks' | 'status' | 'journal' | 'events';

export function siteSubject(site: string, node: string, kind: SiteSubjectKind): string {
  return `nullsteer.${site}.${node}.${kind}`;
}

/** Every node's messages of one kind on a site (a subscription subject). */
export function siteWildcard(site: string, kind: SiteSubjectKind | '>'): string {
  return kind === '>' ? `nullsteer.${site}.>` : `nullsteer.${site}.*.${kind}`;
}

/** The site's JetStream stream. */
export function siteStreamName(site: string): string {
  return `NULLSTEER_${site}`;
}

/** Site, node and kind of a subject of this project, or null for a foreign one. */
export function parseSiteSubject(subject: string): { site: string; node: string; kind: SiteSubjectKind } | null {
  const p = subject.split('.');
  if (p.length !== 4 || p[0] !== 'nullsteer' || !SITE_NAME.test(p[1]) || !SITE_NAME.test(p[2])) return null;
  if (p[3] !== 'rows' && p[3] !== 'peaks' && p[3] !== 'status' && p[3] !== 'journal' && p[3] !== 'events') return null;
  return { site: p[1], node: p[2], kind: p[3] };
}

export interface Pose {
  /** The array's origin in the site frame, metres [x east, y north, z up]. */
  positionM: [number, number, number];
  /** Site azimuth of the array's +x axis, degrees counter-clockwise from site +x. */
  headingDeg: number;
}

/** Largest site coordinate accepted, metres (a site plan, not a map). */
export const MAX_SITE_COORD_M = 100_000;

/** [0, 360) */
export function wrap360(deg: number): number {
  const r = deg % 360;
  return r < 0 ? r + 360 : r === 360 ? 0 : r;
}

/** Site azimuth of an array azimuth (level arrays: a turn by the heading). */
export function siteAzimuthDeg(arrayAzimuthDeg: number, pose: Pose): number {
  return wrap360(arrayAzimuthDeg + pose.headingDeg);
}

/** Array azimuth of a site azimuth. */
export function arrayAzimuthDeg(siteAzDeg: number, pose: Pose): number {
  return wrap360(siteAzDeg - pose.headingDeg);
}

export interface SitePeak {
  /** In the array's own frame, degrees. */
  azimuthDeg: number;
  elevationDeg: number;
  /** In the site frame (null when the node has no pose). */
  siteAzimuthDeg: number | null;
  siteElevationDeg: number | null;
  /** Broadband MVDR level, dBFS. */
  levelDb: number;
  /** Width of the peak at 3 dB below its top, degrees (the bearing's spread). */
  widthDeg: number;
  /** Level above the spectrum's floor (median over directions), dB. */
  aboveFloorDb: number;
}

export interface PeakMessage {
  v: 1;
  site: string;
  node: string;
  /** Stream sample index of the row (its last sample). */
  sampleIndex: number;
  sampleRateHz: number;
  /** UTC of that sample, ms since the epoch, from the edge's clock. */
  utcMs: number;
  /**
   * Mean age of the estimate the peaks come from, ms (optional, 0 when absent): the covariance is an
   * exponential average over past frames, so its peaks describe the sound of about
   * (N/2 + λ/(1−λ)·H)/fs before the row's last sample (shared/tau-advisor.ts meanAgeS). The site
   * service takes the bearings at utcMs − ageMs: with τ = 0.5 s a source crossing at 2 m/s is
   * otherwise placed about a metre behind.
   */
  ageMs?: number;
  peaks: SitePeak[];
}

export interface NodeStatusMessage {
  v: 1;
  site: string;
  node: string;
  /** When the message was sent, the edge's UTC clock, ms. */
  sentUtcMs: number;
  /** Seconds since the edge started. */
  uptimeS: number;
  arrayName: string;
  channels: number;
  pose: Pose | null;
  sampleRateHz: number;
  /** Latest processed sample index and its UTC, ms (null before any input). */
  sampleIndex: number | null;
  sampleUtcMs: number | null;
  /** Rows per second lately, engine load 0–1, input waiting or flowing. */
  rowsPerS: number;
  load: number;
  input: 'flowing' | 'waiting';
  /** The edge's own dashboard, when it can be reached (http://host:port/). */
  dashboardUrl: string | null;
  /** Durable entries waiting for the broker and dropped for lack of room (counts since start). */
  pending: number;
  dropped: number;
}

export interface JournalMessage {
  v: 1;
  site: string;
  node: string;
  entry: JournalEntry;
}

export class SiteMessageError extends Error {
  constructor(
    readonly path: string,
    message: string,
  ) {
    super(`${path}: ${message}`);
    this.name = 'SiteMessageError';
  }
}

type Obj = Record<string, unknown>;

function obj(path: string, v: unknown, fields: readonly string[]): Obj {
  if (typeof v !== 'object' || v === null || Array.isArray(v)) throw new SiteMessageError(path, 'must be an object');
  for (const k of Object.keys(v)) if (!fields.includes(k)) throw new SiteMessageError(path ? `${path}.${k}` : k, 'is not a field of this message');
  return v as Obj;
}

function num(path: string, v: unknown, min: number, max: number): number {
  if (typeof v !== 'number' || !Number.isFinite(v) || v < min || v > max) throw new SiteMessageError(path, `must be a number in ${min}–${max}`);
  return v;
}

function numOrNull(path: string, v: unknown, min: number, max: number): number | null {
  return v === null ? null : num(path, v, min, max);
}

function name(path: string, v: unknown): string {
  if (typeof v !== 'string' || !SITE_NAME.test(v)) throw new SiteMessageError(path, 'must be 1–32 letters, digits, _ or -');
  return v;
}

function str(path: string, v: unknown, maxLength: number): string {
  if (typeof v !== 'string' || v.length > maxLength) throw new SiteMessageError(path, `must be a string of at most ${maxLength} characters`);
  return v;
}

const MAX_INDEX = Number.MAX_SAFE_INTEGER;
/** UTC from 2000 to 2200, ms: anything else is a broken clock or a foreign message. */
const UTC_MIN = 946_684_800_000;
const UTC_MAX = 7_258_118_400_000;

/** Check a pose (array files, status messages). */
export function validatePose(path: string, v: unknown): Pose {
  const o = obj(path, v, ['positionM', 'headingDeg']);
  const p = o.positionM;
  if (!Array.isArray(p) || p.length !== 3) throw new SiteMessageError(`${path}.positionM`, 'must be [x, y, z] in metres');
  const positionM = p.map((x, i) => num(`${path}.positionM[${i}]`, x, -MAX_SITE_COORD_M, MAX_SITE_COORD_M)) as [number, number, number];
  const headingDeg = num(`${path}.headingDeg`, o.headingDeg, -360, 360);
  return { positionM, headingDeg };
}

function decodeJson(data: Uint8Array | string): unknown {
  const bytes = typeof data === 'string' ? data.length : data.byteLength;
  if (bytes > MAX_SITE_MESSAGE_BYTES) throw new SiteMessageError('', `larger than ${MAX_SITE_MESSAGE_BYTES} bytes`);
  const text = typeof data === 'string' ? data : new TextDecoder('utf-8', { fatal: false }).decode(data);
  try {
    return JSON.parse(text);
  } catch {
    throw new SiteMessageError('', 'not JSON');
  }
}

/** Largest mean age of a peak message's estimate, ms: τ's live ceiling, 3600 s (shared/processing-fields.ts), and a frame. */
const MAX_AGE_MS = 3_700_000;

const PEAK_FIELDS = ['azimuthDeg', 'elevationDeg', 'siteAzimuthDeg', 'siteElevationDeg', 'levelDb', 'widthDeg', 'aboveFloorDb'] as const;

/** Parse and check a peak message. @throws SiteMessageError */
export function parsePeakMessage(data: Uint8Array | string): PeakMessage {
  const o = obj('', decodeJson(data), ['v', 'site', 'node', 'sampleIndex', 'sampleRateHz', 'utcMs', 'ageMs', 'peaks']);
  if (o.v !== SITE_MESSAGE_VERSION) throw new SiteMessageError('v', `must be ${SITE_MESSAGE_VERSION}`);
  const peaks = o.peaks;
  if (!Array.isArray(peaks) || peaks.length > MAX_SITE_PEAKS) throw new SiteMessageError('peaks', `must be a list of at most ${MAX_SITE_PEAKS} peaks`);
  return {
    v: 1,
    site: name('site', o.site),
    node: name('node', o.node),
    sampleIndex: Math.round(num('sampleIndex', o.sampleIndex, 0, MAX_INDEX)),
    sampleRateHz: num('sampleRateHz', o.sampleRateHz, 1000, 384000),
    utcMs: num('utcMs', o.utcMs, UTC_MIN, UTC_MAX),
    ...(o.ageMs === undefined ? {} : { ageMs: num('ageMs', o.ageMs, 0, MAX_AGE_MS) }),
    peaks: peaks.map((p, i) => {
      const at = `peaks[${i}]`;
      const q = obj(at, p, PEAK_FIELDS);
      return {
        azimuthDeg: num(`${at}.azimuthDeg`, q.azimuthDeg, -360, 360),
        elevationDeg: num(`${at}.elevationDeg`, q.elevationDeg, -90, 90),
        siteAzimuthDeg: numOrNull(`${at}.siteAzimuthDeg`, q.siteAzimuthDeg, -360, 360),
        siteElevationDeg: numOrNull(`${at}.siteElevationDeg`, q.siteElevationDeg, -90, 90),
        levelDb: num(`${at}.levelDb`, q.levelDb, -400, 100),
        widthDeg: num(`${at}.widthDeg`, q.widthDeg, 0, 360),
        aboveFloorDb: num(`${at}.aboveFloorDb`, q.aboveFloorDb, 0, 400),
      };
    }),
  };
}

const STATUS_FIELDS = ['v', 'site', 'node', 'sentUtcMs', 'uptimeS', 'arrayName', 'channels', 'pose', 'sampleRateHz', 'sampleIndex', 'sampleUtcMs', 'rowsPerS', 'load', 'input', 'dashboardUrl', 'pending', 'dropped'] as const;

/** Parse and check a node status message. @throws SiteMessageError */
export function parseNodeStatus(data: Uint8Array | string): NodeStatusMessage {
  const o = obj('', decodeJson(data), STATUS_FIELDS);
  if (o.v !== SITE_MESSAGE_VERSION) throw new SiteMessageError('v', `must be ${SITE_MESSAGE_VERSION}`);
  if (o.input !== 'flowing' && o.input !== 'waiting') throw new SiteMessageError('input', 'must be "flowing" or "waiting"');
  const url = o.dashboardUrl === null ? null : str('dashboardUrl', o.dashboardUrl, 300);
  if (url !== null && !/^https?:\/\/[^\s"<>]+$/.test(url)) throw new SiteMessageError('dashboardUrl', 'must be an http(s) URL');
  return {
    v: 1,
    site: name('site', o.site),
    node: name('node', o.node),
    sentUtcMs: num('sentUtcMs', o.sentUtcMs, UTC_MIN, UTC_MAX),
    uptimeS: num('uptimeS', o.uptimeS, 0, 1e10),
    arrayName: str('arrayName', o.arrayName, 200),
    channels: Math.round(num('channels', o.channels, 1, 1024)),
    pose: o.pose === null ? null : validatePose('pose', o.pose),
    sampleRateHz: num('sampleRateHz', o.sampleRateHz, 1000, 384000),
    sampleIndex: numOrNull('sampleIndex', o.sampleIndex, 0, MAX_INDEX),
    sampleUtcMs: numOrNull('sampleUtcMs', o.sampleUtcMs, UTC_MIN, UTC_MAX),
    rowsPerS: num('rowsPerS', o.rowsPerS, 0, 10000),
    load: num('load', o.load, 0, 100),
    input: o.input,
    dashboardUrl: url,
    pending: Math.round(num('pending', o.pending, 0, MAX_INDEX)),
    dropped: Math.round(num('dropped', o.dropped, 0, MAX_INDEX)),
  };
}

/** Parse and check a journal message (the entry's own fields are checked for shape, not meaning). @throws SiteMessageError */
export function parseJournalMessage(data: Uint8Array | string): JournalMessage {
  const o = obj('', decodeJson(data), ['v', 'site', 'node', 'entry']);
  if (o.v !== SITE_MESSAGE_VERSION) throw new SiteMessageError('v', `must be ${SITE_MESSAGE_VERSION}`);
  const e = o.entry;
  if (typeof e !== 'object' || e === null || Array.isArray(e)) throw new SiteMessageError('entry', 'must be a journal entry');
  const en = e as Obj;
  num('entry.seq', en.seq, 1, MAX_INDEX);
  str('entry.at', en.at, 40);
  str('entry.kind', en.kind, 40);
  str('entry.summary', en.summary, 2000);
  return { v: 1, site: name('site', o.site), node: name('node', o.node), entry: e as JournalEntry };
}
