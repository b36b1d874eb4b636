/**
 * What the site service answers (`GET /api/site`, `GET /api/site/sources`, `GET /api/site/plan`)
 * and pushes on `/api/site/live`, defined once for the server and the site page.
 */
import type { Pose } from './site.ts';

export type BrokerState = 'connecting' | 'connected' | 'reconnecting' | 'closed';

export interface SiteNodeView {
  node: string;
  state: 'online' | 'offline';
  arrayName: string;
  channels: number;
  pose: Pose | null;
  usedForPositions: boolean;
  /** Why the node is not used for positions (absent when it is). */
  why?: string;
  /** Site clock − edge clock, ms (lower envelope of receive − send). */
  clockOffsetMs: number;
  /** "clock: check NTP/PTP" when the offset is beyond the bound. */
  clockFlag?: string;
  lastSeenUtc: string;
  lastPeakUtc: string | null;
  rowsPerS: number;
  load: number;
  input: 'flowing' | 'waiting';
  dashboardUrl: string | null;
  peaksPerS: number;
  pending: number;
  dropped: number;
}

export interface SiteCountersView {
  messages: number;
  malformed: number;
  foreign: number;
  windows: number;
  peaksUnused: number;
  dropped: number;
  locateFailed: number;
  late: number;
  /** How long after its end a window waits for late messages now, seconds (follows the nodes' lag; server/site/site-windows.ts). */
  graceS: number;
  byReason: Record<string, number>;
}

export interface SiteView {
  site: string;
  /** `lastError`: the broker connection's last error (refused, authorisation…), or null. */
  broker: { state: BrokerState; url: string; reconnects: number; lastError: string | null };
  windowS: number;
  offlineAfterS: number;
  nodes: SiteNodeView[];
  counters: SiteCountersView;
  live: { clients: number; sent: number; dropped: number; slowClosed: number; refusedFull: number; ignoredIncoming: number };
}

export interface SiteBearingView {
  node: string;
  originM: [number, number, number];
  azimuthDeg: number;
  elevationDeg: number | null;
  sigmaDeg: number;
  levelDb: number;
  utcMs: number;
}

export interface SiteSourceView {
  id: string;
  xM: number;
  yM: number;
  zM: number | null;
  uncertaintyM: number;
  ellipse: { majorM: number; minorM: number; angleDeg: number };
  levelDb: number;
  nodes: string[];
  ambiguous: boolean;
  residualDeg: number;
  track: { vxMps: number; vyMps: number; ageWindows: number; hits: number; history: [number, number, number][] };
}

export interface SourcesView {
  windowUtc: string | null;
  windowIndex: number | null;
  sources: SiteSourceView[];
  /** Per node, the bearings of its latest peak message in the window. */
  bearings: { node: string; bearings: SiteBearingView[] }[];
}

export interface SitePlanView {
  name: string;
  widthM: number;
  heightM: number;
  originM: [number, number];
  image: { file: string; metresPerPixel: number; url: string } | null;
}

export type SiteLiveMessage =
  | ({ type: 'hello'; site: SiteView; plan: SitePlanView } & SourcesView)
  | ({ type: 'window'; nodes: SiteNodeView[]; counters: SiteCountersView } & SourcesView)
  | { type: 'nodes'; nodes: SiteNodeView[] };
