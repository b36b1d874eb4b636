/**
 * The running server: source (simulator or network ingest) → block bus, plus the HTTP app and its
 * listeners. main.ts starts one from the command line; integration tests start one in-process on
 * free loopback ports.
 */
import type { FastifyInstance } from 'fastify';
import type { Server } from 'node:http';
import { availableParallelism } from 'node:os';
import { fileURLToPath } from 'node:url';
import type { HelloMessage, ProcessingDerived } from '../shared/messages.ts';
import type { Block, BlockSink } from '../shared/types.ts';
import type { LoadedConfig } from './config/load.ts';
import { ConfigError } from './config/validate.ts';
import { publicText } from './public-text.ts';
import { describeCalibration } from './dsp/calibration.ts';
import { defaultGrid } from './dsp/scan-pipeline.ts';
import { ChannelMeters } from './engine/channel-meters.ts';
import { Engine } from './engine/engine.ts';
import { needsReplan, type ProcessingParams } from './engine/params.ts';
import { PlanBudget, PlanError, planFields } from './engine/plan-budget.ts';
import { buildApp } from './http/app.ts';
import { LiveHub } from './http/hub.ts';
import { AuthFailureLimiter, createAccessStats } from './http/access.ts';
import { OriginPolicy } from './http/origin-policy.ts';
import { createUpgradeAuth } from './http/upgrade-auth.ts';
import { currentActor, SERVER_ACTOR } from './http/actor.ts';
import { folderLabel, freeBytesSync, fsErrorText } from './io/disk-space.ts';
import { RetentionScheduler } from './monitor/retention.ts';
import { openRecordingFiles, retentionPolicies } from './monitor/retention-policies.ts';
import { diffSummary, ParameterJournal, type JournalKind } from './session/journal.ts';
import { tidy } from '../shared/numbers.ts';
import { PresetStore } from './session/presets.ts';
import { CompareChain, compareParams, merged, ownOf } from './engine/compare-chain.ts';
import type { CompareController, CompareState } from './http/routes/compare.ts';
import type { SessionController } from './http/routes/session.ts';
import { patchParams } from './engine/params.ts';
import { Recorder, type RecorderStatus } from './outputs/recorder.ts';
import { writeFileAtomic } from './outputs/sidecar.ts';
import { BeamStreamOut } from './outputs/stream-out.ts';
import { basename, dirname, resolve as resolvePath } from 'node:path';
import { BlockBus } from './ingest/block-bus.ts';
import { RateMeter, type IngestHub, type StreamStatus } from './ingest/ingest-hub.ts';
import { InputChoiceError, Inputs, withMemberOffsets } from './ingest/inputs.ts';
import { SceneSimulator, SimulatorSource } from './ingest/simulator.ts';
import { meanAgeS } from '../shared/tau-advisor.ts';
import { sampleIndexUtcMs, type SiteSceneSimulator } from './ingest/site-scene.ts';
import { createSiteSceneSimulator, UtcSceneSource } from './ingest/site-scene-source.ts';
import type { UdpIngest } from './ingest/udp.ts';
import { attachUpgrades } from './ingest/websocket.ts';
import { InputMask } from './engine/input-mask.ts';
import { HttpError } from './http/errors.ts';
import { arrayFileLandmarks } from './http/routes/landmarks.ts';
import { landmarkChangeSummary } from '../shared/landmarks.ts';
import { arrayFileSectors, type SectorsController } from './monitor/sectors.ts';
import { sectorChangeSummary } from '../shared/sectors.ts';
import { ArrayCheckRunner, createArrayCheckController } from './engine/array-check-runner.ts';
import { updateArrayFile } from './config/array-file-update.ts';
import { memberDelaysUs } from './ingest/group.ts';
import { encodeRow } from '../shared/messages.ts';
import { clusterOff, dashboardUrl, EdgePublisher } from './cluster/edge-publisher.ts';
import { RemoteBins } from './cluster/remote-bins.ts';
import { ServiceMetrics } from './monitor/metrics.ts';
import { Monitor } from './monitor/monitor.ts';
import { EventMonitor, type MonitorEvent } from './monitor/events.ts';
import { ClipRecorder } from './monitor/clips.ts';
import { PRE_TRIGGER_MAX_BYTES, RawRing } from './monitor/pre-trigger.ts';
import { RulesStore } from './monitor/rules-store.ts';
import { WebhookSender } from './monitor/webhooks.ts';

export const VERSION = '0.1.0';
/** The built dashboard, served at `/`. */
export const CLIENT_DIST = fileURLToPath(new URL('../client/dist/', import.meta.url));

export interface Service {
  readonly app: FastifyInstance;
  readonly bus: BlockBus;
  readonly hub: IngestHub | null;
  /** The live inputs (null with the simulator). */
  readonly inputs: Inputs | null;
  readonly engine: Engine;
  readonly live: LiveHub;
  /** GET /metrics: the monitor feeds sector levels and events into it. */
  readonly metrics: ServiceMetrics;
  /** The sectors of the array file (list, get, onChange), for the level measurement. */
  readonly sectors: SectorsController;
  readonly httpPort: number;
  readonly udpPort: number | null;
  /** Base URL of the HTTP server, e.g. http://127.0.0.1:8750 */
  readonly url: string;
  /** Subscribe to the block stream (returns the unsubscribe function). */
  onBlock(sink: BlockSink): () => void;
  status(): Record<string, unknown>;
  close(): Promise<void>;
}

export interface ServiceOptions {
  logger?: boolean | object;
  /** Tests: each RTP session's port instead of its SDP's (0 = any free port). */
  rtpPort?: (name: string) => number | undefined;
}

