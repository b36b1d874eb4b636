/**
 * Remote bin workers (issue 17) on a real broker (Debian nats-server, started here on a free
 * loopback port and stopped here): two `nullsteer worker` processes share the band with one local
 * thread.
 *
 * The equality bound (derived in docs/remote-workers.md; the perturbation argument is common
 * practice, the steps are ours):
 * - Snapshots travel as float32. Each complex component is rounded once: |x̃ − x| ≤ u|x|
 *   componentwise, u = 2⁻²⁴ (IEEE 754 binary32 round to nearest), so ‖x̃x̃ᴴ − xxᴴ‖₂ ≤ (2u + u²)‖x‖².
 *   The covariance is a convex combination of snapshot outer products (covariance.ts), so
 *   ‖R̃ − R‖₂ ≤ (2u + u²)·tr(R) =: e, and |tr R̃ − tr R| ≤ e.
 * - Conventional, P = vᴴRv/M² with |v_m| = 1: |ΔP| ≤ ‖ΔR‖·‖v‖²/M² ≤ e/M per bin; the row's band sum
 *   is off by at most Σ_b e_b/M.
 * - MVDR, P = min over wᴴv = 1 of wᴴ(R + δI)w with δ = ε·tr(R)/M (relative loading): the loaded
 *   matrices differ by ‖E‖ ≤ e(1 + ε/M); P̃ ≤ P + ‖E‖·‖w‖² and ‖w‖² ≤ P/δ, so
 *   |P̃ − P| ≤ max(P, P̃)·ρ with ρ = (2u + u²)(M/ε + 1)/(1 − 2u − u²), per bin and for the band sum.
 * Both paths run the same float64 kernels; their own rounding adds ~1e-12 relative, covered by a
 * 1e-9 slack.
 */
import { spawn } from 'node:child_process';
import { fileURLToPath } from 'node:url';
import { afterAll, beforeAll, describe, expect, it, vi } from 'vitest';
import { connect } from '@nats-io/transport-node';
import { loadGeometry } from '../../server/config/array-file.ts';
import { MultiChannelStft } from '../../server/dsp/stft.ts';
import { Engine, type EngineRow } from '../../server/engine/engine.ts';
import type { ProcessingParams } from '../../server/engine/params.ts';
import { RemoteWorker } from '../../server/cluster/remote-worker.ts';
import { float32RelativeBound } from '../../server/dsp/fast/mvdr-f32.ts';
import { trackerF32Bound } from '../../server/dsp/fast/conventional-tracker.ts';
import { conventionalRowBound } from '../../server/dsp/fast/mvdr-scan.ts';
import { encodeJson, HopBatchWriter, hopsSubject, partsSubject, workerSubject, type RemotePlan } from '../../server/cluster/remote-wire.ts';
import { RemoteBins } from '../../server/cluster/remote-bins.ts';
import type { Block } from '../../shared/types.ts';
import { natsAvailable, startBroker, type TestBroker } from '../helpers/nats-server.ts';
import { planarBlocks, renderPlaneWaves } from '../helpers/plane-waves.ts';
import { remoteWith, startWorkerProcess, type WorkerProcess } from '../helpers/remote-workers.ts';
import { getStatus, startTestService, waitFor } from '../helpers/service.ts';

vi.setConfig({ testTimeout: 120_000 });

const ARRAYS = new URL('../../config/arrays/', import.meta.url).pathname;
const CLI = fileURLToPath(new URL('../../bin/nullsteer.mjs', import.meta.url));
const FS = 48000;
const N = 512;
const U = 2 ** -24;
const EPS = 0.01;

const params = (over: Partial<ProcessingParams> = {}): ProcessingParams => ({
  lambda: 0.98,
  loading: { mode: 'relative', ratio: EPS },
  bandHz: [500, 4000],
  grid: { azimuthDeg: { startDeg: 0, stopDeg: 355, stepDeg: 5 } },
  methods: ['mvdr', 'conventional'],
  spectrumRateHz: 20,
  normalise: false,
  fftSize: N,
  ...over,
});

