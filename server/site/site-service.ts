/**
 * The site service: one process per site that listens to every node on the site's NATS broker
 * (core subjects `nullsteer.SITE.*.status` and `.peaks`), keeps the node registry, locates and
 * tracks sources per UTC window (site-core.ts) and serves them over REST, a live WebSocket and the
 * site page (site-http.ts, site-live.ts).
 *
 * The broker connection reconnects forever (every `reconnectWaitMs`, default 500 ms, with the
 * client's jitter); while it is away the windows keep closing on the timer (empty) and nodes go
 * offline, and both resume by themselves when it is back. Started with the broker down, the
 * service waits for it (its state says "connecting").
 *
 * The three stages of location are injected: `locate` (server/site/locate.ts), `tracker`
 * (server/site/tracker.ts) and `toBearings` (server/site/bearing-sigma.ts). Absent, the
 * placeholders below run (no sources); the lead wires the real ones in `createSiteService`.
 */
import type { Server } from 'node:http';
import type { AddressInfo } from 'node:net';
import { connect, type NatsConnection } from '@nats-io/transport-node';
import { siteWildcard } from '../../shared/site.ts';
import { OriginPolicy } from '../http/origin-policy.ts';
import { createUpgradeAuth } from '../http/upgrade-auth.ts';
import { DEFAULT_PLAN, planImagePath, type SitePlan } from './plan-file.ts';
import { SiteCore, type PeaksToBearings, type SiteWindowResult } from './site-core.ts';
import { buildSiteApp } from './site-http.ts';
import { SITE_LIVE_PATH, SiteLive } from './site-live.ts';
import type { LocateWindow, SourceTracker, TrackedSource } from './types.ts';
import { bearingsFromPeaks } from './bearing-sigma.ts';
import { locateWindow } from './locate.ts';
import { ConstantVelocityTracker } from './tracker.ts';
import type { BrokerState, SiteLiveMessage, SitePlanView, SiteSourceView, SiteView, SourcesView } from '../../shared/site-view.ts';

export type { BrokerState, SiteView, SourcesView };


export interface SiteServiceOptions {
  natsUrl: string;
  site: string;
  /** Broker token (null: none). */
  token?: string | null;
  httpPort: number;
  host?: string;
  windowS?: number;
  offlineAfterS?: number;
  /** Floor of the grace after a window's end for late messages, seconds (0.3; it follows the nodes' lag up to 5 s, site-windows.ts). */
  graceS?: number;
  plan?: SitePlan;
  /** The plan file's folder (its image is served from there only). */
  planDir?: string | null;
  staticDir?: string;
  allowedHosts?: string[];
  locate?: LocateWindow;
  tracker?: SourceTracker;
  toBearings?: PeaksToBearings;
  /** The site clock, UTC ms (tests may inject one). */
  nowMs?: () => number;
  /** How often windows and node states are evaluated, ms (100). */
  tickMs?: number;
  reconnectWaitMs?: number;
  logger?: boolean | object;
}

/** Placeholder stages until the real ones are wired (see the module comment). */
export interface SiteService {
  readonly core: SiteCore;
  readonly live: SiteLive;
  /** http://host:port/ once listening. */
  readonly url: string;
  brokerState(): BrokerState;
  /** Times the broker connection came back. */
  reconnects(): number;
  siteView(): SiteView;
  sourcesView(): SourcesView;
  close(): Promise<void>;
}

function sourceView(s: TrackedSource): SiteSourceView {
  return {
    id: s.id,
    xM: s.xM,
    yM: s.yM,
    zM: s.zM,
    uncertaintyM: s.uncertaintyM,
    ellipse: s.ellipse,
    levelDb: s.levelDb,
    nodes: s.nodes,
    ambiguous: s.ambiguous,
    residualDeg: s.residualDeg,
    track: { vxMps: s.track.vxMps, vyMps: s.track.vyMps, ageWindows: s.track.ageWindows, hits: s.track.hits, history: s.track.history },
  };
}

