/**
 * A test stand-in for edge servers on a site: publishes `status` (every `statusMs`) and `peaks`
 * (every `peaksMs`) for several nodes over core NATS, with each node's bearing pointing at one
 * source position on the plan. Nodes can be stopped one by one. Also the site-service test doubles:
 * bearings from the peaks' site azimuth, and a locator that intersects the first bearings of two
 * nodes (2-D: P₁ + t·u₁ = P₂ + s·u₂; worked check in CHECKS.md: arrays at (0,0) and (100,0) m with
 * bearings 45° and 135° meet at (50, 50) m).
 */
import { connect, type NatsConnection } from '@nats-io/transport-node';
import { siteSubject, type NodeStatusMessage, type PeakMessage, type Pose } from '../../shared/site.ts';
import type { PeaksToBearings } from '../../server/site/site-core.ts';
import type { Bearing, LocateWindow, LocatedSource, SourceTracker, TrackedSource } from '../../server/site/types.ts';

export interface FakeNode {
  node: string;
  pose: Pose | null;
  /** Site azimuth the node hears its peak at, degrees. */
  siteAzimuthDeg: number;
}

export interface SitePublisher {
  nc: NatsConnection;
  /** Stop one node's messages (it goes silent, like a killed edge). */
  stop(node: string): void;
  publishRaw(subject: string, body: string): void;
  close(): Promise<void>;
}

export async function startSitePublisher(url: string, site: string, nodes: FakeNode[], opts: { statusMs?: number; peaksMs?: number } = {}): Promise<SitePublisher> {
  const nc = await connect({ servers: url.replace(/^nats:\/\//, ''), reconnect: true, maxReconnectAttempts: -1, reconnectTimeWait: 250, waitOnFirstConnect: true });
  const stopped = new Set<string>();
  const enc = new TextEncoder();
  const start = Date.now();
  const sendStatus = () => {
    for (const n of nodes) {
      if (stopped.has(n.node)) continue;
      const m: NodeStatusMessage = { v: 1, site, node: n.node, sentUtcMs: Date.now(), uptimeS: (Date.now() - start) / 1000, arrayName: `array-${n.node}`, channels: 8, pose: n.pose, sampleRateHz: 48000, sampleIndex: null, sampleUtcMs: null, rowsPerS: 20, load: 0.25, input: 'flowing', dashboardUrl: `http://127.0.0.1:1/${n.node}/`, pending: 0, dropped: 0 };
      nc.publish(siteSubject(site, n.node, 'status'), enc.encode(JSON.stringify(m)));
    }
  };
  let index = 0;
  const sendPeaks = () => {
    index += 2400;
    for (const n of nodes) {
      if (stopped.has(n.node)) continue;
      const head = n.pose?.headingDeg ?? 0;
      const m: PeakMessage = { v: 1, site, node: n.node, sampleIndex: index, sampleRateHz: 48000, utcMs: Date.now(), peaks: [{ azimuthDeg: (((n.siteAzimuthDeg - head) % 360) + 360) % 360, elevationDeg: 0, siteAzimuthDeg: n.pose ? n.siteAzimuthDeg : null, siteElevationDeg: n.pose ? 0 : null, levelDb: -20, widthDeg: 6, aboveFloorDb: 15 }] };
      nc.publish(siteSubject(site, n.node, 'peaks'), enc.encode(JSON.stringify(m)));
    }
  };
  sendStatus();
  const t1 = setInterval(sendStatus, opts.statusMs ?? 250);
  const t2 = setInterval(sendPeaks, opts.peaksMs ?? 50);
  return {
    nc,
    stop: (node) => stopped.add(node),
    publishRaw: (subject, body) => nc.publish(subject, enc.encode(body)),
    async close() {
      clearInterval(t1);
      clearInterval(t2);
      await nc.close().catch(() => undefined);
    },
  };
}

/** Test double: bearings from the peaks' site azimuth (σ 2°). */
export const testBearings: PeaksToBearings = (m, pose) =>
  m.peaks.map((p) => ({ node: m.node, originM: pose.positionM, azimuthDeg: p.siteAzimuthDeg ?? p.azimuthDeg + pose.headingDeg, elevationDeg: null, sigmaDeg: 2, levelDb: p.levelDb, utcMs: m.utcMs }));

/** Test double: intersect the first bearing of the first two nodes (2-D lines); ambiguous when only two nodes took part. */
export const intersectFirstTwo: LocateWindow = (bs) => {
  const first = new Map<string, Bearing>();
  for (const b of bs) if (!first.has(b.node)) first.set(b.node, b);
  const [p, q] = [...first.values()];
  if (!p || !q) return [];
  const u1 = [Math.cos((p.azimuthDeg * Math.PI) / 180), Math.sin((p.azimuthDeg * Math.PI) / 180)];
  const u2 = [Math.cos((q.azimuthDeg * Math.PI) / 180), Math.sin((q.azimuthDeg * Math.PI) / 180)];
  const det = u1[0] * -u2[1] - u1[1] * -u2[0];
  if (Math.abs(det) < 1e-9) return [];
  const dx = q.originM[0] - p.originM[0];
  const dy = q.originM[1] - p.originM[1];
  const t = (dx * -u2[1] - dy * -u2[0]) / det;
  const src: LocatedSource = { xM: p.originM[0] + t * u1[0], yM: p.originM[1] + t * u1[1], zM: null, covXY: [4, 1, 2], ellipse: { majorM: 3, minorM: 1.5, angleDeg: 30 }, uncertaintyM: 2.1, levelDb: 70, nodes: [...first.keys()], ambiguous: first.size < 3, residualDeg: 0 };
  return [src];
};

/** Test double: one track per source index, with a short history. */
export function simpleTracker(): SourceTracker {
  const hist: [number, number, number][] = [];
  return {
    update(t, located): TrackedSource[] {
      if (located[0]) {
        hist.push([t, located[0].xM, located[0].yM]);
        if (hist.length > 20) hist.shift();
      }
      return located.map((l, i) => ({ ...l, id: `s${i + 1}`, track: { vxMps: 0.5, vyMps: 0, ageWindows: hist.length, hits: hist.length, history: i === 0 ? [...hist] : [] } }));
    },
  };
}
