/**
 * The site's nodes, as the site service learns them from their `status` messages (one a second).
 * A node appears with its first status and goes offline by itself when nothing has been heard from
 * it for `offlineAfterS`; offline is decided by `tick(nowMs)` (the service calls it on a timer, tests
 * call it with their own clock), and every change of state is counted and returned.
 *
 * Clock offset: each status carries the edge's send time (`sentUtcMs`); the site service notes its
 * own receive time. receive − sent = (site clock − edge clock) + network delay, and the delay is
 * never negative, so the smallest difference over the last {@link OFFSET_SAMPLES} messages (the
 * lower envelope) is the best estimate of the offset: delays only ever push a sample up. A peak's
 * UTC on the site clock is its edge UTC + offset. An offset beyond {@link CLOCK_FLAG_MS} means the
 * edge's clock is not disciplined (or the network is slow all the time): flagged "clock: check NTP/PTP".
 *
 * Bounds: at most `maxNodes` (64) nodes; a status from a further node evicts the node offline the
 * longest, or is refused and counted when every node is online.
 */
import type { NodeStatusMessage, Pose } from '../../shared/site.ts';
import type { SiteNodeView } from '../../shared/site-view.ts';

/** Status messages kept per node for the clock offset's lower envelope (about 20 s at 1 Hz). */
export const OFFSET_SAMPLES = 20;
/** Offsets (either sign) beyond this are flagged, ms. */
export const CLOCK_FLAG_MS = 50;
export const DEFAULT_MAX_NODES = 64;

export type NodeState = SiteNodeView['state'];

export type { SiteNodeView };

interface NodeEntry {
  status: NodeStatusMessage;
  state: NodeState;
  lastSeenMs: number;
  offlineSinceMs: number;
  lastPeakMs: number | null;
  /** Ring of receive − send, ms. */
  offsets: Float64Array;
  offsetCount: number;
  offsetNext: number;
  clockOffsetMs: number;
  peaks: number;
  peaksAtRate: number;
  rateAtMs: number;
  peaksPerS: number;
}

export interface RegistryCounters {
  /** Nodes that went online (first status or back from offline) and offline. */
  wentOnline: number;
  wentOffline: number;
  /** Status messages from a further node while `maxNodes` were online: refused. */
  refusedFull: number;
  /** Offline nodes forgotten to make room. */
  evicted: number;
}

export interface NodeChange {
  node: string;
  state: NodeState;
}

export class NodeRegistry {
  readonly #nodes = new Map<string, NodeEntry>();
  readonly #offlineAfterMs: number;
  readonly #maxNodes: number;
  readonly counters: RegistryCounters = { wentOnline: 0, wentOffline: 0, refusedFull: 0, evicted: 0 };