async function scene(frames: number) {
  const g = await loadGeometry(`${ARRAYS}ring-24.json`);
  const x = renderPlaneWaves({
    positions: g.positions,
    sampleRateHz: FS,
    frames,
    speedOfSoundMps: 343.2,
    sources: [
      { azimuthDeg: 40, rms: 0.1, loHz: 300, hiHz: 6000, seed: 11 },
      { azimuthDeg: 200, rms: 0.03, loHz: 300, hiHz: 6000, seed: 12 },
    ],
    noiseRms: 0.002,
    noiseSeed: 13,
  });
  return { g, x, blocks: planarBlocks(x, g.positions.length, FS, 1000) };
}

/** Per hop (keyed by the hop's last sample), tr(R_b) of every band bin, with the covariance's own weighting. */
function traces(blocks: Block[], M: number, p: ProcessingParams): Map<number, Float64Array> {
  const stft = new MultiChannelStft(M, N);
  const band = stft.bandBins(p.bandHz[0], p.bandHz[1], FS);
  const T = new Float64Array(band.count);
  const s2 = (2 / N) ** 2;
  let weightSum = 0;
  const out = new Map<number, Float64Array>();
  for (const b of blocks) {
    stft.push(b.data, b.frames, b.sampleIndex, (snap, hopStart) => {
      weightSum = p.lambda * weightSum + (1 - p.lambda);
      const w = (1 - p.lambda) / weightSum;
      for (let k = 0; k < band.count; k++) {
        let e = 0;
        const o = 2 * M * (band.startBin + k);
        for (let i = 0; i < 2 * M; i++) e += snap[o + i] * snap[o + i];
        T[k] = (1 - w) * T[k] + w * e * s2;
      }
      out.set(hopStart + N - 1, Float64Array.from(T));
    });
  }
  return out;
}

let broker: TestBroker;
let workers: WorkerProcess[] = [];

const describeNats = natsAvailable ? describe : describe.skip;

