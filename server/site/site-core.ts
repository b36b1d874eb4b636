/**
 * The site service without its broker connection and HTTP server: messages in (subject + bytes +
 * the site clock at receipt), windows out. Every message is parsed by shared/site.ts; a malformed
 * one, one for another site, or one whose subject names another node than its body (foreign) is
 * counted by reason and ignored. Status messages feed the node registry; peak messages of a node
 * that is online and has a pose become bearings (the injected `toBearings`) at the peak's UTC (less
 * the estimate's mean age), collected per window (site-windows.ts). The node's measured clock
 * offset is shown and flagged, and applied only with `applyClockOffset`: it is an upper bound
 * (receive − send includes every delay), and on a busy service it read hundreds of milliseconds
 * for edges whose clocks agreed, which moved a 2 m/s source's bearings by a metre and more against
 * the other arrays' (edges must run NTP or PTP; their clocks are trusted). When a window
 * closes, the injected locator and tracker run on its bearings and the result is kept (the last
 * `keepWindows`, 120) and handed to `onWindow`.
 *
 * The clock is injected (`nowMs`), so tests drive it: nothing here reads the wall clock.
 */
import { parseNodeStatus, parsePeakMessage, parseSiteSubject, SiteMessageError, type PeakMessage, type Pose } from '../../shared/site.ts';
import { NodeRegistry, type NodeChange } from './node-registry.ts';
import { SiteWindows } from './site-windows.ts';
import type { Bearing, LocateWindow, SourceTracker, TrackedSource } from './types.ts';

/** Turn one node's peak message (its utcMs already on the site clock) into bearings in the site frame. */
export type PeaksToBearings = (msg: PeakMessage, pose: Pose) => Bearing[];

export interface SiteWindowResult {
  index: number;
  windowUtc: string;
  windowUtcMs: number;
  sources: TrackedSource[];
  /** Per node, the bearings of its latest peak message in the window (rays on the plan). */
  bearings: { node: string; bearings: Bearing[] }[];
  /** All bearings given to the locator. */
  bearingCount: number;
}

export interface SiteCounters {
  /** Every message received on the site's subjects. */
  messages: number;
  /** Refused by the parser (bad JSON, fields, ranges). */
  malformed: number;
  /** Subject node ≠ body node, another site, or a subject not of this project. */
  foreign: number;
  /** Windows closed (and located). */
  windows: number;
  /** Peak messages of nodes not yet known, offline, or without a pose: not used for positions. */
  peaksUnused: number;
  /** Peak messages dropped by the windows (late, ahead, full) or refused nodes (registry full). */
  dropped: number;
  /** The locator or tracker threw: the window is published empty. */
  locateFailed: number;
  /** Reasons, each message counted once. */
  byReason: Record<string, number>;
}

export interface SiteCoreOptions {
  site: string;
  windowS: number;
  offlineAfterS: number;
  graceS?: number;
  /** Move peak times by the node's measured clock offset (default false: shown and flagged only). */
  applyClockOffset?: boolean;
  maxNodes?: number;
  keepWindows?: number;
  speedOfSoundMps?: number;
  locate: LocateWindow;
  tracker: SourceTracker;
  toBearings: PeaksToBearings;
  nowMs: () => number;
  onWindow?: (r: SiteWindowResult) => void;
  onNodes?: (changes: NodeChange[]) => void;
}

export class SiteCore {
  readonly registry: NodeRegistry;
  readonly windows: SiteWindows;
  readonly counters: SiteCounters = { messages: 0, malformed: 0, foreign: 0, windows: 0, peaksUnused: 0, dropped: 0, locateFailed: 0, byReason: {} };
  /** Results of the last `keepWindows` windows, oldest first. */
  readonly results: SiteWindowResult[] = [];
  readonly #o: SiteCoreOptions;
  readonly #keep: number;

  constructor(o: SiteCoreOptions) {
    this.#o = o;
    this.#keep = o.keepWindows ?? 120;
    this.registry = new NodeRegistry({ offlineAfterS: o.offlineAfterS, maxNodes: o.maxNodes });
    this.windows = new SiteWindows({ windowS: o.windowS, graceS: o.graceS });
  }

