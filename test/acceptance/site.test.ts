/**
 * Issue 15's acceptance, end to end on one machine: a real NATS broker with JetStream
 * (test/helpers/nats-server.ts), three edges in this process (startService with the simulator
 * rendering the Eastgate yard scene, config/scenes/eastgate-yard.json, on the UTC sample clock, each
 * with its array file and pose, config/arrays/yard-*.json), and the site service (createSiteService
 * with the real stages: bearing-sigma.ts, locate.ts, tracker.ts).
 *
 * Checked against the scene's own truth (server/ingest/scene-trajectory.ts, the same positions the
 * renderer uses) at each window's UTC:
 * - still sources (pump, generator, fan) located within 1.5 m;
 * - the moving cart (2 m/s loop) tracked within 3 m;
 * - the broker killed for 10 s and restarted: the edges keep processing (engine row counters rise
 *   while it is away), the site service recovers: "within 5 s" is taken as at most 10 windows of
 *   0.5 s after the first window whose UTC is after the restart (window indices, not wall time);
 *   no JetStream-accepted peak or journal entry is lost (every edge's sequence 1…lastSeq is in the
 *   stream, edge-publish.test.ts's check);
 * - an edge closed: the site marks it offline (its registry state) and keeps locating with the two
 *   others.
 * The measured figures are printed (console.log) for the README.
 *
 * It runs in `npm test` after every other file, alone (vitest.config.ts: project "acceptance",
 * sequence.groupOrder 1), because its three edges render and process the scene in real time; an edge
 * that falls behind on a loaded machine is waited for (the site's grace follows the nodes' lag,
 * server/site/site-windows.ts), and every check is on window indices and counters.
 */
import { connect } from '@nats-io/transport-node';
import { jetstream, jetstreamManager } from '@nats-io/jetstream';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { siteStreamName } from '../../shared/site.ts';
import { EDGE_SEQ_HEADER } from '../../server/cluster/edge-publisher.ts';
import type { Service } from '../../server/service.ts';
import { loadScene } from '../../server/ingest/site-scene-file.ts';
import { Trajectory } from '../../server/ingest/scene-trajectory.ts';
import { writeFileSync } from 'node:fs';
import { locateWindow } from '../../server/site/locate.ts';
import type { Bearing } from '../../server/site/types.ts';
import { createSiteService, type SiteService } from '../../server/site/site-service.ts';
import type { SiteWindowResult } from '../../server/site/site-core.ts';
import { natsAvailable, startBroker, type TestBroker } from '../helpers/nats-server.ts';
import { getStatus, sleep, startTestService, waitFor } from '../helpers/service.ts';

const SITE = 'eastgate';
const SCENE = 'config/scenes/eastgate-yard.json';
const EDGES = ['west', 'east', 'north'] as const;
/** Any rate gives the same positions: the trajectory's clock is sample index / rate. */
const FS = 48_000;
const STILL_WITHIN_M = 1.5;
const MOVING_WITHIN_M = 3;
/** "Within 5 s" of the restart, in windows of 0.5 s. */
const RECOVERY_WINDOWS = 10;
/** SITE_ACCEPTANCE_DUMP=FILE: every window's bearings as given to the locator, written as JSON (for replaying the locator offline). */
const DUMP = process.env.SITE_ACCEPTANCE_DUMP ?? '';
const dumped: { bearings: Bearing[]; windowUtcMs: number; speedOfSoundMps: number }[] = [];