describeNats('remote bin workers on a real broker', () => {
  beforeAll(async () => {
    broker = await startBroker();
    workers = await Promise.all([startWorkerProcess(broker.url, 'hall-east'), startWorkerProcess(broker.url, 'hall-west')]);
  }, 90_000);

  afterAll(async () => {
    await Promise.all(workers.map((w) => w.kill()));
    await broker?.close();
  });

  it.each([
    ['the float64 reference kernels', false],
    ['the fast kernels (each side adds its single-precision kernels\' own bound)', true],
  ])('rows with two remote worker processes equal local processing within the float32-snapshot bound: %s', async (_name, fast) => {
    const { g, blocks } = await scene(32768);
    const M = g.positions.length;
    const p = params();
    const run = async (remote: RemoteBins | undefined, threads: number) => {
      const rows: EngineRow[] = [];
      const e = await Engine.create({ geometry: g, sampleRateHz: FS, params: p, workers: threads, speedOfSoundMps: 343.2, shedding: false, fastKernels: fast, onRow: (r) => rows.push(r), ...(remote ? { remote } : {}) });
      const beam = e.addBeam(40, 0, 'mvdr');
      const status = e.status() as { perWorker: unknown[]; remote?: { workers: { state: string; bins: number }[] } };
      for (const b of blocks) await e.pushAsync(b);
      await e.drain(60_000);
      const beamState = structuredClone(e.beams.find((b) => b.id === beam.id)!);
      const after = e.status() as { perWorker: { scans: number; bins: number }[]; remote?: { partialRows: number } };
      await e.close();
      return { rows, beam: beamState, status, after };
    };
    const local = await run(undefined, 2);
    const remote = await run(await remoteWith(broker.url, 2, { deadlineMs: 60_000, dropMs: 120_000 }), 1);
    // The band (38 bins) over one local thread and both remote workers; each answered every scan.
    expect(remote.status.perWorker).toHaveLength(3);
    expect(remote.status.remote!.workers.filter((w) => w.state === 'active' && w.bins > 0)).toHaveLength(2);
    expect(remote.after.remote!.partialRows).toBe(0);
    expect(remote.after.perWorker.map((w) => w.scans)).toEqual([0, 0, 0].map(() => remote.rows.length));
    expect(remote.rows.map((r) => r.sampleIndex)).toEqual(local.rows.map((r) => r.sampleIndex));
    expect(local.rows.length).toBeGreaterThanOrEqual(12);

    const tr = traces(blocks, M, p);
    const e2 = 2 * U + U * U;
    // With the fast kernels both sides also carry their kernels' own single-precision error
    // (server/dsp/fast: MVDR relative, conventional absolute in units of tr R/M), once each.
    const kMvdr = fast ? float32RelativeBound(M, M, EPS) : 0;
    const kConv = fast ? Math.max(trackerF32Bound(M), conventionalRowBound(M)) : 0;
    const rho = (e2 * (M / EPS + 1)) / (1 - e2) + 2 * kMvdr * (1 + kMvdr);
    let worstConv = 0;
    let worstMvdr = 0;
    let maxRelMvdr = 0;
    let nonZero = 0;
    for (let i = 0; i < local.rows.length; i++) {
      const a = local.rows[i];
      const b = remote.rows[i];
      expect(b.partial).toBe(false);
      const T = tr.get(a.sampleIndex)!;
      let convBound = 0;
      for (const t of T) convBound += ((e2 + 2 * kConv) * t) / M;
      for (let d = 0; d < a.conventionalPower!.length; d++) {
        const c0 = a.conventionalPower![d];
        const c1 = b.conventionalPower![d];
        const m0 = a.mvdrPower![d];
        const m1 = b.mvdrPower![d];
        if (c0 !== c1 || m0 !== m1) nonZero++;
        worstConv = Math.max(worstConv, Math.abs(c1 - c0) / (convBound + 1e-9 * c0));
        worstMvdr = Math.max(worstMvdr, Math.abs(m1 - m0) / ((rho + 1e-9) * Math.max(m0, m1)));
        maxRelMvdr = Math.max(maxRelMvdr, Math.abs(m1 - m0) / m0);
      }
    }
    console.log(`${fast ? 'fast' : 'float64'} kernels, remote vs local: conventional at most ${worstConv.toFixed(4)} of its bound, MVDR ${worstMvdr.toExponential(2)} of its bound (ρ = ${rho.toExponential(2)}, largest relative MVDR difference ${maxRelMvdr.toExponential(2)}); ${nonZero} values differ`);
    expect(nonZero).toBeGreaterThan(0); // the remote path really ran on float32 snapshots
    expect(worstConv).toBeLessThanOrEqual(1);
    expect(worstMvdr).toBeLessThanOrEqual(1);
    // The beam (MVDR toward 40°) from its last scan: WNG and response over the grid, computed by the
    // workers from float32 snapshots. No derived bound here (the first-order bound through the
    // weights' normalisation is κ²-large); measured against local processing, 0.01 dB allowed.
    const b0 = local.beam;
    const b1 = remote.beam;
    let worstDb = Math.abs(b1.wngDb! - b0.wngDb!);
    for (let d = 0; d < b0.responseDb!.length; d++) if (b0.responseDb![d] > -60) worstDb = Math.max(worstDb, Math.abs(b1.responseDb![d] - b0.responseDb![d]));
    console.log(`beam: WNG ${b0.wngDb!.toFixed(3)} dB; largest difference of WNG and response (above −60 dB) ${worstDb.toExponential(2)} dB`);
    expect(b0.updatedAtMs).not.toBeNull();
    expect(worstDb).toBeLessThan(0.01);
  });

  it('messages of an old epoch are ignored and counted, by the worker and by the engine; bad bytes are counted drops', async () => {
    const worker = await RemoteWorker.start({ natsUrl: broker.url, name: 'epoch-check', id: 'epochcheck01' });
    const nc = await connect({ servers: broker.url });
    try {
      const M = 4;
      const plan = (epoch: number): RemotePlan => ({
        v: 1, type: 'plan', engine: 'engineTest01', epoch, part: 1,
        positions: [[0.1, 0, 0], [0, 0.1, 0], [-0.1, 0, 0], [0, -0.1, 0]],
        freqsHz: [1000, 1100], grid: { azimuthDeg: [0, 90, 180, 270], elevationDeg: [0, 0, 0, 0], nAz: 4, nEl: 1 },
        speedOfSoundMps: 343.2, snapshotScale: 2 / 512, active: [true, true, true, true], fast: false, beams: [], firstSeq: 0,
      });
      const batch = (epoch: number, firstSeq: number) => {
        const w = new HopBatchWriter(M, 2, 4);
        w.begin(epoch, 1, firstSeq);
        const meta = Float64Array.from([0, 0.9, 3, firstSeq, 0, 0.01, 0]);
        const snap = Float64Array.from({ length: 2 * M * 2 }, (_, i) => Math.sin(i + firstSeq));
        w.add(meta, 0, snap, 0);
        return w.finish().slice();
      };
      const parts: number[] = [];
      nc.subscribe(partsSubject('engineTest01'), { callback: (_e, m) => void parts.push(m.data.byteLength) });
      for (const epoch of [4, 5]) {
        const reply = JSON.parse(new TextDecoder().decode((await nc.request(workerSubject(worker.id, 'plan'), encodeJson(plan(epoch)), { timeout: 10_000 })).data));
        expect(reply).toEqual({ v: 1, type: 'plan-reply', epoch, ok: true });
      }
      nc.publish(hopsSubject(worker.id, 'engineTest01'), batch(5, 0)); // epoch 5 takes over
      nc.publish(hopsSubject(worker.id, 'engineTest01'), batch(4, 1)); // old: ignored, counted
      nc.publish(hopsSubject(worker.id, 'engineTest01'), batch(5, 1));
      nc.publish(hopsSubject(worker.id, 'engineTest01'), new Uint8Array([1, 2, 3])); // not a batch
      nc.publish(workerSubject(worker.id, 'ctrl'), encodeJson({ v: 1, type: 'mask', engine: 'engineTest01', epoch: 5, active: [true], extra: 1 }));
      await nc.flush();
      await waitFor(() => parts.length >= 2 && (worker.dropped['hops-truncated'] ?? 0) >= 1 && (worker.dropped['ctrl-schema'] ?? 0) >= 1, 10_000, 'worker answers and drops');
      expect(parts).toHaveLength(2);
      expect(worker.oldEpochMessages).toBe(1);
      expect(worker.gaps).toBe(0);

      // The engine side: a part of an epoch before the plan in force.
      const remote = await remoteWith(broker.url, 2);
      const e = await Engine.create({ geometry: await loadGeometry(`${ARRAYS}ring-24.json`), sampleRateHz: FS, params: params(), workers: 1, speedOfSoundMps: 343.2, shedding: false, onRow: () => {}, remote });
      try {
        await e.setParams(params({ bandHz: [600, 4000] })); // a re-plan: a new epoch
        const st = () => (e.status() as { remote: { epoch: number; oldEpochMessages: number; dropped: Record<string, number> } }).remote;
        const epoch = st().epoch;
        const part = new Uint8Array(new ArrayBuffer(80 + 16 * 72));
        const dv = new DataView(part.buffer);
        dv.setUint32(0, 0x5042534e, true);
        dv.setUint16(4, 1, true);
        dv.setUint32(8, epoch - 1, true);
        dv.setUint32(12, 1, true);
        dv.setUint32(24, 72, true);
        nc.publish(partsSubject(remote.engineId), part);
        nc.publish(partsSubject(remote.engineId), new Uint8Array(7));
        await nc.flush();
        await waitFor(() => st().oldEpochMessages >= 1 && (st().dropped['part-truncated'] ?? 0) >= 1, 10_000, 'engine counts');
        expect(st().oldEpochMessages).toBe(1);
      } finally {
        await e.close();
      }
    } finally {
      await nc.close();
      await worker.close();
    }
  });

  it('a remote worker killed mid-run: rows go on (partial, flagged), its bins are re-planned within 2 s of signal, the restart listed', async () => {
    const { rows, e, feed } = await liveWithTwoWorkers();
    try {
      const st = () => e.status() as unknown as RemoteStatus;
      await waitFor(() => rows.filter((r) => !r.partial).length >= 10, 30_000, 'whole rows from three parts');
      expect(st().remote.workers.filter((w) => w.state === 'active')).toHaveLength(2);
      const victim = workers[0];
      const killedAt = feed.pushed();
      await victim.kill();
      await waitFor(() => st().covarianceRestarts.recent.some((r) => r.reason?.includes('lost')), 30_000, 're-plan after the loss');
      const restart = st().covarianceRestarts.recent.find((r) => r.reason?.includes('lost'))!;
      await waitFor(() => rows.some((r) => r.sampleIndex > restart.sampleIndex + FS / 2 && !r.partial), 30_000, 'whole rows after the re-plan');
      const s = st();
      const after = rows.filter((r) => r.sampleIndex > killedAt);
      const gap = largestGap(after);
      const partial = after.filter((r) => r.partial);
      console.log(`killed at sample ${killedAt}; re-planned at ${restart.sampleIndex} (${((restart.sampleIndex - killedAt) / FS).toFixed(2)} s of signal later); ${partial.length} partial rows, largest gap between rows ${(gap / FS).toFixed(3)} s; ${restart.reason}`);
      expect((restart.sampleIndex - killedAt) / FS).toBeLessThanOrEqual(2);
      expect(gap / FS).toBeLessThanOrEqual(2);
      // Flagged: the rows between the loss and the re-plan are partial, counted, and none after.
      expect(s.remote.partialRows).toBe(rows.filter((r) => r.partial).length);
      expect(partial.length).toBeGreaterThan(0);
      expect(partial.every((r) => r.sampleIndex <= restart.sampleIndex + N)).toBe(true);
      expect(restart).toMatchObject({ worker: -1, bins: (s as unknown as { bins: number }).bins });
      expect(s.remote.workers.find((w) => w.name === victim.name)?.state).toBe('lost');
      expect(s.remote.workers.filter((w) => w.state === 'active')).toHaveLength(1);
      expect(s.perWorker).toHaveLength(2);
    } finally {
      await feed.stop();
      await e.close();
    }
    workers[0] = await startWorkerProcess(broker.url, 'hall-north');
  });

  it('a broker restart: the engine falls back to its local threads (said in status), then takes the workers back', async () => {
    const { rows, e, feed } = await liveWithTwoWorkers();
    try {
      const st = () => (e.status() as unknown as RemoteStatus).remote;
      await waitFor(() => rows.length >= 10 && st().mode === 'remote', 30_000, 'rows from three parts');
      await broker.kill();
      const downAt = feed.pushed();
      await waitFor(() => st().mode === 'local-fallback', 30_000, 'fallback to the local threads');
      expect(st().broker).toBe('reconnecting');
      const fallbackRows = rows.length;
      await waitFor(() => rows.length >= fallbackRows + 5 && rows.slice(fallbackRows).every((r) => !r.partial), 30_000, 'whole rows from the local thread alone');
      expect((e.status() as unknown as RemoteStatus).perWorker).toHaveLength(1);
      await broker.start();
      await waitFor(() => st().mode === 'remote' && st().workers.filter((w) => w.state === 'active').length === 2, 60_000, 'the workers taken back');
      const upRows = rows.length;
      await waitFor(() => rows.length >= upRows + 5, 30_000, 'rows after the workers came back');
      expect((e.status() as unknown as RemoteStatus).perWorker).toHaveLength(3);
      expect(st().broker).toBe('connected');
      const after = rows.filter((r) => r.sampleIndex > downAt);
      const gap = largestGap(after);
      console.log(`broker restart: ${st().replans} plans, ${st().partialRows} partial rows, largest gap between rows ${(gap / FS).toFixed(3)} s`);
      expect(gap / FS).toBeLessThanOrEqual(2);
    } finally {
      await feed.stop();
      await e.close();
    }
  });

  it('workers a plan has no bins for do not make the engine re-plan over and over', async () => {
    const remote = await remoteWith(broker.url, 2);
    const e = await Engine.create({ geometry: await loadGeometry(`${ARRAYS}ring-24.json`), sampleRateHz: FS, params: params({ bandHz: [1000, 1100] }), workers: 1, speedOfSoundMps: 343.2, shedding: false, onRow: () => {}, remote });
    try {
      const st = () => e.status() as unknown as RemoteStatus & { bins: number };
      expect(st().bins).toBe(1);
      expect(st().perWorker).toHaveLength(1);
      // Past the join re-plan limit (3 s) twice over: still the first plan.
      await new Promise((r) => setTimeout(r, 6500));
      expect(st().remote.replans).toBe(1);
      expect(st().remote.workers.filter((w) => w.state === 'joining')).toHaveLength(2);
    } finally {
      await e.close();
    }
  });

  it('worker --threads 2: two workers to the engines (NAME/1, NAME/2), each with its own connection; SIGTERM says goodbye', async () => {
    const child = spawn(process.execPath, [CLI, 'worker', '--nats', broker.url, '--threads', '2', '--name', 'rack-b'], { stdio: ['ignore', 'pipe', 'pipe'] });
    const remote = RemoteBins.start({ natsUrl: broker.url, deadlineMs: 250, dropMs: 750 });
    try {
      await remote.ready;
      await waitFor(() => remote.candidates().filter((c) => c.name.startsWith('rack-b/')).length === 2, 30_000, 'rack-b/1 and rack-b/2');
      expect(remote.candidates().map((c) => c.name).filter((n) => n.startsWith('rack-b/')).sort()).toEqual(['rack-b/1', 'rack-b/2']);
      child.kill('SIGTERM');
      await new Promise((r) => child.once('exit', r));
      const st = () => (remote.status(0) as { workers: { name: string; state: string }[] }).workers.filter((w) => w.name.startsWith('rack-b/'));
      await waitFor(() => st().every((w) => w.state === 'lost'), 10_000, 'both said goodbye');
    } finally {
      if (child.exitCode === null) child.kill('SIGKILL');
      await remote.close();
    }
  });

  it('the server: engine.remoteWorkers with cluster.natsUrl takes the workers in (status lists them), and refuses to start without a broker', async () => {
    const svc = await startTestService({ source: { kind: 'simulator' }, engine: { remoteWorkers: true, workers: 1 }, cluster: { natsUrl: broker.url, site: 'hall', node: 'rig-1' } });
    try {
      await waitFor(async () => (await getStatus(svc)).engine.remote?.workers.filter((w: { state: string }) => w.state === 'active').length === 2, 30_000, 'both workers active');
      const st = (await getStatus(svc)).engine;
      expect(st.remote).toMatchObject({ enabled: true, broker: 'connected', mode: 'remote', localThreads: 1 });
      expect(st.perWorker).toHaveLength(3);
      const rows = st.rows;
      await waitFor(async () => (await getStatus(svc)).engine.rows > rows + 10, 30_000, 'rows');
    } finally {
      await svc.close();
    }
    await expect(startTestService({ engine: { remoteWorkers: true } })).rejects.toThrow(/engine\.remoteWorkers: needs cluster\.natsUrl/);
  });
});