  #count(reason: string, kind: 'malformed' | 'foreign' | 'peaksUnused' | 'dropped' | null): void {
    if (kind) this.counters[kind]++;
    // Reasons are a fixed vocabulary below, so the table stays small.
    this.counters.byReason[reason] = (this.counters.byReason[reason] ?? 0) + 1;
  }

  /** One message from the broker. */
  handle(subject: string, data: Uint8Array | string): void {
    this.counters.messages++;
    const now = this.#o.nowMs();
    const s = parseSiteSubject(subject);
    if (!s || s.site !== this.#o.site) return this.#count('subject', 'foreign');
    if (s.kind !== 'status' && s.kind !== 'peaks') return this.#count('kind', null);
    try {
      if (s.kind === 'status') {
        const msg = parseNodeStatus(data);
        if (msg.node !== s.node || msg.site !== s.site) return this.#count('statusNodeMismatch', 'foreign');
        const change = this.registry.noteStatus(msg, now);
        if (change === 'refused') return this.#count('registryFull', 'dropped');
        if (change) this.#o.onNodes?.([change]);
        return;
      }
      const msg = parsePeakMessage(data);
      if (msg.node !== s.node || msg.site !== s.site) return this.#count('peaksNodeMismatch', 'foreign');
      if (!this.registry.notePeak(msg.node, now)) return this.#count('unknownNode', 'peaksUnused');
      const pose = this.registry.usablePose(msg.node);
      if (!pose) return this.#count(this.registry.state(msg.node) === 'offline' ? 'offlineNode' : 'noPose', 'peaksUnused');
      // The bearings' time: the row's UTC on the site clock, less the mean age of the estimate.
      const utcMs = msg.utcMs - (msg.ageMs ?? 0) + (this.#o.applyClockOffset ? (this.registry.clockOffsetMs(msg.node) ?? 0) : 0);
      const bearings = this.#o.toBearings({ ...msg, utcMs }, pose);
      const r = this.windows.add(msg.node, utcMs, bearings, now);
      if (typeof r !== 'number') this.#count(r, 'dropped');
    } catch (e) {
      if (e instanceof SiteMessageError) return this.#count(s.kind === 'status' ? 'badStatus' : 'badPeaks', 'malformed');
      throw e;
    }
  }

  /** Mark nodes offline and close the windows that are due; returns the windows closed. */
  tick(): SiteWindowResult[] {
    const now = this.#o.nowMs();
    const changes = this.registry.tick(now);
    if (changes.length > 0) this.#o.onNodes?.(changes);
    const out: SiteWindowResult[] = [];
    for (const w of this.windows.closeDue(now)) {
      let sources: TrackedSource[] = [];
      try {
        const hints = this.#o.tracker.predict?.(w.startUtcMs);
        const located = this.#o.locate(w.bearings, { speedOfSoundMps: this.#o.speedOfSoundMps ?? 343, windowUtcMs: w.startUtcMs, ...(hints ? { hints } : {}) });
        sources = this.#o.tracker.update(w.startUtcMs, located);
      } catch {
        this.counters.locateFailed++;
      }
      const bearings = [...w.latestByNode].map(([node, b]) => ({ node, bearings: b })).sort((a, b) => (a.node < b.node ? -1 : 1));
      const r: SiteWindowResult = { index: w.index, windowUtc: new Date(w.startUtcMs).toISOString(), windowUtcMs: w.startUtcMs, sources, bearings, bearingCount: w.bearings.length };
      this.counters.windows++;
      this.results.push(r);
      if (this.results.length > this.#keep) this.results.splice(0, this.results.length - this.#keep);
      out.push(r);
      this.#o.onWindow?.(r);
    }
    return out;
  }

  latest(): SiteWindowResult | null {
    return this.results.length > 0 ? this.results[this.results.length - 1] : null;
  }
}