describe.skipIf(!natsAvailable)('site acceptance: three edges, a broker, the site service', () => {
  let broker: TestBroker;
  const edges = new Map<string, Service>();
  let site: SiteService;
  let truth: { name: string; moving: boolean; at: (utcMs: number) => [number, number] }[];
  /** Every window the site closed, by index (polled from core.results, which keeps 120). */
  const windows = new Map<number, SiteWindowResult>();
  let poll: ReturnType<typeof setInterval> | null = null;
  /** Each edge's highest load-shedding step seen (a busy machine thins and coarsens its rows). */
  const maxShedStep = new Map<string, number>();

  beforeAll(async () => {
    const scene = await loadScene(SCENE);
    truth = scene.sources.map((s) => {
      const tr = new Trajectory(s, FS);
      const p = new Float64Array(3);
      return { name: s.name, moving: !tr.fixed, at: (utcMs: number) => (tr.at(Math.round((utcMs * FS) / 1000), p), [p[0], p[1]] as [number, number]) };
    });
    broker = await startBroker();
    site = await createSiteService({ natsUrl: broker.url, site: SITE, httpPort: 0, windowS: 0.5, offlineAfterS: 3, reconnectWaitMs: 200, ...(DUMP ? { locate: (b, o) => (dumped.push({ bearings: b, windowUtcMs: o.windowUtcMs, speedOfSoundMps: o.speedOfSoundMps }), locateWindow(b, o)) } : {}) });
    poll = setInterval(() => {
      for (const r of site.core.results) windows.set(r.index, r);
      for (const [n, e] of edges) maxShedStep.set(n, Math.max(maxShedStep.get(n) ?? 0, e.engine.shedStep));
    }, 200);
    for (const node of EDGES) {
      edges.set(node, await startTestService({
        source: { kind: 'simulator' },
        simulator: { scene: SCENE },
        array: { file: `config/arrays/yard-${node}.json` },
        engine: { workers: 1 },
        cluster: { natsUrl: broker.url, site: SITE, node },
      }));
    }
  }, 60_000);

  afterAll(async () => {
    if (DUMP) writeFileSync(DUMP, JSON.stringify(dumped));
    if (poll) clearInterval(poll);
    await site?.close();
    for (const e of edges.values()) await e.close().catch(() => undefined);
    await broker?.close();
  });

  /** Per source, the distance from its truth at the window's UTC to the nearest tracked source. */
  function errors(w: SiteWindowResult): { name: string; moving: boolean; d: number; id: string | null }[] {
    return truth.map((t) => {
      const [x, y] = t.at(w.windowUtcMs);
      let d = Infinity, id: string | null = null;
      for (const s of w.sources) {
        const e = Math.hypot(s.xM - x, s.yM - y);
        if (e < d) { d = e; id = s.id; }
      }
      return { name: t.name, moving: t.moving, d, id };
    });
  }

  function figures(list: SiteWindowResult[]) {
    return truth.map((t, k) => {
      const ds = list.map((w) => errors(w)[k]);
      const limit = t.moving ? MOVING_WITHIN_M : STILL_WITHIN_M;
      const found = ds.filter((e) => e.d <= limit);
      const rms = Math.sqrt(found.reduce((p, e) => p + e.d * e.d, 0) / Math.max(found.length, 1));
      const worst = found.reduce((p, e) => Math.max(p, e.d), 0);
      return { name: t.name, windows: list.length, within: found.length, fraction: found.length / Math.max(list.length, 1), rmsM: rms, worstM: worst, ids: new Set(found.map((e) => e.id)).size };
    });
  }

  it('locates the still sources within 1.5 m and tracks the cart within 3 m', async () => {
    await waitFor(() => site.core.registry.list().filter((n) => n.state === 'online').length === 3, 30_000, 'three nodes online');
    // The first window with bearings of all three arrays: an edge started last (or slowly, on a
    // loaded machine) is online by its status some seconds before its first rows, and west and east
    // alone already locate the generator and the cart.
    const allThree = (w: SiteWindowResult) => EDGES.every((n) => w.bearings.some((b) => b.node === n && b.bearings.length > 0));
    const first = await (async () => {
      await waitFor(() => [...windows.values()].some((w) => allThree(w) && w.sources.length >= 3), 60_000, 'a window with bearings of all three arrays and three sources');
      return Math.min(...[...windows.values()].filter((w) => allThree(w) && w.sources.length >= 3).map((w) => w.index));
    })();
    // 40 windows (20 s of scene time) after the tracks have settled (6 windows).
    const from = first + 6, to = from + Number(process.env.SITE_ACCEPTANCE_WINDOWS ?? 40);
    await waitFor(() => site.core.counters.windows > 0 && (site.core.latest()?.index ?? 0) >= to, 40_000 + (to - from) * 600, '40 windows');
    const list = [...windows.values()].filter((w) => w.index >= from && w.index < to).sort((a, b) => a.index - b.index);
    expect(list.length).toBeGreaterThanOrEqual(36);
    const f = figures(list);
    if (process.env.SITE_ACCEPTANCE_DEBUG) for (const w of list) console.log(w.index, w.bearingCount, w.bearings.map((b) => `${b.node}:${b.bearings.map((x) => x.azimuthDeg.toFixed(1) + '/' + x.levelDb.toFixed(0)).join(',')}`).join(' '), '|', w.sources.map((s) => `${s.id}(${s.xM.toFixed(1)},${s.yM.toFixed(1)})${s.nodes.map((n) => n[0]).join('')}`).join(' '), '| cart', truth[3].at(w.windowUtcMs).map((v) => v.toFixed(1)).join(','));
    const nodes3 = list.flatMap((w) => w.sources).filter((s) => s.nodes.length === 3).length;
    // Reported sources farther than 3 m from every true source (ghosts or lagging tracks).
    const stray = list.reduce((p, w) => p + w.sources.filter((s) => truth.every((t) => Math.hypot(s.xM - t.at(w.windowUtcMs)[0], s.yM - t.at(w.windowUtcMs)[1]) > MOVING_WITHIN_M)).length, 0);
    const all = list.flatMap((w) => w.sources).length;
    console.log(`site acceptance, steady (windows ${from}–${to - 1}): ${f.map((x) => `${x.name} ${x.within}/${x.windows} within, RMS ${x.rmsM.toFixed(2)} m, worst ${x.worstM.toFixed(2)} m, ids ${x.ids}`).join('; ')}; fixes by 3 arrays ${nodes3}/${all}; farther than 3 m from every source ${stray}/${all}; windows with each array's bearings ${JSON.stringify(Object.fromEntries(EDGES.map((n) => [n, list.filter((w) => w.bearings.some((b) => b.node === n && b.bearings.length > 0)).length])))}, late peaks ${site.core.windows.counters.late}, edges' highest shedding step ${JSON.stringify(Object.fromEntries(maxShedStep))}, site counters ${JSON.stringify(site.core.counters)}`);
    // Measured on this 2-core machine (AMD EPYC, AVX-512), idle and with one core kept busy: every
    // source within its limit in 40 of 40 windows with one id each; RMS pump 0.10 m, fan 0.05 m,
    // generator 0.95 m (worst 1.22 m: its 1250 Hz tone's peak sits on the slope of the cart's lobe,
    // 1.3° towards it at west and east), cart 0.31–0.34 m (worst 0.66 m); no stray positions.
    for (const x of f) {
      // Measured 40 of 40 idle, 37–40 of 40 with the machine loaded (a window with a source missing
      // is a miss, not a wrong position: every position reported was within its limit).
      expect(x.fraction, `${x.name}: share of windows located within its limit`).toBeGreaterThanOrEqual(0.85);
      expect(x.ids, `${x.name}: track ids`).toBeLessThanOrEqual(2);
    }
    expect(stray / Math.max(all, 1), 'share of positions farther than 3 m from every source').toBeLessThanOrEqual(0.05);
    // An edge stalled for longer than the grace's margin can still land a message after its window
    // closed (the grace follows lags already seen): at most 2 % (measured 0, idle and loaded).
    expect(site.core.windows.counters.late, 'peak messages too late for their window').toBeLessThanOrEqual(0.02 * site.core.counters.messages);
  }, 90_000 + Number(process.env.SITE_ACCEPTANCE_WINDOWS ?? 40) * 600);

  it('a broker away for 10 s: edges keep processing, the site recovers within 10 windows, JetStream lost nothing', async () => {
    const rowsAtKill = EDGES.map((n) => edges.get(n)!.engine.rows);
    await broker.kill();
    // Bounded waits on counters: every edge produces rows while the broker is away.
    await waitFor(() => EDGES.every((n, i) => edges.get(n)!.engine.rows > rowsAtKill[i] + 20), 30_000, 'rows on every edge while the broker is away');
    await sleep(10_000); // the outage itself (nothing is asserted on its length)
    const rowsAtRestart = EDGES.map((n) => edges.get(n)!.engine.rows);
    for (let i = 0; i < EDGES.length; i++) expect(rowsAtRestart[i]).toBeGreaterThan(rowsAtKill[i]);
    const restartUtcMs = Date.now();
    await broker.start();
    const firstAfter = Math.floor(restartUtcMs / 500) + 1;
    await waitFor(() => [...windows.values()].some((w) => w.index >= firstAfter && w.index <= firstAfter + RECOVERY_WINDOWS + 20 && w.sources.length >= 3), 40_000, 'a window with sources after the restart');
    const recovered = Math.min(...[...windows.values()].filter((w) => w.index >= firstAfter && w.sources.length >= 3).map((w) => w.index));
    console.log(`site acceptance, broker restart: first window with ≥ 3 sources ${recovered - firstAfter} windows after the first window after the restart; site reconnects ${site.reconnects()}`);
    expect(recovered - firstAfter).toBeLessThanOrEqual(RECOVERY_WINDOWS);
    for (let i = 0; i < EDGES.length; i++) expect(edges.get(EDGES[i])!.engine.rows).toBeGreaterThan(rowsAtRestart[i]);

    // Every edge's durable sequence 1…lastSeq is in the stream.
    const last: Record<string, number> = {};
    await waitFor(async () => {
      for (const n of EDGES) {
        const cl = (await getStatus(edges.get(n)!)).cluster;
        if (!(cl.state === 'connected' && cl.pending === 0 && cl.streamReady)) return false;
        last[n] = cl.lastSeq;
      }
      return true;
    }, 30_000, 'every edge reconnected with nothing pending');
    const checker = await connect({ servers: broker.url });
    try {
      const name = siteStreamName(SITE);
      const info = await (await jetstreamManager(checker)).streams.info(name);
      const consumer = await jetstream(checker).consumers.get(name);
      const seqs = new Map<string, number[]>(EDGES.map((n) => [n, []]));
      const msgs = await consumer.fetch({ max_messages: info.state.messages, expires: 10_000 });
      let n = 0;
      for await (const m of msgs) {
        const node = m.subject.split('.')[2];
        seqs.get(node)?.push(Number(m.headers?.get(EDGE_SEQ_HEADER)));
        if (++n === info.state.messages) break;
      }
      for (const node of EDGES) {
        const s = new Set(seqs.get(node));
        const missing = Array.from({ length: last[node] }, (_, i) => i + 1).filter((q) => !s.has(q));
        expect(missing, `${node}: sequences missing from the stream`).toEqual([]);
      }
      console.log(`site acceptance, JetStream: ${info.state.messages} entries, last sequence per edge ${JSON.stringify(last)}, none missing`);
    } finally {
      await checker.close();
    }
  }, 90_000);

  it('an edge closed: the site marks it offline and keeps locating with the other two', async () => {
    const north = edges.get('north')!;
    await north.close();
    edges.delete('north');
    await waitFor(() => site.core.registry.state('north') === 'offline', 20_000, 'north offline');
    // Windows close a grace after their end, and the grace follows the edges' lag (several seconds
    // on a loaded machine), so windows closed after the offline mark can still hold north's last
    // bearings. Counted from the last window that has any: the 16 after it.
    const lastNorth = () => Math.max(0, ...[...windows.values()].filter((w) => w.bearings.some((b) => b.node === 'north')).map((w) => w.index));
    await waitFor(() => (site.core.latest()?.index ?? 0) >= lastNorth() + 16, 30_000, '16 windows after north\'s last bearings');
    const offlineAt = lastNorth();
    const list = [...windows.values()].filter((w) => w.index > offlineAt + 4 && w.index <= offlineAt + 16);
    const f = figures(list);
    const byTwo = list.flatMap((w) => w.sources).every((s) => !s.nodes.includes('north'));
    console.log(`site acceptance, after north's last bearings (windows ${offlineAt + 5}–${offlineAt + 16}): ${f.map((x) => `${x.name} ${x.within}/${x.windows} within, RMS ${x.rmsM.toFixed(2)} m`).join('; ')}`);
    expect(byTwo).toBe(true);
    // West and east hear the generator (350.5°, 193.1°) and the cart apart from the others. The pump
    // needs north: east hears it at 149.5°, under the cart's peak (138–169° from east) for much of
    // the loop; the fan is 59 m from west and 29–36° there, under the cart's (14–45°) too. Measured:
    // generator and cart 11 of 11 windows, fan 4 of 11, pump 0.
    for (const name of ['generator', 'cart']) expect(f.find((x) => x.name === name)!.fraction, name).toBeGreaterThanOrEqual(0.7);
  }, 60_000);
});