interface RemoteStatus {
  perWorker: unknown[];
  covarianceRestarts: { recent: { worker: number; bins: number; sampleIndex: number; reason?: string }[] };
  remote: { mode: string; broker: string; partialRows: number; replans: number; workers: { name: string; state: string; bins: number }[] };
}

/** One local thread and two remote workers (deadline 250 ms, drop 750 ms), fed live on the wall clock. */
async function liveWithTwoWorkers() {
  const { g, x } = await scene(65536);
  const rows: EngineRow[] = [];
  const remote = await remoteWith(broker.url, 2, { deadlineMs: 250, dropMs: 750 });
  const e = await Engine.create({ geometry: g, sampleRateHz: FS, params: params(), workers: 1, speedOfSoundMps: 343.2, shedding: false, onRow: (r) => rows.push(r), remote });
  return { rows, e, feed: paceLive(e, x, g.positions.length) };
}

/** The largest step in sample index between consecutive rows. */
function largestGap(rows: readonly EngineRow[]): number {
  let gap = 0;
  for (let i = 1; i < rows.length; i++) gap = Math.max(gap, rows[i].sampleIndex - rows[i - 1].sampleIndex);
  return gap;
}

/** Feed the engine on the wall clock (live, `push`, never waiting), looping the interleaved signal. */
function paceLive(e: Engine, x: Float32Array, M: number) {
  const frames = x.length / M;
  const BLOCK = 480;
  const t0 = performance.now();
  let pushed = 0;
  const timer = setInterval(() => {
    const due = Math.floor(((performance.now() - t0) / 1000) * FS);
    while (pushed + BLOCK <= due) {
      const data = new Float32Array(M * BLOCK);
      for (let i = 0; i < BLOCK; i++) for (let c = 0; c < M; c++) data[c * BLOCK + i] = x[((pushed + i) % frames) * M + c];
      e.push({ streamId: 0, sampleIndex: pushed, sampleRateHz: FS, channels: M, frames: BLOCK, data, gap: false, discontinuity: false });
      pushed += BLOCK;
    }
  }, 5);
  return {
    pushed: () => pushed,
    stop: async () => clearInterval(timer),
  };
}