  constructor(opts: { offlineAfterS: number; maxNodes?: number }) {
    if (!(opts.offlineAfterS > 0)) throw new RangeError('offlineAfterS must be > 0');
    this.#offlineAfterMs = opts.offlineAfterS * 1000;
    this.#maxNodes = opts.maxNodes ?? DEFAULT_MAX_NODES;
    if (!Number.isInteger(this.#maxNodes) || this.#maxNodes < 1) throw new RangeError('maxNodes must be an integer ≥ 1');
  }

  /**
   * A status message received at `receivedUtcMs` (the site service's UTC clock). Returns the change
   * of state it makes (a new node, or one back online), or null; 'refused' when the registry is full.
   */
  noteStatus(msg: NodeStatusMessage, receivedUtcMs: number): NodeChange | null | 'refused' {
    let e = this.#nodes.get(msg.node);
    if (!e) {
      if (this.#nodes.size >= this.#maxNodes && !this.#evictOne()) {
        this.counters.refusedFull++;
        return 'refused';
      }
      e = {
        status: msg,
        state: 'offline',
        lastSeenMs: receivedUtcMs,
        offlineSinceMs: receivedUtcMs,
        lastPeakMs: null,
        offsets: new Float64Array(OFFSET_SAMPLES),
        offsetCount: 0,
        offsetNext: 0,
        clockOffsetMs: 0,
        peaks: 0,
        peaksAtRate: 0,
        rateAtMs: receivedUtcMs,
        peaksPerS: 0,
      };
      this.#nodes.set(msg.node, e);
    }
    e.status = msg;
    e.lastSeenMs = Math.max(e.lastSeenMs, receivedUtcMs);
    e.offsets[e.offsetNext] = receivedUtcMs - msg.sentUtcMs;
    e.offsetNext = (e.offsetNext + 1) % OFFSET_SAMPLES;
    if (e.offsetCount < OFFSET_SAMPLES) e.offsetCount++;
    let min = Infinity;
    for (let i = 0; i < e.offsetCount; i++) if (e.offsets[i] < min) min = e.offsets[i];
    e.clockOffsetMs = min;
    if (e.state === 'offline') {
      e.state = 'online';
      this.counters.wentOnline++;
      return { node: msg.node, state: 'online' };
    }
    return null;
  }

  /** A peak message of a known node received at `receivedUtcMs`; false for a node not (yet) known. */
  notePeak(node: string, receivedUtcMs: number): boolean {
    const e = this.#nodes.get(node);
    if (!e) return false;
    e.lastPeakMs = receivedUtcMs;
    e.peaks++;
    return true;
  }

  /** Mark nodes not heard from for `offlineAfterS` offline; update the peak rates. Returns the changes. */
  tick(nowMs: number): NodeChange[] {
    const changes: NodeChange[] = [];
    for (const [node, e] of this.#nodes) {
      if (e.state === 'online' && nowMs - e.lastSeenMs >= this.#offlineAfterMs) {
        e.state = 'offline';
        e.offlineSinceMs = nowMs;
        this.counters.wentOffline++;
        changes.push({ node, state: 'offline' });
      }
      const dtMs = nowMs - e.rateAtMs;
      if (dtMs >= 1000) {
        e.peaksPerS = ((e.peaks - e.peaksAtRate) * 1000) / dtMs;
        e.peaksAtRate = e.peaks;
        e.rateAtMs = nowMs;
      }
    }
    return changes;
  }

  /** Forget the node offline the longest; false when none is offline. */
  #evictOne(): boolean {
    let oldest: string | null = null;
    let since = Infinity;
    for (const [node, e] of this.#nodes) {
      if (e.state === 'offline' && e.offlineSinceMs < since) {
        since = e.offlineSinceMs;
        oldest = node;
      }
    }
    if (oldest === null) return false;
    this.#nodes.delete(oldest);
    this.counters.evicted++;
    return true;
  }

  get size(): number {
    return this.#nodes.size;
  }

  state(node: string): NodeState | null {
    return this.#nodes.get(node)?.state ?? null;
  }

  /** Site clock − edge clock, ms, or null for an unknown node. */
  clockOffsetMs(node: string): number | null {
    const e = this.#nodes.get(node);
    return e ? e.clockOffsetMs : null;
  }

  /** The pose of a node that is online and has one (else null: its peaks are not used for positions). */
  usablePose(node: string): Pose | null {
    const e = this.#nodes.get(node);
    return e && e.state === 'online' ? e.status.pose : null;
  }

  /** Every node, sorted by name. */
  list(): SiteNodeView[] {
    const out: SiteNodeView[] = [];
    for (const [node, e] of this.#nodes) {
      const s = e.status;
      const why = s.pose === null ? 'no pose: listed, not used for positions' : e.state === 'offline' ? 'offline: not used for positions' : undefined;
      const v: SiteNodeView = {
        node,
        state: e.state,
        arrayName: s.arrayName,
        channels: s.channels,
        pose: s.pose,
        usedForPositions: why === undefined,
        clockOffsetMs: Math.round(e.clockOffsetMs * 10) / 10,
        lastSeenUtc: new Date(e.lastSeenMs).toISOString(),
        lastPeakUtc: e.lastPeakMs === null ? null : new Date(e.lastPeakMs).toISOString(),
        rowsPerS: s.rowsPerS,
        load: s.load,
        input: s.input,
        dashboardUrl: s.dashboardUrl,
        peaksPerS: Math.round(e.peaksPerS * 10) / 10,
        pending: s.pending,
        dropped: s.dropped,
      };
      if (why !== undefined) v.why = why;
      if (Math.abs(e.clockOffsetMs) > CLOCK_FLAG_MS) v.clockFlag = 'clock: check NTP/PTP';
      out.push(v);
    }
    return out.sort((a, b) => (a.node < b.node ? -1 : a.node > b.node ? 1 : 0));
  }
}