/** Start the site service: connect (or keep trying), listen, tick. */
export async function createSiteService(o: SiteServiceOptions): Promise<SiteService> {
  const windowS = o.windowS ?? 0.5;
  const offlineAfterS = o.offlineAfterS ?? 3;
  const nowMs = o.nowMs ?? Date.now;
  const plan = o.plan ?? DEFAULT_PLAN;
  // The location stages (tests may put their own in): bearings from peaks (times already on the site
  // clock, so no further offset), the association and fix per window, the tracks.
  const locate = o.locate ?? locateWindow;
  const tracker = o.tracker ?? new ConstantVelocityTracker();
  const toBearings: PeaksToBearings = o.toBearings ?? ((msg, pose) => bearingsFromPeaks(msg, pose, { clockOffsetMs: 0, useElevation: false }));

  let state: BrokerState = 'connecting';
  let reconnects = 0;
  let live: SiteLive | null = null;

  const core = new SiteCore({
    site: o.site,
    windowS,
    offlineAfterS,
    graceS: o.graceS,
    locate,
    tracker,
    toBearings,
    nowMs,
    onWindow: (r) => live?.broadcast({ type: 'window', ...sourcesFrom(r), nodes: core.registry.list(), counters: counters() } satisfies SiteLiveMessage),
    onNodes: () => live?.broadcast({ type: 'nodes', nodes: core.registry.list() } satisfies SiteLiveMessage),
  });

  const counters = (): SiteView['counters'] => {
    const c = core.counters;
    return { messages: c.messages, malformed: c.malformed, foreign: c.foreign, windows: c.windows, peaksUnused: c.peaksUnused, dropped: c.dropped, locateFailed: c.locateFailed, late: core.windows.counters.late, graceS: core.windows.graceMs(nowMs()) / 1000, byReason: { ...c.byReason } };
  };
  const sourcesFrom = (r: SiteWindowResult | null): SourcesView =>
    r ? { windowUtc: r.windowUtc, windowIndex: r.index, sources: r.sources.map(sourceView), bearings: r.bearings } : { windowUtc: null, windowIndex: null, sources: [], bearings: [] };
  const siteView = (): SiteView => ({
    site: o.site,
    broker: { state, url: o.natsUrl, reconnects, lastError },
    windowS,
    offlineAfterS,
    nodes: core.registry.list(),
    counters: counters(),
    live: { ...liveRef().stats },
  });
  const sourcesView = () => sourcesFrom(core.latest());
  const planImage = o.planDir ? planImagePath(o.planDir, plan) : null;
  // The image's URL is relative to the page (served at `/`); absent when the file is not there.
  const planView: SitePlanView = { ...plan, image: plan.image && planImage ? { ...plan.image, url: 'api/site/plan/image' } : null };
  live = new SiteLive({ hello: (): SiteLiveMessage => ({ type: 'hello', site: siteView(), ...sourcesView(), plan: planView }) });
  const liveRef = () => live as SiteLive;

  // HTTP
  const host = o.host ?? '127.0.0.1';
  const originPolicy = new OriginPolicy({ host, allowedHosts: o.allowedHosts });
  const app = buildSiteApp({ site: siteView, sources: sourcesView, plan: planView, planImage, originPolicy, staticDir: o.staticDir, logger: o.logger });
  const upgradeAuth = createUpgradeAuth({ token: null, openStatus: true, paths: { [SITE_LIVE_PATH]: 'read' }, originPolicy });
  await app.listen({ port: o.httpPort, host });
  (app.server as Server).on('upgrade', (req, socket, head) => {
    if (!upgradeAuth.check(req, socket)) return;
    if (!liveRef().handleUpgrade(req, socket, head)) socket.end('HTTP/1.1 404 Not Found\r\nConnection: close\r\nContent-Length: 0\r\n\r\n');
  });
  const addr = app.server.address() as AddressInfo;
  const url = `http://${addr.family === 'IPv6' ? `[${addr.address}]` : addr.address}:${addr.port}/`;

  // Timer: node states and windows.
  const timer = setInterval(() => core.tick(), o.tickMs ?? 100);

  // Broker: connect in the background so the HTTP side answers while it is away.
  let nc: NatsConnection | null = null;
  let closing = false;
  let lastError: string | null = null;
  let retry: ReturnType<typeof setTimeout> | null = null;
  let wake: (() => void) | null = null;
  const connected = (async () => {
    // The first connection is retried here (not with the client's waitOnFirstConnect, which close()
    // could not stop); once connected, the client itself reconnects forever.
    for (;;) {
      if (closing) return;
      try {
        nc = await connect({
          servers: o.natsUrl.replace(/^nats:\/\//, ''),
          token: o.token ?? undefined,
          name: `nullsteer-site-${o.site}`,
          reconnect: true,
          maxReconnectAttempts: -1,
          reconnectTimeWait: o.reconnectWaitMs ?? 500,
          pingInterval: 2000,
          maxPingOut: 2,
        });
        break;
      } catch (e) {
        lastError = (e as Error).message.slice(0, 200);
        await new Promise<void>((resolve) => {
          wake = resolve;
          retry = setTimeout(resolve, o.reconnectWaitMs ?? 500);
        });
      }
    }
    if (closing) {
      await nc.close();
      return;
    }
    state = 'connected';
    for (const kind of ['status', 'peaks'] as const) {
      nc.subscribe(siteWildcard(o.site, kind), { callback: (err, msg) => {
          if (!err) core.handle(msg.subject, msg.data);
        } });
    }
    void (async () => {
      for await (const s of nc.status()) {
        if (s.type === 'disconnect' || s.type === 'reconnecting') state = 'reconnecting';
        else if (s.type === 'reconnect') {
          state = 'connected';
          reconnects++;
        } else if (s.type === 'close') state = 'closed';
        else if (s.type === 'error') lastError = s.error.message.slice(0, 200);
      }
    })();
  })();

  return {
    core,
    live: liveRef(),
    url,
    brokerState: () => state,
    reconnects: () => reconnects,
    siteView,
    sourcesView,
    async close() {
      closing = true;
      clearInterval(timer);
      liveRef().close();
      const c = nc as NatsConnection | null;
      if (c) await c.close().catch(() => undefined);
      if (retry) clearTimeout(retry);
      (wake as (() => void) | null)?.();
      await connected;
      state = 'closed';
      await app.close();
    },
  };
}