/**
 * The simulator's block length for an array of `channels`: as configured up to 64 channels, then
 * shorter in proportion (at least 32 frames), so rendering one block (its cost grows with channels
 * × frames) never holds the server's thread for long: with 1 024 channels a 480-frame block took
 * about 80 ms to render, a 32-frame one about 5 ms.
 */
export function simulatorBlockFrames(configured: number, channels: number): number {
  return channels <= 64 ? configured : Math.max(32, Math.min(configured, Math.floor((configured * 64) / channels)));
}

/** The UDP listener in status: the kernel's figures for its socket (null where not reported) and the receive queue. */
function udpStatus(udp: UdpIngest, queueBytes: number): Record<string, unknown> {
  const k = udp.kernel();
  return {
    port: udp.port,
    receiveBufferBytes: udp.receiveBufferBytes,
    kernelDrops: k ? k.drops : null,
    kernelQueuedBytes: k ? k.queuedBytes : null,
    queueBytes,
    queuedBytes: udp.queuedBytes,
    queueDrops: udp.queueDrops,
    receiverRestarts: udp.receiverRestarts,
  };
}

function urlHost(host: string): string {
  return host.includes(':') && !host.startsWith('[') ? `[${host}]` : host;
}

export async function startService(loaded: LoadedConfig, opts: ServiceOptions = {}): Promise<Service> {
  const { config, arrayPath } = loaded;
  // A member's measured offset (the array file's inputs[].offsetUs) is corrected like a calibration delay.
  const geometry = withMemberOffsets(loaded.geometry);
  const startedMs = performance.now();
  const bus = new BlockBus();
  const channels = geometry.positions.length;

  let sim: SimulatorSource | null = null;
  let scene: SceneSimulator | SiteSceneSimulator | null = null;
  let inputs: Inputs | null = null;
  // The processed stream changed: journaled as a change of the server's own (journalNote is set below).
  let noteSwitch: (text: string, from: number | null, to: number) => void = () => {};

  if (config.source.kind !== 'simulator') {
    inputs = new Inputs(loaded, bus.publish, {
      rtpPort: opts.rtpPort,
      // The first choice is not a change of anything: status shows it; switches are journaled.
      onSwitch: (sw) => {
        if (sw.reason !== 'first') noteSwitch(sw.reason === 'manual' ? `processed stream set to ${sw.to}` : `stream ${sw.from} silent for ${config.input.switchAfterS} s: processing stream ${sw.to}`, sw.from, sw.to);
      },
    });
  } else if (config.simulator.scene !== null) {
    // A site scene: what this array hears at its pose, on the UTC sample clock (ingest/site-scene.ts).
    const site = await createSiteSceneSimulator({ scenePath: config.simulator.scene, arrayPath, geometry, sampleRateHz: config.input.sampleRateHz, blockFrames: simulatorBlockFrames(config.simulator.blockFrames, channels), seed: config.simulator.seed });
    scene = site;
    sim = new UtcSceneSource(site);
  } else {
    scene = new SceneSimulator({
      geometry,
      sampleRateHz: config.input.sampleRateHz,
      blockFrames: simulatorBlockFrames(config.simulator.blockFrames, channels),
      seed: config.simulator.seed,
      speedOfSoundMps: config.simulator.speedOfSoundMps,
    });
    sim = new SimulatorSource(scene);
  }

  // The live engine and the dashboard push.
  const fs = config.input.sampleRateHz;
  const fftSize = Number(config.engine.fftSize);
  const hop = fftSize / 2;
  const pr = config.processing;
  if (pr.bandHighHz > fs / 2 || pr.bandLowHz >= pr.bandHighHz) {
    throw new ConfigError([{ path: 'processing.bandHighHz', value: pr.bandHighHz, message: `processing.bandLowHz–bandHighHz = ${pr.bandLowHz}–${pr.bandHighHz}: need low < high ≤ fs/2 = ${fs / 2} Hz` }]);
  }
  if (pr.tauS <= hop / fs) {
    throw new ConfigError([{ path: 'processing.tauS', value: pr.tauS, message: `processing.tauS = ${pr.tauS}: must exceed one hop, ${(hop / fs).toFixed(6)} s` }]);
  }
  const grid = defaultGrid(geometry);
  const initial: ProcessingParams = {
    lambda: 1 - hop / (fs * pr.tauS),
    loading: { mode: 'relative', ratio: pr.loadingRatio },
    bandHz: [pr.bandLowHz, pr.bandHighHz],
    grid: { azimuthDeg: { ...grid.azimuthDeg, stepDeg: pr.azimuthStepDeg, stopDeg: grid.azimuthDeg.stopDeg === 359 ? 360 - pr.azimuthStepDeg : 180 } },
    methods: ['mvdr', 'conventional'],
    spectrumRateHz: pr.spectrumRateHz,
    normalise: false,
    fftSize,
  };
  let engine: Engine | null = null;
  // τ derived from λ carries rounding noise (2 s reads 1.9999999999999707): tidied before anyone sees it.
  const derived = (): ProcessingDerived => ({ tauS: tidy(engine!.hop / (fs * (1 - engine!.params.lambda))), hopSamples: engine!.hop, sampleRateHz: fs, directions: engine!.grid.count, bins: (engine!.status() as { bins: number }).bins });
  const hello = (params: ProcessingParams = engine!.params, d: ProcessingDerived = derived()): HelloMessage => {
    const g = engine!.grid;
    return {
      type: 'hello',
      version: 1,
      grid: { nAz: g.nAz, nEl: g.nEl, azimuthDeg: Array.from(g.azimuthDeg.subarray(0, g.nAz)), elevationDeg: Array.from({ length: g.nEl }, (_, i) => g.elevationDeg[i * g.nAz]) },
      params,
      array: { name: geometry.name, positions: geometry.positions, calibration: describeCalibration(geometry.calibration), landmarks: landmarks.list(), sectors: sectors.list() },
      derived: d,
    };
  };
  // A recording that stops by itself (disk full, write error) is journaled like a stop on request.
  const recorder = new Recorder({ onError: (e) => process.emitWarning(`recording: ${e.message}`), onStop: (st) => void recordingStopped(st, SERVER_ACTOR) });
  // The session's journal and presets, in the data folder (both survive a restart).
  const dataDir = resolvePath(config.data.dir);
  const journal = new ParameterJournal(dataDir, { maxBytes: config.data.journalMaxBytes });
  if (journal.corruptLines > 0) process.emitWarning(`journal: ${journal.corruptLines} unreadable line(s) in ${config.data.dir}/journal.jsonl skipped`);
  if (journal.readError !== null) process.emitWarning(`journal: could not read the earlier journal (${journal.readError}); starting an empty one`);
  const presets = new PresetStore(
    resolvePath(dataDir, 'presets'),
    (p) => {
      // A preset holds the full parameter set: checked like a PUT /api/processing body.
      if (typeof p !== 'object' || p === null || Array.isArray(p)) throw new Error('params: not a JSON object');
      return patchParams(engine!.params, p, { sampleRateHz: fs, hop: engine!.hop });
    },
    { minFreeBytes: config.data.minFreeBytes, label: `${folderLabel(config.data.dir)}/presets` },
  );
  const journalNote = (kind: JournalKind, before: unknown, after: unknown, summary?: string) => journal.record(kind, currentActor(), bus.status().nextSample, before, after, summary);
  // Landmarks (named azimuths) saved into the array file: journaled, and a new hello tells the dashboards.
  const landmarks = arrayFileLandmarks(arrayPath, geometry.landmarks ?? [], (before, after) => {
    journalNote('landmarks', before, after, landmarkChangeSummary(before, after));
    if (engine) live.broadcastJson(hello());
    if (chain) compareLive.broadcastJson(hello(chain.params, chainDerived(chain)));
  });
  // Sectors saved into the array file (server/monitor/sectors.ts): journaled, and a new hello tells the dashboards.
  const sectors = arrayFileSectors(arrayPath, geometry.sectors ?? [], () => (engine ? { nyquistHz: fs / 2, processingBandHz: engine.params.bandHz } : { nyquistHz: fs / 2 }));
  sectors.onChange((after, before) => {
    journalNote('sectors', before, after, sectorChangeSummary(before, after));
    if (engine) live.broadcastJson(hello());
    if (chain) compareLive.broadcastJson(hello(chain.params, chainDerived(chain)));
  });
  for (const p of sectors.problems()) process.emitWarning(`array file: ${p}`);
  noteSwitch = (text, from, to) => journalNote('input-stream', { streamId: from }, { streamId: to }, text);
  /** Free bytes on the recordings' disk (its folder, or the nearest existing parent), null when unknown. */
  const outputsFreeBytes = (): number | null => {
    for (let d = resolvePath(config.outputs.dir); ; d = dirname(d)) {
      try {
        return freeBytesSync(d);
      } catch {
        if (dirname(d) === d) return null;
      }
    }
  };
  // Retention (outputs.retention, data.retention; server/monitor/retention.ts): a pass at start and every minute, each deleted set journaled.
  const retention = new RetentionScheduler({
    policies: retentionPolicies(config),
    inUse: () => openRecordingFiles(folderLabel(config.outputs.dir), recorder.status().files),
    onDelete: (_policy, d) => journal.record('retention', SERVER_ACTOR, bus.status().nextSample, { label: d.label, files: d.files, bytes: d.bytes, mtimeUtc: d.mtimeUtc, reason: d.reason }, null, `retention (${d.reason}): deleted ${d.label}/${d.file}${d.files.length > 1 ? ` with ${d.files.length - 1} more of its set` : ''}, ${d.bytes} bytes`),
  });
  retention.start();
  let recordingStartSeq = 0;
  let recordBeams = false;
  let beamChannelsKey = '';
  /** A beam as the beams sidecar describes it (id, look direction, method, gain, limiter). */
  const beamNote = (id: number) => {
    const b = engine?.beams.find((x) => x.id === id);
    return { beamId: id, azimuthDeg: b?.azimuthDeg ?? Number.NaN, elevationDeg: b?.elevationDeg ?? 0, method: b?.method ?? ('mvdr' as const), gainDb: b?.gainDb ?? 0, limiter: b?.limiter ?? false };
  };
  /** A beam change while beams are recorded: into the beams sidecar at the current sample index. */
  const noteBeamChange = (kind: 'add' | 'update' | 'remove', beamId: number, before: ReturnType<typeof beamNote> | null, after: ReturnType<typeof beamNote> | null) => {
    if (recordBeams && recorder.recording) recorder.track('beams')?.noteBeamChange({ sampleIndex: bus.status().nextSample ?? 0, beamId, kind, before, after });
  };
  // Beam-audio listeners get the dashboard's slow-client policy (hub.*) with their own limits.
  const streamOut = new BeamStreamOut({
    sampleRateHz: config.input.sampleRateHz,
    streamId: config.outputs.streamId,
    udpTarget: config.outputs.streamUdpTarget,
    path: config.outputs.streamPath,
    maxClients: config.outputs.streamMaxClients,
    queueFrames: config.outputs.streamQueueFrames,
    maxBufferedBytes: config.hub.maxBufferedBytes,
    slowClientTimeoutMs: config.hub.slowClientTimeoutMs,
  });
  const live = new LiveHub({ path: config.hub.path, maxClients: config.hub.maxClients, maxBufferedBytes: config.hub.maxBufferedBytes, queueRows: config.hub.queueRows, slowClientTimeoutMs: config.hub.slowClientTimeoutMs, onConnect: (c) => c.sendJson(hello()) });
  const engineErrors: string[] = [];
  // The plan memory of this process: the main chain's plan and the comparison's share it.
  const budget = new PlanBudget(config.engine.maxPlanMiB * 2 ** 20);
  const workers = config.engine.workers === 0 ? availableParallelism() : config.engine.workers;
  // The site's broker (cluster.natsUrl; server/cluster/): rows (the dashboards' bytes), peaks, status, journal.
  let edge: EdgePublisher | null = null;
  // GET /metrics (issue 16): read from one status snapshot per scrape; row latencies fed per row.
  // Webhook deliveries given up (failed every attempt, dropped from a full queue): a count that only grows.
  let webhookFailures = (): number => 0;
  const metrics = new ServiceMetrics({ status: () => status(), webhookFailures: () => webhookFailures() });
  // Levels per direction (server/monitor/monitor.ts): made once the engine exists; rows and hop snapshots feed it.
  let monitor: Monitor | null = null;
  let clipsRef: ClipRecorder | null = null;
  // Remote bin workers on the broker (issue 17, server/cluster/remote-bins.ts): connects in the background.
  if (config.engine.remoteWorkers && !config.cluster.natsUrl) throw new ConfigError([{ path: 'engine.remoteWorkers', value: true, message: 'engine.remoteWorkers: needs cluster.natsUrl (the broker the workers are on)' }]);
  const remote = config.engine.remoteWorkers && config.cluster.natsUrl ? RemoteBins.start({ natsUrl: config.cluster.natsUrl, token: config.cluster.token, deadlineMs: config.engine.remoteDeadlineMs, dropMs: config.engine.remoteDropMs, log: (l) => void (engineErrors.push(publicText(l)), engineErrors.length > 20 && engineErrors.shift()) }) : undefined;
  engine = await Engine.create({
    geometry,
    sampleRateHz: fs,
    params: initial,
    workers,
    ...(remote ? { remote } : {}),
    budget,
    speedOfSoundMps: config.engine.speedOfSoundMps,
    onRow: (row) => {
      metrics.observeRowLatency(row.latencyMs);
      monitor?.row(row);
      if (!edge) return live.broadcastRow(row);
      const bytes = encodeRow(row);
      live.broadcastRowBytes(bytes);
      edge.row(bytes, engine!.grid);
    },
    onHopSnapshot: (snap, offset, start) => monitor?.hop(snap, offset, start),
    onBeamAudio: (hop) => {
      clipsRef?.beamHop(hop.sampleIndex, hop.frames, hop.ids, hop.data);
      streamOut.send(hop);
      if (recordBeams && recorder.recording && hop.sampleIndex >= 0) {
        // Which beam each channel carries, noted in the sidecar whenever the set of beams changes.
        const key = hop.ids.join(',');
        if (key !== beamChannelsKey) {
          beamChannelsKey = key;
          recorder.track('beams')?.noteBeamChannels(hop.ids.map((id, channel) => ({ channel, ...beamNote(id) })), hop.sampleIndex);
        }
        recorder.pushTrack('beams', { streamId: config.outputs.streamId, sampleIndex: hop.sampleIndex, sampleRateHz: fs, channels: hop.ids.length, frames: hop.frames, data: hop.data, gap: false, discontinuity: false });
      }
    },
    onGrid: () => {
      if (engine) live.broadcastJson(hello());
    },
    onError: (m) => {
      engineErrors.push(publicText(m));
      if (engineErrors.length > 20) engineErrors.shift();
      process.emitWarning(m);
    },
  }).catch((e: unknown) => {
    // The configured array, band and grid do not fit the plan budget: a configuration error.
    if (e instanceof PlanError && e.kind === 'too-large') throw new ConfigError([{ path: 'engine.maxPlanMiB', value: config.engine.maxPlanMiB, message: `the processing plan at start: ${e.message}; raise engine.maxPlanMiB, or use a coarser processing.azimuthStepDeg or a narrower band` }]);
    throw e;
  });
  const eng = engine;
  const splOffset = describeCalibration(geometry.calibration)?.splOffsetDb ?? null;
  monitor = new Monitor({
    engine: eng,
    sampleRateHz: fs,
    levelsDir: resolvePath(dataDir, 'levels'),
    splOffsetDb: splOffset,
    omniWeighting: config.monitor.omniWeighting,
    ...(config.simulator.scene !== null && config.source.kind === 'simulator' ? { utcOfSample: (i: number) => sampleIndexUtcMs(i, fs) } : {}),
    onSecond: (series, leqDb) => {
      metrics.setSectorLeq(series, leqDb);
      events.second(series, leqDb);
    },
    onHopLevel: (series, sampleIndex, frames, ms) => events.hopLevel(series, sampleIndex, frames, ms),
  });
  monitor.setSectors(sectors.list());
  sectors.onChange((after) => monitor?.setSectors(after));
  // Rules and events (server/monitor/events.ts): changes go live, to the webhooks, to the metrics and to the clips.
  let onClipChange: (change: 'started' | 'updated' | 'ended', event: MonitorEvent) => void = () => undefined;
  const webhooks = new WebhookSender(config.monitor.webhooks);
  webhookFailures = () => webhooks.counters().hooks.reduce((p, h) => p + h.abandoned + h.dropped, 0);
  const mon = monitor;
  const events = new EventMonitor({
    sampleRateHz: fs,
    splOffsetDb: splOffset,
    dir: resolvePath(dataDir, 'events'),
    utcOfSample: (i) => mon.utcOfSample(i),
    lookOf: (sector) => mon.meters.look(sector),
    onChange: (change, event) => {
      onClipChange(change, event);
      if (change === 'started') metrics.countEvent(event.rule);
      live.broadcastJson({ type: 'event', change, event });
      webhooks.send(change, event);
      edge?.event(change, event);
    },
  });
  const rules = new RulesStore(resolvePath(dataDir, 'rules.json'), config.monitor.preTriggerS);
  await rules.load();
  if (rules.loadError) process.emitWarning(`monitoring rules not loaded: ${rules.loadError}`);
  events.setRules(rules.list());
  rules.onChange((after, before) => {
    events.setRules(after);
    journalNote('rules', before, after, `rules: ${after.map((r) => r.name).join(', ') || 'none'}`);
  });
  // Event clips (server/monitor/clips.ts): the pre-trigger ring of raw input, allocated once at start
  // (monitor.preTriggerS; status says its size), so that a rule made later has its history too.
  // At most PRE_TRIGGER_MAX_BYTES (256 MiB): a very large array gets a shorter ring, said in status.
  const ring: RawRing | null = config.monitor.preTriggerS > 0 ? new RawRing(channels, Math.max(Math.min(Math.round(config.monitor.preTriggerS * fs), Math.floor(PRE_TRIGGER_MAX_BYTES / (4 * channels))), 2 * eng.fftSize)) : null;
  const clips = new ClipRecorder({
    dir: resolvePath(config.outputs.dir, 'clips'),
    sampleRateHz: fs,
    channels,
    fftSize: eng.fftSize,
    ring: () => ring,
    band: () => eng.band,
    utcOfSample: (i) => mon.utcOfSample(i),
    beamOf: (sector) => {
      const id = [...mon.meters.ownedBeams()].find(([, name]) => name === sector)?.[0];
      if (id === undefined) return null;
      return { id, weights: eng.beamWeights(id), ...mon.meters.look(sector), wngDb: eng.beams.find((b) => b.id === id)?.wngDb ?? null };
    },
    onClip: (id, file) => events.addClip(id, file),
  });
  clipsRef = clips;
  onClipChange = (change, event) => {
    const rule = rules.get(event.rule);
    if (change === 'started' && rule) clips.start(event, rule, mon.lastHopStart + eng.fftSize / 2);
    if (change === 'ended') clips.end(event);
  };
  const meters = new ChannelMeters(channels, fs);
  bus.subscribe((b) => meters.push(b.data, b.frames), 'channel-meters');
  // Channels in use: the operator's mask and, of a merged array, the members that delivered the span.
  const inputMask = new InputMask(channels, Math.round(3 * config.processing.tauS * fs), (active) => {
    eng.setMask(active);
    chain?.engine.setMask(active);
  });
  let recordRaw = false;
  bus.subscribe((b) => {
    if (recordRaw && recorder.recording) recorder.push(b);
  }, 'recorder');
  // Before the engine: a hop's frame is in the ring by the time the engine meters it.
  bus.subscribe((b) => {
    if (b.sampleIndex >= 0) ring?.push(b.data, b.frames, b.sampleIndex, b.discontinuity);
    clips.rawBlock(b.sampleIndex, b.frames, b.data);
  }, 'pre-trigger');
  bus.subscribe((b) => {
    inputMask.observe(b.sampleIndex, b.frames, b.absent);
    eng.push(b);
  }, 'engine');
  // The comparison chain (off until PUT /api/compare): same blocks, its own engine and live path.
  let chain: CompareChain | null = null;
  const chainDerived = (c: CompareChain): ProcessingDerived => ({ ...derived(), tauS: tidy(eng.hop / (fs * (1 - c.params.lambda))) });
  const compareLive = new LiveHub({
    path: `${config.hub.path}/compare`,
    maxClients: config.hub.maxClients,
    maxBufferedBytes: config.hub.maxBufferedBytes,
    queueRows: config.hub.queueRows,
    slowClientTimeoutMs: config.hub.slowClientTimeoutMs,
    onConnect: (c) => {
      if (chain) c.sendJson(hello(chain.params, chainDerived(chain)));
    },
  });
  bus.subscribe((b) => chain?.push(b), 'comparison');

  const hub: IngestHub | null = inputs?.hub ?? null;
  let udp: UdpIngest | null = null;
  const simRate = new RateMeter();
  const serialStats = { timedOut: 0 };
  const status = (): Record<string, unknown> => {
    const now = performance.now();
    let streams: StreamStatus[] | Record<string, unknown>[] = [];
    if (inputs) streams = inputs.streams(now);
    else if (sim) {
      const s = sim.stats();
      const t = bus.status();
      simRate.update(s.samples, now);
      streams = [{ streamId: 0, selected: true, transport: 'simulator', sampleRateHz: config.input.sampleRateHz, channels, blocks: s.blocks, samplesAccepted: s.samples, skippedSamples: s.skippedSamples, nextSample: t.nextSample, inputRateHz: simRate.rate(now) }];
    }
    const rec = recorder.status();
    return {
      service: 'nullsteer',
      version: VERSION,
      uptimeS: (now - startedMs) / 1000,
      source: { kind: config.source.kind, ...(scene ? { scenario: scene.describe() } : {}) },
      // The file's name only: status may be open to anyone who can reach the port.
      array: { name: geometry.name, file: basename(arrayPath), channels, calibration: describeCalibration(geometry.calibration) },
      input: { sampleRateHz: config.input.sampleRateHz, encodings: config.input.encodings, selectedStreamId: hub ? hub.selectedStream : 0, waiting: false, ...(inputs ? inputs.selection(now, streams as StreamStatus[]) : {}), channelsOut: inputMask.inputOut },
      listeners: {
        http: { host: config.server.host, port: httpPort },
        udp: udp ? udpStatus(udp, config.ingest.udp.queueBytes) : null,
        websocket: wsIngest ? { path: config.ingest.websocket.path, connections: wsIngest.connections } : null,
      },
      ingest: hub ? { messages: hub.messages, rejected: hub.rejected, lastRejected: hub.lastRejected } : null,
      streams,
      timeline: bus.status(),
      engine: { ...eng.status(), recentErrors: [...engineErrors] },
      channels: meters.levels(),
      live: live.stats(),
      compare: chain ? { params: chain.params, livePath: compareLive.path, live: compareLive.stats(), engine: chain.engine.status() } : null,
      upgradesRefused: upgradeAuth.refused(),
      access: { refused: { ...accessStats.refused }, last: accessStats.last, changesTimedOut: serialStats.timedOut },
      journal: { session: journal.session, entries: journal.total, corruptLines: journal.corruptLines, readError: journal.readError, rotations: journal.rotations, maxBytes: config.data.journalMaxBytes, writeErrors: journal.writeErrors, lastWriteError: journal.lastWriteError },
      recording: { recording: rec.recording, dir: rec.dir, stopReason: rec.stopReason, streamOut: streamOut.stats() },
      retention: retention.status(),
      monitor: monitor ? { ...monitor.status(), events: { ...events.counters }, clips: clipsRef ? { ...clipsRef.counters, active: clipsRef.active, preTriggerBytes: clipsRef.ringBytes, preTriggerS: ring ? ring.capacity / fs : 0 } : null, rules: rules.list().length, rulesError: rules.loadError, webhooks: webhooks.counters() } : null,
      cluster: edge ? edge.status() : clusterOff(config.cluster.site, config.cluster.node),
    };
  };

  /** Apply validated parameters: engine, recording sidecar, dashboards, journal. */
  const applyParams = async (next: ProcessingParams, kind: JournalKind, label?: string): Promise<ProcessingParams> => {
    const before = eng.params;
    // A re-plan of the main chain re-plans the comparison too: both new plans must fit together.
    if (chain && needsReplan(before, next)) budget.checkAll([eng.planDemand(next), chain.engine.planDemand(merged(next, chain.own))], planFields(before, next));
    const applied = await eng.setParams(next);
    inputMask.holdSamples = Math.round((3 * eng.hop) / (1 - applied.lambda));
    if (recorder.recording) recorder.noteParams(bus.status().nextSample ?? 0, applied as unknown as Record<string, unknown>);
    live.broadcastJson({ type: 'params', params: applied, derived: derived() });
    const d = diffSummary(before, applied, { hopSamples: eng.hop, sampleRateHz: fs });
    journalNote(kind, before, applied, label ? `${label}: ${d}` : d);
    if (chain) {
      // The comparison follows band, grid, FFT size, rate and normalisation; keeps its own λ, loading, methods.
      await chain.set(applied);
      compareLive.broadcastJson({ type: 'params', params: chain.params, derived: chainDerived(chain) });
    }
    return applied;
  };
  const compareState = (): CompareState =>
    chain ? { enabled: true, params: chain.params, derived: chainDerived(chain), status: { startedAt: chain.startedAt, livePath: compareLive.path, live: compareLive.stats(), ...chain.engine.status() } } : { enabled: false, params: null, derived: null, status: null };
  const compare: CompareController = {
    state: compareState,
    set: async (body) => {
      const next = compareParams(eng.params, chain?.own ?? null, body, { sampleRateHz: fs, hop: eng.hop });
      if (!chain) {
        chain = await CompareChain.create(next, { geometry, sampleRateHz: fs, workers, budget, speedOfSoundMps: config.engine.speedOfSoundMps, onRow: (row) => compareLive.broadcastRow(row), onError: (m) => process.emitWarning(`comparison chain: ${m}`) });
        journalNote('compare-on', null, ownOf(next), `comparison on: ${diffSummary(ownOf(eng.params), ownOf(next), { hopSamples: eng.hop, sampleRateHz: fs })}`);
        compareLive.broadcastJson(hello(chain.params, chainDerived(chain)));
      } else {
        const before = chain.own;
        await chain.set(eng.params, ownOf(next));
        journalNote('compare-set', before, chain.own);
        compareLive.broadcastJson({ type: 'params', params: chain.params, derived: chainDerived(chain) });
      }
      return compareState();
    },
    off: async () => {
      if (chain) {
        const c = chain;
        chain = null;
        await c.close();
        journalNote('compare-off', c.own, null, 'comparison off');
      }
      return compareState();
    },
    promote: async (side) => {
      if (side === 'main') {
        if (chain) {
          const c = chain;
          chain = null;
          await c.close();
          journalNote('compare-promote', c.own, null, 'main kept; comparison ended');
        }
      } else if (chain) {
        const mainOwn = ownOf(eng.params);
        const cmpOwn = chain.own;
        await applyParams(merged(eng.params, cmpOwn), 'compare-promote', 'comparison promoted to main');
        await chain.set(eng.params, mainOwn);
        compareLive.broadcastJson({ type: 'params', params: chain.params, derived: chainDerived(chain) });
      }
      return { main: { params: eng.params, derived: derived() }, compare: compareState() };
    },
  };
  /** Beside a finished recording: the journal entries of its span, `<prefix>-<time>-journal.json`. */
  const exportJournal = async (wavs: string[], fromSeq: number, toSeq: number): Promise<void> => {
    if (wavs.length === 0) return;
    const name = wavs[0].replace(/-(raw|beams)-\d+\.wav$/, '-journal.json');
    if (name === wavs[0]) return;
    const entries = journal.query({ afterSeq: fromSeq - 1 }).filter((e) => e.seq <= toSeq);
    // Through a temporary file, so that a full disk leaves no half-written export behind.
    await writeFileAtomic(resolvePath(config.outputs.dir, name), `${JSON.stringify({ session: journal.session, files: wavs, entries }, null, 2)}\n`).catch((e) =>
      process.emitWarning(`recording: journal export ${name} failed: ${fsErrorText(e)}`),
    );
  };
  /** After a recording ends (on request or by itself): journal it with the reason, export its journal. */
  function recordingStopped(st: RecorderStatus, actor = currentActor()): Promise<void> {
    recordRaw = false;
    recordBeams = false;
    const files = st.files.map((f) => f.wav);
    const reason = st.stopReason;
    const end = journal.record('recording-stop', actor, bus.status().nextSample, null, reason ? { files, reason } : { files }, reason ? `recording stopped: ${reason.message}` : 'recording stopped');
    return exportJournal(files, recordingStartSeq, end.seq);
  }
  const session: SessionController = {
    journal: ({ afterSeq, limit, all }) => ({
      session: { id: journal.session, startedAt: journal.startedAt },
      total: journal.total,
      corruptLines: journal.corruptLines,
      entries: journal.query({ afterSeq, limit, session: all ? undefined : journal.session }),
    }),
    listPresets: () => presets.list(),
    getPreset: (name) => presets.get(name),
    savePreset: (name, params, overwrite) => {
      const { preset, replaced } = presets.save(name, params ?? eng.params, { overwrite });
      // A replacement names the earlier version (its savedAt; null when its file did not validate).
      if (replaced) journalNote('preset-save', { name, savedAt: replaced.savedAt }, { name, replaced: true }, `preset ${name} replaced`);
      else journalNote('preset-save', null, { name }, `preset ${name} saved`);
      return preset;
    },
    applyPreset: async (name) => {
      const p = presets.get(name);
      const applied = await applyParams(p.params, 'preset-apply', `preset ${name}`);
      return { params: applied, derived: derived() };
    },
    deletePreset: (name) => {
      presets.delete(name);
      journalNote('preset-delete', { name }, null, `preset ${name} deleted`);
    },
  };
  // The array check (POST /api/array-check): its calibration is saved into the array file and applied live.
  let fileCalibration = loaded.geometry.calibration;
  const arrayCheck = createArrayCheckController({
    runner: new ArrayCheckRunner({ subscribe: (s) => bus.subscribe(s, 'array-check'), channels, sampleRateHz: fs, positions: () => geometry.positions, speedOfSoundMps: config.engine.speedOfSoundMps, bandHz: () => eng.params.bandHz }),
    arrayPath,
    fileLabel: basename(arrayPath),
    fileCalibration: () => fileCalibration,
    memberDelaysUs: geometry.inputs?.some((i) => i.offsetUs) ? memberDelaysUs(geometry.inputs, channels) : null,
    write: async (cal) => void (fileCalibration = (await updateArrayFile(arrayPath, { calibration: cal })).calibration),
    // From the next hop, on an empty covariance (the one held was formed without it); dashboards get a fresh hello.
    apply: (cal) => {
      // Status, the hello and the sidecars of recordings started from now on describe the calibration in force.
      geometry.calibration = cal;
      for (const e of [eng, chain?.engine]) e?.setCalibration(cal);
      for (const e of [eng, chain?.engine]) e?.resetCovariance();
      live.broadcastJson(hello());
    },
    journal: (before, after, summary) => journalNote('calibration', before, after, summary),
  });
  // Access checks shared by the REST routes and the WebSocket upgrades (http/access.ts).
  const originPolicy = new OriginPolicy({ host: config.server.host, allowedHosts: config.server.allowedHosts, allowedOrigins: config.server.allowedOrigins });
  const accessStats = createAccessStats();
  const authFailures = new AuthFailureLimiter({ perS: config.access.authFailureRatePerS, burst: config.access.authFailureBurst });
  const upgradeAuth = createUpgradeAuth({
    token: config.server.token,
    openStatus: config.access.openStatus,
    originPolicy,
    accessStats,
    authFailures,
    paths: { [config.ingest.websocket.path]: 'control', [config.outputs.streamPath]: 'listen', [config.hub.path]: 'read', [`${config.hub.path}/compare`]: 'read' },
  });
  const app = buildApp({
    status,
    originPolicy,
    accessStats,
    authFailures,
    serialStats,
    logger: opts.logger,
    token: config.server.token,
    openStatus: config.access.openStatus,
    rateLimit: config.access.controlRatePerS > 0 ? { perS: config.access.controlRatePerS, burst: config.access.controlBurst } : null,
    landmarks,
    sectors,
    levels: monitor.levels(),
    rules: { store: rules, events: (from, to, rule) => events.list(from, to, rule), unit: () => events.unit },
    clipsDir: resolvePath(config.outputs.dir, 'clips'),
    processing: {
      get: () => eng.params,
      apply: (next) => applyParams(next, 'processing'),
      derived,
      reset: () => {
        eng.resetCovariance();
        journalNote('reset', null, null, 'covariance emptied');
      },
    },
    beams: {
      list: () => eng.beams,
      add: (az, el, method) => {
        const b = eng.addBeam(az, el, method);
        journalNote('beam-add', null, b, `beam ${b.id} at ${az}° (${method})`);
        noteBeamChange('add', b.id, null, beamNote(b.id));
        return b;
      },
      remove: (id) => {
        const before = eng.beams.find((b) => b.id === id) ?? null;
        const was = before ? beamNote(id) : null;
        const r = eng.removeBeam(id);
        if (was) noteBeamChange('remove', id, was, null);
        if (before) journalNote('beam-remove', before, null, `beam ${id} removed`);
        return r;
      },
      update: (id, patch) => {
        const before = eng.beams.find((b) => b.id === id) ?? null;
        const was = before ? beamNote(id) : null;
        const after = eng.updateBeam(id, patch);
        if (after !== null) noteBeamChange('update', id, was, beamNote(id));
        // No beam of that id: nothing changed, nothing to journal (the route answers 404).
        if (after !== null) journalNote('beam-update', before ? { ...before } : null, after, `beam ${id}: ${diffSummary(before, after)}`);
        return after;
      },
      latencyS: () => eng.beamLatencyS,
    },
    channels: {
      channels,
      levels: () => meters.levels(),
      setMasked: (masked) => {
        const active = Array.from({ length: channels }, (_, c) => !masked.includes(c));
        const before = meters.masked.flatMap((m, c) => (m ? [c] : []));
        inputMask.setUser(active);
        meters.masked = active.map((a) => !a);
        journalNote('mask', { masked: before }, { masked: [...masked].sort((a, b) => a - b) });
      },
    },
    recording: {
      status: () => {
        const st = recorder.status();
        // Duration on the stream's clock (the raw track's, else the beams'); free space of the recordings' disk.
        const track = st.tracks.raw ?? st.tracks.beams;
        const frames = track ? track.frames : 0;
        return { ...st, raw: recordRaw, beams: recordBeams, durationS: frames > 0 && track?.sampleRateHz ? frames / track.sampleRateHz : 0, freeBytes: outputsFreeBytes(), streamOut: streamOut.stats() };
      },
      start: async (r) => {
        const st = await recorder.start({
          dir: resolvePath(config.outputs.dir),
          dirLabel: folderLabel(config.outputs.dir),
          minFreeBytes: config.outputs.minFreeBytes,
          prefix: 'nullsteer',
          encoding: r.encoding,
          rotateSeconds: r.rotateSeconds ?? undefined,
          rotateBytes: r.rotateBytes ?? undefined,
          meta: { array: { name: geometry.name, positions: geometry.positions, ...(geometry.calibration ? { calibration: geometry.calibration } : {}) }, params: eng.params as unknown as Record<string, unknown>, source: { kind: config.source.kind, speedOfSoundMps: config.engine.speedOfSoundMps } },
        });
        recordRaw = r.raw;
        recordBeams = r.beams;
        beamChannelsKey = '';
        if (r.beams) recorder.addTrack('beams', { encoding: r.encoding });
        recordingStartSeq = journalNote('recording-start', null, { raw: r.raw, beams: r.beams, encoding: r.encoding }, `recording started (${r.encoding})`).seq;
        return { ...st, raw: recordRaw, beams: recordBeams };
      },
      stop: async () => {
        // Idle (or already stopping): the recorder answers, ERR_REC_NOT_RECORDING or the pending stop's status.
        if (!recorder.recording) return recorder.stop();
        const st = await recorder.stop();
        await recordingStopped(st);
        return st;
      },
    },
    input: {
      describe: () => {
        const streams = inputs ? inputs.streams() : [];
        return { source: config.source.kind, waiting: false, ...(inputs ? inputs.selection(performance.now(), streams) : {}), streams, channelsOut: inputMask.inputOut };
      },
      selectStream: (id) => {
        try {
          inputs?.selectStream(id);
          if (!inputs) throw new InputChoiceError('fixed', 'the input is the built-in simulator, not chosen by stream');
        } catch (e) {
          if (!(e instanceof InputChoiceError)) throw e;
          if (e.kind === 'unknown') throw new HttpError('ERR_HTTP_UNKNOWN_STREAM', { streamId: id, seen: e.seen.length ? e.seen.join(', ') : 'none' });
          throw new HttpError('ERR_HTTP_INPUT_FIXED', { detail: e.message });
        }
        return { ...inputs!.selection(), streams: inputs!.streams() };
      },
    },
    session,
    compare,
    arrayCheck,
    metrics: () => metrics.render(),
    staticDir: CLIENT_DIST,
  });
  await app.ready();
  const wsIngest = inputs?.wsIngest ?? null;
  attachUpgrades(app.server as Server, wsIngest ? [wsIngest, live, compareLive, streamOut] : [live, compareLive, streamOut], upgradeAuth.check);

  let httpPort = 0;
  try {
    await app.listen({ host: config.server.host, port: config.server.httpPort });
    httpPort = (app.server.address() as { port: number }).port;
    await inputs?.listen();
    udp = inputs?.udp ?? null;
  } catch (e) {
    await inputs?.close();
    await app.close();
    await eng.close();
    throw e;
  }
  const cl = config.cluster;
  if (cl.natsUrl) {
    const url = dashboardUrl(config.server.host, httpPort);
    edge = new EdgePublisher({ ...cl, natsUrl: cl.natsUrl, sampleRateHz: fs, pose: loaded.geometry.pose ?? null, describe: () => ({ arrayName: geometry.name, channels, load: (eng.status() as { load: number }).load, dashboardUrl: url }), estimateAgeMs: () => meanAgeS(eng.params.lambda, { fftSize: eng.fftSize, hopSamples: eng.hop, sampleRateHz: fs }) * 1000, ...(config.simulator.scene !== null && config.source.kind === 'simulator' ? { utcOfRow: (i: number) => sampleIndexUtcMs(i, fs) } : {}) });
    journal.onRecord = (e) => edge?.journal(e);
  }
  sim?.start(bus.publish);

  let closed = false;
  return {
    app,
    bus,
    hub,
    inputs,
    engine: eng,
    live,
    metrics,
    sectors,
    httpPort,
    udpPort: udp ? udp.port : null,
    url: `http://${urlHost(config.server.host)}:${httpPort}`,
    onBlock: (sink: (b: Block) => void) => bus.subscribe(sink),
    status,
    async close() {
      if (closed) return;
      closed = true;
      sim?.stop();
      await inputs?.close();
      if (recorder.recording) await recorder.stop();
      await retention.stop();
      await clips.close();
      await monitor?.close();
      webhooks.close();
      await events.flushed();
      await edge?.close();
      await streamOut.close();
      await live.close();
      await compareLive.close();
      await app.close();
      await eng.close();
      await chain?.close();
    },
  };
}
