/**
 * The live engine: blocks → STFT written straight into a shared ring → bin workers (covariance per
 * bin every hop; spectra at the display rate) → combiner (broadband spectra in dB, peaks) → rows.
 *
 * The main thread does O(M·N log N) per hop (the STFT) and O(W·D) per row (adding the workers'
 * shares); never O(M²·bins). Parameters change at the next hop; a band or grid change re-plans the
 * workers (new steering tables, empty covariance). When the workers fall behind, the shedder thins
 * their work in the order of DESIGN.md §4; a full ring never blocks ingest: the hop is skipped and
 * counted (the forced form of covariance decimation).
 */
import type { SpectrumRow } from '../../shared/messages.ts';
import type { ArrayGeometry, Block } from '../../shared/types.ts';
import { ChannelCorrection } from '../dsp/calibration.ts';
import { bandBinsOf, MultiChannelStft } from '../dsp/stft.ts';
import { directionGrid, type DirectionGrid } from '../dsp/steering.ts';
import { SCAN_CONVENTIONAL, SCAN_MVDR, SCAN_NORMALISE } from './bin-processor.ts';
import { ParamError, type ProcessingParams, needsReplan } from './params.ts';
import { PlanError, planCost, planFields, RING_SLOTS, type PlanBudget, type PlanDemand } from './plan-budget.ts';
import { BeamAudio, type BeamAudioHop } from './beam-audio.ts';
import { BeamSet, type BeamState } from './beam-set.ts';
import { BinPool } from './pool.ts';
import { coarserGrid as coarser, gridMessage, peakFinderFor, type Plan } from './plan-layout.ts';
import { percentiles, slowestDone, slowestWorker, workerFigures } from './plan-progress.ts';
import { combineSpectrum } from './row-combiner.ts';
import { acceptRemotePart, commitRemote, preparePlan } from './remote-parts.ts';
import type { RemoteBins } from '../cluster/remote-bins.ts';
import type { Part } from '../cluster/remote-wire.ts';
import { publicText } from '../public-text.ts';
import { CTRL_DONE, CTRL_WRITE, FLAG_BEAMS, FLAG_RESET, MAX_BEAMS, META_FLAGS, META_LAMBDA, META_SAMPLE, META_SCAN_SEQ, META_STRIDE, RESULT_SLOTS, resultStride, STATS_STRIDE, writeLoadingMeta, type FromWorker } from './protocol.ts';
import { DEFAULT_SHED_POLICY, LoadShedder, shedEffect, type ShedPolicy } from './shedding.ts';

export { RING_SLOTS };
/** How long the workers get to build a new plan before the change fails (the old plan goes on). */
export const PLAN_TIMEOUT_MS = 20_000;
const LATENCY_HISTORY = 2048;
/** How many covariance restarts status() lists. */
const RESTART_LOG = 16;
/** A remote worker that joins is taken into the plan at most this often (a re-plan restarts every bin's covariance). */
export const JOIN_REPLAN_MS = 3000;

/** One replaced worker's bins, restarted from an empty covariance at `sampleIndex` (status). */
export interface CovarianceRestart {
  worker: number;
  firstBin: number;
  bins: number;
  /** One past the last sample of the latest hop published before the restart (-1: none yet). */
  sampleIndex: number;
  at: string;
  /** Why, when not a replaced local thread (worker −1: the whole band, re-planned). */
  reason?: string;
}
/**
 * A row as the engine emits it: the dashboard's SpectrumRow (shared/messages.ts) with the dB spectra
 * as float32, plus the linear float64 powers and the latency.
 */
export interface EngineRow extends SpectrumRow {
  /** The same spectra as linear float64 powers (band power; mean of normalised bins when normalised). */
  conventionalPower: Float64Array | null;
  mvdrPower: Float64Array | null;
  /** Last sample of the hop handed to the engine → row ready, ms. */
  latencyMs: number;
  /** Some bins are missing: a remote part did not answer by the deadline (counted in status). */
  partial: boolean;
}

/** A scan requested and not yet emitted. */
interface PendingScan {
  count: number;
  /** Per part: 1 once its share is in the result slot. */
  got: Uint8Array;
  arrivalMs: number;
  /** When the hop that asked for it was published (the remote deadline runs from here). */
  requestMs: number;
  sampleIndex: number;
  flags: number;
  scanMs: number;
  due: number[];
  beamIds: number[];
  directions: number;
}

export interface EngineOptions {
  geometry: ArrayGeometry;
  sampleRateHz: number;
  params: ProcessingParams;
  workers: number;
  speedOfSoundMps: number;
  onRow: (row: EngineRow) => void;
  /** Called when the grid the rows use changes (re-plan or shedding). */
  onGrid?: (grid: DirectionGrid) => void;
  onError?: (message: string) => void;
  /** One hop of steered-beam audio (every hop while beams exist; see beam-audio.ts). */
  onBeamAudio?: (hop: BeamAudioHop) => void;
  /** Every hop's snapshot after the beams (band bins at their places; read it before returning): monitoring's meters. */
  onHopSnapshot?: (snapshot: Float64Array, offset: number, hopStart: number) => void;
  shedPolicy?: ShedPolicy;
  /** false runs the plain float64 kernels in the workers (the reference); default true. */
  fastKernels?: boolean;
  /**
   * The plan memory shared with the process's other engines; a plan that does not fit is refused
   * (PlanError) before it is built. Absent: no budget (offline tools), only the workers' own caps.
   */
  budget?: PlanBudget;
  /**
   * Remote bin workers on a broker (server/cluster/remote-bins.ts), connected by the caller; the
   * engine owns it from here (closes it). Absent: local threads only.
   */
  remote?: RemoteBins;
  /** Deadline for the workers to build a new plan, ms (default PLAN_TIMEOUT_MS). */
  planTimeoutMs?: number;
  /** false disables load shedding (benchmarks measure the unshed engine). */
  shedding?: boolean;
  peakThresholdDb?: number;
  maxPeaks?: number;
}


export class Engine {
  readonly opts: EngineOptions;
  readonly channels: number;
  #params: ProcessingParams;
  #pool: BinPool;
  #stft: MultiChannelStft;
  #plan!: Plan;
  #epoch = 0;
  #active: boolean[];
  #shedder: LoadShedder;
  #shedTimer: NodeJS.Timeout | null = null;
  #lastBusy: number[] = [];
  #lastWindowMs = performance.now();
  #nextScanSample = -1;
  #scanSeq = 0;
  #pending = new Map<number, PendingScan>();
  #dueBeams: number[] = [];
  #pendingReset = false;
  #decimCounter = 0;
  /** Value of `hops` when a hop was last published to the workers; −1 before the first. */
  #lastPublishedHop = -1;
  #arrivalMs = 0;
  #replanning: Promise<void> | null = null;
  /** pushAsync waiting for a result slot: called when a row is collected. */
  #resultWaiters: (() => void)[] = [];
  #closed = false;
  // Figures for status.
  hops = 0;
  hopsSkipped = 0;
  hopsDecimated = 0;
  rows = 0;
  scansDropped = 0;
  /** Scan requests put off to a later hop because every result slot was still waiting to be read. */
  scansDeferred = 0;
  /** Memory of the plan in force (plan-budget.ts), bytes. */
  #planBytes = 0;
  /** Values of a row found not finite by the combiner and written as no power (should stay 0). */
  nonFiniteValues = 0;
  #stftMs = 0;
  #combineMs = 0;
  readonly #latency = new Float64Array(LATENCY_HISTORY);
  /** Per row: the slowest worker's scan time, i.e. the wall time of one pooled spectrum update. */
  readonly #scanWall = new Float64Array(LATENCY_HISTORY);
  #latencyCount = 0;
  #expected: number | null = null;
  /** One past the last sample of the latest published hop (-1 before the first). */
  #lastHopEnd = -1;
  /** Bins whose covariance started over because their worker was replaced (most recent last). */
  #restartLog: CovarianceRestart[] = [];
  covarianceRestarts = 0;

  private constructor(opts: EngineOptions) {
    this.opts = opts;
    this.channels = opts.geometry.positions.length;
    this.#params = opts.params;
    this.#stft = new MultiChannelStft(this.channels, opts.params.fftSize);
    this.#active = Array(this.channels).fill(true);
    this.#shedder = new LoadShedder(opts.shedPolicy ?? DEFAULT_SHED_POLICY, () => this.#lastHopEnd);
    const size = Math.max(1, Math.min(opts.workers, this.#bandBins(opts.params).count));
    this.#remote = opts.remote ?? null;
    this.#remote?.attach({ onPart: (part) => this.#onRemotePart(part), onMembership: (reason, lost) => this.#onMembership(reason, lost) });
    this.#pool = new BinPool(size, {
      onScanned: (m) => this.#onScanned(m),
      onError: (i, message, replaced) => {
        const r = replaced ? this.#plan?.ranges[i] : undefined;
        if (r) this.#noteRestart({ worker: i, firstBin: this.#plan.startBin + r.start, bins: r.count });
        opts.onError?.(`bin worker ${i} ${replaced ? 'failed and was replaced' : 'reported an error'}: ${message.split('\n')[0]}`);
      },
    });
  }

  static async create(opts: EngineOptions): Promise<Engine> {
    const e = new Engine(opts);
    try {
      // Held as the re-plan in progress: a remote worker joining meanwhile waits for it.
      await (e.#replanning = e.#replan(opts.params));
      e.#replanning = null;
    } catch (err) {
      await e.#pool.close();
      await e.#remote?.close();
      throw err;
    }
    if (e.#remote) {
      e.#deadlineTimer = setInterval(() => e.#checkDeadlines(), 20);
      e.#deadlineTimer.unref();
    }
    if (opts.shedding !== false) {
      e.#shedTimer = setInterval(() => e.#shedTick(), e.#shedder.policy.windowMs);
      e.#shedTimer.unref();
    }
    return e;
  }

  /** Hop of the STFT in force, samples (N/2). */
  get hop(): number {
    return this.#stft.hop;
  }

  get fftSize(): number {
    return this.#stft.fftSize;
  }

  get params(): ProcessingParams {
    return this.#params;
  }

  get grid(): DirectionGrid {
    return this.#plan.grid;
  }

  get shedStep(): number {
    return this.#shedder.step;
  }

  #bandBins(p: ProcessingParams) {
    return this.#stft.bandBins(p.bandHz[0], p.bandHz[1], this.opts.sampleRateHz);
  }

  /** The memory the plan for `p` would take (plan-budget.ts), for this engine's array and pool. */
  planDemand(p: ProcessingParams, directions = directionGrid(p.grid).count): PlanDemand {
    const shape = { channels: this.channels, fftSize: p.fftSize, bandHz: p.bandHz, sampleRateHz: this.opts.sampleRateHz, directions, workers: this.#pool.size, fast: this.opts.fastKernels !== false };
    return { owner: this, shape, cost: planCost(shape) };
  }

  /**
   * Build the plan for `p` and switch to it: sized against the budget first, then built by the
   * workers while the plan in force keeps running, then switched to in one step (a new transform
   * size brings its own front end, installed at the same moment). On any failure nothing changes.
   * @throws PlanError (too large, refused by a worker, not built in time), ParamError (no bin in the band)
   */
  async #replan(p: ProcessingParams, reason?: string): Promise<void> {
    const fs = this.opts.sampleRateHz;
    const M = this.channels;
    const band = bandBinsOf(p.fftSize, p.bandHz[0], p.bandHz[1], fs);
    if (band.count < 1) throw new ParamError('bandHz', `${p.bandHz[0]}–${p.bandHz[1]} Hz holds no FFT bin at N = ${p.fftSize} (bins are ${(fs / p.fftSize).toFixed(2)} Hz apart)`);
    const baseGrid = directionGrid(p.grid);
    const fast = this.opts.fastKernels !== false;
    const { shape, cost } = this.planDemand(p, baseGrid.count);
    const fields = planFields(this.#plan ? this.#params : null, p);
    this.opts.budget?.check(this, shape, cost, fields);
    const stft = p.fftSize === this.#stft.fftSize ? this.#stft : new MultiChannelStft(M, p.fftSize);
    // The WebAssembly transform where the runtime has it (fft.js otherwise); the same spectra.
    if (!stft.accelerated) await stft.accelerate();
    const coarsening = shedEffect(this.#shedder.step).gridCoarsening;
    const grid = directionGrid(coarser(p.grid, coarsening));
    let built: Awaited<ReturnType<typeof preparePlan>>;
    try {
      const input = { band, fftSize: stft.fftSize, sampleRateHz: fs, positions: this.opts.geometry.positions, grid, baseGrid, speedOfSoundMps: this.opts.speedOfSoundMps, active: this.#active, fast, beams: this.#beams.specs(grid), finder: peakFinderFor(grid, p.grid.azimuthDeg.stepDeg, this.opts) };
      built = await preparePlan({ input, nextEpoch: () => ++this.#epoch, pool: this.#pool, remote: this.#remote, previous: this.#plan, timeoutMs: this.opts.planTimeoutMs ?? PLAN_TIMEOUT_MS });
    } catch (e) {
      throw e instanceof PlanError ? new PlanError(e.kind, `${fields}: ${e.message}`) : e;
    }
    const { plan } = built;
    const W = plan.ranges.length;
    if (this.#closed) return;
    // From here on synchronous: no hop runs between the switch of front end, plan and parameters.
    if (stft !== this.#stft) {
      // A new transform size: a new front end; the stream continues on the same clock.
      this.#stft = stft;
      this.#expected = null;
      this.#nextScanSample = -1;
    }
    this.#plan = plan;
    this.#params = p;
    this.#pending.clear();
    this.#lastBusy = Array(W).fill(0);
    this.#pool.commit(plan.epoch);
    if (this.#remote) {
      commitRemote(this.#remote, plan, built.members, built.considered, this.#pool.size, M);
      this.replans++;
      if (reason) {
        // Every bin starts from an empty covariance in the new plan (the bias-corrected start).
        this.#lastReplan = { at: new Date().toISOString(), reason };
        this.#noteRestart({ worker: -1, firstBin: band.startBin, bins: band.count, reason });
      }
    }
    this.#planBytes = cost.totalBytes;
    this.opts.budget?.hold(this, cost.totalBytes);
    // Per-channel calibration, undone on the band's bins of each slot before anyone reads them.
    const bandFreqs = Array.from({ length: band.count }, (_, k) => ((band.startBin + k) * fs) / this.#stft.fftSize);
    this.#correction = ChannelCorrection.create(this.opts.geometry.calibration, M, (this.#bandFreqs = bandFreqs));
    this.#correctionOffset = 2 * M * band.startBin;
    // Workers and beams read only the band's bins of a slot: only those are formed.
    this.#stft.setOutput(plan.ring, (hopStart) => (this.#slotOffset = this.#slotFor(hopStart)), band);
    // Beam audio follows the band and FFT size; weights arrive with the next beam scan.
    this.#audio = new BeamAudio({ channels: this.channels, fftSize: this.#stft.fftSize, band, sampleRateHz: fs });
    // Mask and beams may have changed while the workers built the plan: send them for the new epoch.
    this.setMask(this.#active);
    this.#sendBeams();
    if (shedEffect(this.#shedder.step).gridCoarsening !== coarsening) this.#applyGrid(shedEffect(this.#shedder.step).gridCoarsening);
    else this.opts.onGrid?.(grid);
  }

  /** Decide where the STFT writes the next hop: a free ring slot, or the trash slot. */
  #slotFor(_hopStart: number): number {
    const p = this.#plan;
    const dec = shedEffect(this.#shedder.step).covarianceDecimation;
    this.#decimCounter = (this.#decimCounter + 1) % dec;
    // A hop is kept for a scan only when the scan can be requested (a result slot is free): under
    // sustained overload every hop is overdue, and counting each as due would decimate none.
    const scanDue = (this.#nextScanSample < 0 || _hopStart + this.#stft.fftSize >= this.#nextScanSample) && this.#pending.size < RESULT_SLOTS - 1;
    if (this.#decimCounter !== 0 && !scanDue) {
      this.#skip = 'decimated';
      return RING_SLOTS * p.slotDoubles;
    }
    const slowest = slowestDone(p);
    if (p.writeSeq - slowest >= RING_SLOTS || this.#forcedSkips > 0) {
      if (this.#forcedSkips > 0) this.#forcedSkips--;
      this.#skip = 'full';
      return RING_SLOTS * p.slotDoubles;
    }
    this.#skip = null;
    return (p.writeSeq % RING_SLOTS) * p.slotDoubles;
  }

  #skip: 'full' | 'decimated' | null = null;
  /** Calibration of the band's bins (dsp/calibration.ts), null when all channels are nominal. */
  #correction: ChannelCorrection | null = null;
  #correctionOffset = 0;
  #bandFreqs: number[] = [];
  /** A new calibration (array check), effective from the next hop; the caller may also reset the covariance. */
  setCalibration(cal: ArrayGeometry['calibration']): void {
    this.#correction = ChannelCorrection.create(cal, this.channels, this.#bandFreqs);
    this.opts.geometry.calibration = cal;
  }
  #forcedSkips = 0;

  /** Test hook: the next n hops find the ring full, as under overload (they are skipped). */
  skipHopsAsIfFull(n: number): void {
    this.#forcedSkips = n;
  }

  // ---- steered beams: weights and responses computed by the workers on the scans they are due ----
  readonly #beams = new BeamSet();
  #beamScan = 0;
  #audio!: BeamAudio;
  #slotOffset = 0;

  #sendBeams(): void {
    const p = this.#plan;
    this.#audio.sync(this.#beams.list.map((b) => b.id));
    for (const b of this.#beams.list) this.#audio.setOutput(b.id, b.gainDb, b.limiter);
    const specs = this.#beams.specs(p.grid);
    this.#pool.updatePlans((pl) => (pl.beams = specs));
    this.#pool.broadcast({ type: 'beams', epoch: p.epoch, beams: specs });
    this.#remote?.control({ type: 'beams', beams: specs });
  }

  /** Steer a new beam (look direction snapped to the nearest grid direction for its response). */
  addBeam(azimuthDeg: number, elevationDeg: number, method: 'mvdr' | 'delay-and-sum'): BeamState {
    const b = this.#beams.add(azimuthDeg, elevationDeg, method);
    this.#sendBeams();
    return b;
  }

  /** Change a beam live: look direction and method reach the workers at their next batch. */
  updateBeam(id: number, patch: Parameters<BeamSet['update']>[1]): BeamState | null {
    const b = this.#beams.update(id, patch);
    if (!b) return null;
    this.#sendBeams();
    this.#audio.setOutput(id, b.gainDb, b.limiter);
    return b;
  }

  /** A beam's smoothed weights on its last hop (band-bin layout), or null: monitoring's meters. */
  beamWeights(id: number): Float64Array | null {
    return this.#audio.weightsOf(id);
  }

  /** The band's bins, the ones snapshots, beams and weights cover. */
  get band(): { startBin: number; count: number } {
    return this.#audio.opts.band;
  }

  /** Delay of the beam audio behind the input, seconds (WOLA latency). */
  get beamLatencyS(): number {
    return this.#audio.latencyS;
  }

  removeBeam(id: number): boolean {
    if (!this.#beams.remove(id)) return false;
    this.#sendBeams();
    return true;
  }

  get beams(): readonly BeamState[] {
    return this.#beams.list;
  }

  #onHop = (out: Float64Array, hopStart: number): void => {
    this.hops++;
    this.#correction?.apply(out, this.#slotOffset + this.#correctionOffset);
    // Beam audio first, from the snapshot as written (before any worker scales its bins in place).
    const audio = this.#audio.process(out, this.#slotOffset, hopStart);
    if (audio) this.opts.onBeamAudio?.(audio);
    this.opts.onHopSnapshot?.(out, this.#slotOffset, hopStart);
    if (this.#skip === 'full') {
      this.hopsSkipped++;
      return;
    }
    if (this.#skip === 'decimated') {
      this.hopsDecimated++;
      return;
    }
    const p = this.#plan;
    const params = this.#params;
    const fs = this.opts.sampleRateHz;
    const hopEnd = hopStart + this.#stft.fftSize; // one past the frame's last sample
    this.#lastHopEnd = hopEnd;
    const slot = p.writeSeq % RING_SLOTS;
    const o = slot * META_STRIDE;
    let flags = 0;
    if (this.#pendingReset) {
      flags |= FLAG_RESET;
      this.#pendingReset = false;
    }
    if (this.#nextScanSample < 0) this.#nextScanSample = hopEnd;
    // A scan is requested only while a result slot is free; else it waits for a later hop.
    if (hopEnd >= this.#nextScanSample && this.#pending.size < RESULT_SLOTS - 1) {
      if (params.methods.includes('conventional')) flags |= SCAN_CONVENTIONAL;
      if (params.methods.includes('mvdr')) flags |= SCAN_MVDR;
      if (params.normalise) flags |= SCAN_NORMALISE;
      const due = this.#beams.list.length > 0 ? this.#beams.due(this.#beamScan++) : [];
      if (due.length > 0) flags |= FLAG_BEAMS;
      this.#dueBeams = due;
      const period = fs / (params.spectrumRateHz / shedEffect(this.#shedder.step).rateDivisor);
      this.#nextScanSample = Math.max(this.#nextScanSample + period, hopEnd + 1);
      const seq = this.#scanSeq++;
      p.meta[o + META_SCAN_SEQ] = seq;
      this.#pending.set(seq, { count: 0, got: new Uint8Array(p.ranges.length), arrivalMs: this.#arrivalMs, requestMs: performance.now(), sampleIndex: hopEnd - 1, flags, scanMs: 0, due: this.#dueBeams, beamIds: [], directions: -1 });
    } else if (hopEnd >= this.#nextScanSample) {
      this.scansDeferred++;
    }
    p.meta[o + META_SAMPLE] = hopStart;
    // Hops left out (decimated, or the ring full) keep the time constant: λ per published hop
    // becomes λ^k, k the hops since the last published one. The floor keeps λ in (0, 1) after a
    // long stall (the memory is then effectively restarted).
    const k = this.#lastPublishedHop < 0 ? 1 : this.hops - this.#lastPublishedHop;
    this.#lastPublishedHop = this.hops;
    p.meta[o + META_LAMBDA] = k === 1 ? params.lambda : Math.max(1e-12, Math.pow(params.lambda, k));
    p.meta[o + META_FLAGS] = flags;
    writeLoadingMeta(p.meta, o, params.loading);
    p.writeSeq++;
    // Remote parts take their bins now (the slot is then free for them) and send at scan hops.
    if (p.ranges.length > this.#pool.size) {
      this.#remote!.onHop(p.ring, this.#slotOffset, p.meta, o, p.writeSeq - 1, (flags & 3) !== 0);
      for (let w = this.#pool.size; w < p.ranges.length; w++) Atomics.store(p.ctrl, CTRL_DONE + w, p.writeSeq);
    }
    Atomics.store(p.ctrl, CTRL_WRITE, p.writeSeq);
    Atomics.notify(p.ctrl, CTRL_WRITE);
  };

  /** Feed one block of the stream (live: never waits; a full ring skips hops and counts them). */
  push(block: Block): void {
    this.#pushFrames(block, 0, block.frames);
  }

  /** Frames [from, from + k) of a block (planar, block.frames per channel) into the STFT. */
  #pushFrames(block: Block, from: number, k: number): void {
    if (this.#closed) return;
    if (block.channels !== this.channels) throw new RangeError(`block has ${block.channels} channels, the engine ${this.channels}`);
    const first = block.sampleIndex + from;
    if ((block.discontinuity && from === 0) || (this.#expected !== null && first !== this.#expected)) {
      this.#stft.reset();
      this.#nextScanSample = -1;
    }
    this.#expected = first + k;
    this.#arrivalMs = performance.now();
    const t0 = this.#arrivalMs;
    this.#stft.push(block.data, k, first, this.#onHop, block.frames, from);
    this.#stftMs += performance.now() - t0;
  }

  /**
   * Feed a block and wait while the ring or the result slots are full (offline runs and
   * benchmarks: no hop is skipped, no scan delayed). The block goes in as runs of frames that are
   * sure to find room: at most (free ring slots − 2) hops and (free result slots − 2) scan periods
   * each, read in place from the block. The rows are the same as for live pushes with room.
   */
  async pushAsync(block: Block): Promise<void> {
    const n = block.frames;
    let s = 0;
    while (s < n) {
      const k = Math.min(n - s, await this.#roomFrames(n - s));
      this.#pushFrames(block, s, k);
      s += k;
    }
  }

  /** Frames that can be pushed now without a hop finding the ring full or a scan no result slot. */
  #framesThatFit(): { frames: number; ringLimited: boolean; inFlight: boolean } {
    const p = this.#plan;
    const slowest = slowestDone(p);
    // k frames complete at most ⌈k/hop⌉ hops and request at most ⌈k/period⌉ + 1 scans.
    const ringFrames = (RING_SLOTS - 3 - (p.writeSeq - slowest)) * this.hop;
    const period = this.opts.sampleRateHz / (this.#params.spectrumRateHz / shedEffect(this.#shedder.step).rateDivisor);
    const resultFrames = Math.floor((RESULT_SLOTS - 3 - this.#pending.size) * period);
    return { frames: Math.max(0, Math.min(ringFrames, resultFrames)), ringLimited: ringFrames <= resultFrames, inFlight: slowest < p.writeSeq };
  }

  /** Wait until at least `want` frames fit (see #framesThatFit); resolves with how many fit. */
  async #roomFrames(atMost: number): Promise<number> {
    for (;;) {
      if (this.#closed) return atMost; // the push is a no-op
      // Never more than half the ring or all the result slots can take, so the wait ends.
      const period = this.opts.sampleRateHz / (this.#params.spectrumRateHz / shedEffect(this.#shedder.step).rateDivisor);
      const want = Math.max(1, Math.min(atMost, (RING_SLOTS / 2) * this.hop, Math.floor((RESULT_SLOTS - 3) * period)));
      if (this.#replanning) {
        await this.#replanning.catch(() => {});
        continue;
      }
      const fit = this.#framesThatFit();
      if (fit.frames >= want) return fit.frames;
      if (fit.ringLimited) {
        // Hops are in flight (the ring is not empty): wait for the slowest worker to finish one.
        const p = this.#plan;
        const worker = slowestWorker(p);
        const r = Atomics.waitAsync(p.ctrl, CTRL_DONE + worker, Atomics.load(p.ctrl, CTRL_DONE + worker), 100);
        if (r.async) await r.value;
        continue;
      }
      // Results are read on this thread's event loop: let it turn until one is collected.
      const got = await new Promise<boolean>((resolve) => {
        const t = setTimeout(() => resolve(false), 50);
        this.#resultWaiters.push(() => {
          clearTimeout(t);
          resolve(true);
        });
      });
      // Scans orphaned by a worker restart never complete: with nothing in flight, go on.
      if (!got && !this.#framesThatFit().inFlight) return Math.max(fit.frames, Math.min(want, this.hop));
    }
  }

  /** Resolve when every published hop is processed and every scan requested so far has its row. */
  async drain(timeoutMs = 30_000): Promise<void> {
    const until = performance.now() + timeoutMs;
    while (performance.now() < until) {
      const p = this.#plan;
      const slowest = slowestDone(p);
      if (slowest >= p.writeSeq && this.#pending.size === 0) return;
      await new Promise((r) => setTimeout(r, 1));
    }
    throw new Error('engine did not drain in time');
  }

  #onScanned(m: Extract<FromWorker, { type: 'scanned' }>): void {
    const p = this.#plan;
    if (m.epoch !== p.epoch) return;
    const pend = this.#pending.get(m.scanSeq);
    if (!pend || pend.got[m.workerIndex]) return;
    pend.got[m.workerIndex] = 1;
    pend.scanMs = Math.max(pend.scanMs, m.scanMs);
    pend.directions = m.directions;
    if (m.beams.length > 0) pend.beamIds = m.beams;
    if (++pend.count === p.ranges.length) this.#emit(m.scanSeq, pend, false);
  }

  /** A remote part's answer: into the results where a local worker would write it, then as theirs. */
  #onRemotePart(part: Part): void {
    if (acceptRemotePart(this.#plan, part, this.#pool.size, this.#pending.has(part.scanSeq), this.#remote!, this.channels)) {
      this.#onScanned({ type: 'scanned', epoch: part.epoch, workerIndex: part.part, scanSeq: part.scanSeq, resultSlot: part.scanSeq % RESULT_SLOTS, directions: part.directions, scanMs: part.scanMs, beams: part.beamIds });
    }
  }

  /**
   * Scans whose local parts are in and whose remote parts are past the deadline go out partial
   * (flagged, counted); the silent parts are told to the remote side, which drops a worker silent
   * for longer. A late local thread is never cause for a partial row: it is behind, not gone.
   */
  #checkDeadlines(): void {
    const remote = this.#remote;
    const p = this.#plan;
    const L = this.#pool.size;
    if (!remote || !p || p.ranges.length <= L) return;
    const now = performance.now();
    for (const [seq, pend] of [...this.#pending]) {
      if (now - pend.requestMs < remote.opts.deadlineMs) break;
      if (!this.#pending.has(seq) || pend.got.subarray(0, L).includes(0)) continue;
      for (let w = L; w < p.ranges.length; w++) if (!pend.got[w]) remote.missed(w);
      this.partialRows++;
      this.#emit(seq, pend, true);
    }
  }

  #emit(seq: number, pend: PendingScan, partial: boolean): void {
    const p = this.#plan;
    this.#pending.delete(seq);
    for (const r of this.#resultWaiters.splice(0)) r();
    // Older scans still waiting will never complete in order: drop them.
    for (const k of [...this.#pending.keys()]) {
      if (k < seq) {
        this.#pending.delete(k);
        this.scansDropped++;
      }
    }
    const t0 = performance.now();
    const D = pend.directions;
    const grid = p.grid;
    if (D !== grid.count) return; // a grid change crossed this scan
    const r = seq % RESULT_SLOTS;
    const R = p.resultDirections;
    const W = p.ranges.length;
    const norm = (pend.flags & SCAN_NORMALISE) !== 0;
    const nonFinite = () => this.nonFiniteValues++;
    // Beams need every bin's weights: a partial scan leaves them as they were.
    if ((pend.flags & FLAG_BEAMS) !== 0 && !partial) {
      const slotBase = (w: number) => (w * RESULT_SLOTS + r) * resultStride(R, p.weightDoubles);
      this.#beams.combine(pend.beamIds, p.results, (w) => slotBase(w) + 2 * R, W, D, p.bins, pend.due);
      this.#audio.setWeights(pend.beamIds, p.results, (w) => slotBase(w) + 2 * R + MAX_BEAMS * (R + 1), p.weightDoubles, p.ranges, pend.due);
    }
    const conv = (pend.flags & SCAN_CONVENTIONAL) !== 0 ? combineSpectrum(p, r, 0, D, norm, pend.got, nonFinite) : null;
    const mvdr = (pend.flags & SCAN_MVDR) !== 0 ? combineSpectrum(p, r, 1, D, norm, pend.got, nonFinite) : null;
    const now = performance.now();
    this.#combineMs += now - t0;
    const latencyMs = now - pend.arrivalMs;
    this.#latency[this.#latencyCount % LATENCY_HISTORY] = latencyMs;
    this.#scanWall[this.#latencyCount++ % LATENCY_HISTORY] = pend.scanMs;
    this.rows++;
    this.opts.onRow({
      seq,
      sampleIndex: pend.sampleIndex,
      emittedAtMs: Date.now(),
      shedStep: this.#shedder.step,
      normalised: norm,
      partial,
      nAz: grid.nAz,
      nEl: grid.nEl,
      conventionalDb: conv ? conv.db : null,
      mvdrDb: mvdr ? mvdr.db : null,
      conventionalPower: conv ? conv.power : null,
      mvdrPower: mvdr ? mvdr.power : null,
      peaks: { conventional: conv ? conv.peaks : [], mvdr: mvdr ? mvdr.peaks : [] },
      latencyMs,
    });
  }

  #shedTick(): void {
    const p = this.#plan;
    const now = performance.now();
    const dt = now - this.#lastWindowMs;
    this.#lastWindowMs = now;
    let busy = 0;
    for (let w = 0; w < p.ranges.length; w++) {
      const b = p.stats[w * STATS_STRIDE];
      busy = Math.max(busy, (b - (this.#lastBusy[w] ?? 0)) / dt);
      this.#lastBusy[w] = b;
    }
    const slowest = slowestDone(p);
    const backlog = (p.writeSeq - slowest) / RING_SLOTS;
    const before = shedEffect(this.#shedder.step).gridCoarsening;
    if (this.#shedder.update(Math.max(busy, backlog))) {
      const g = shedEffect(this.#shedder.step).gridCoarsening;
      if (g !== before) this.#applyGrid(g);
    }
  }

  #applyGrid(k: number): void {
    const p = this.#plan;
    const grid = directionGrid(coarser(this.#params.grid, k));
    const msg = gridMessage(grid);
    this.#pool.updatePlans((pl) => (pl.grid = msg));
    this.#pool.broadcast({ type: 'grid', epoch: p.epoch, grid: msg });
    this.#remote?.control({ type: 'grid', grid: msg });
    p.grid = grid;
    p.finder = peakFinderFor(grid, this.#params.grid.azimuthDeg.stepDeg, this.opts);
    this.#sendBeams();
    this.opts.onGrid?.(grid);
  }

  /** Apply validated parameters: at the next hop, or after a re-plan when band or grid change. */
  async setParams(next: ProcessingParams): Promise<ProcessingParams> {
    if (this.#replanning) await this.#replanning;
    if (needsReplan(this.#params, next)) {
      this.#replanning = this.#replan(next);
      try {
        await this.#replanning;
      } finally {
        this.#replanning = null;
      }
    } else {
      this.#params = next;
    }
    return this.#params;
  }

  /** Empty every bin's covariance at the next hop. */
  resetCovariance(): void {
    this.#pendingReset = true;
  }

  /** Include (true) or exclude channels; applied by each worker at its next batch. */
  setMask(active: boolean[]): void {
    if (active.length !== this.channels || !active.some((a) => a)) throw new RangeError(`mask needs ${this.channels} entries with at least one true`);
    this.#active = [...active];
    const p = this.#plan;
    this.#pool.updatePlans((pl) => (pl.active = [...active]));
    this.#pool.broadcast({ type: 'mask', epoch: p.epoch, active: [...active] });
    this.#remote?.control({ type: 'mask', active: [...active] });
  }

  /** Bins that start from an empty covariance (a replaced worker, a re-plan after a remote loss): which, from which sample. */
  #noteRestart(r: Omit<CovarianceRestart, 'sampleIndex' | 'at'>): void {
    this.covarianceRestarts++;
    this.#restartLog.push({ ...r, sampleIndex: this.#lastHopEnd, at: new Date().toISOString() });
    if (this.#restartLog.length > RESTART_LOG) this.#restartLog.shift();
  }

  /**
   * Remote workers came or went: re-plan (a lost worker at once, a new one at most every
   * JOIN_REPLAN_MS). Rows go on from the plan in force meanwhile, partial where its parts are silent.
   */
  #onMembership(reason: string, lost: boolean): void {
    const now = performance.now();
    if (this.#closed || !this.#plan || (!lost && now - this.#lastMembershipMs < JOIN_REPLAN_MS)) return;
    if (this.#replanning) {
      if (lost) this.#replanAgain = reason;
      return;
    }
    this.#lastMembershipMs = now;
    const run = this.#replan(this.#params, reason);
    this.#replanning = run;
    run
      .catch((e) => this.opts.onError?.(`re-plan after "${reason}" failed: ${publicText(e)}`))
      .finally(() => {
        if (this.#replanning === run) this.#replanning = null;
        const again = this.#replanAgain;
        this.#replanAgain = null;
        if (again) this.#onMembership(again, true);
      });
  }

  #lastMembershipMs = -Infinity;
  #replanAgain: string | null = null;
  #remote: RemoteBins | null = null;
  #deadlineTimer: NodeJS.Timeout | null = null;
  /** Rows emitted with a remote part missing (partial). */
  partialRows = 0;
  /** Plans built while remote workers are enabled, and the last one a membership change caused. */
  replans = 0;
  #lastReplan: { at: string; reason: string } | null = null;

  /** Test hook: end worker i's thread from outside (a crash, not a reported error). */
  killWorker(i: number): void {
    this.#pool.kill(i);
  }

  /** Test hook: worker i refuses the next plan with `message` ('refuse'), or never answers it ('stall'). */
  faultNextPlan(i: number, mode: 'refuse' | 'stall', message = `injected plan refusal in worker ${i}`): void {
    this.#pool.faultNextPlan(i, mode, message);
  }

  /** Test hook: corrupt worker i's first bin covariance (not finite), as a memory fault would. */
  poisonWorker(i: number): void {
    this.#pool.send(i, { type: 'poison' });
  }

  /** Test hook: make worker i throw at its next hop (to prove replacement). */
  injectWorkerFault(i: number): void {
    this.#pool.send(i, { type: 'fault', message: `injected fault in worker ${i}` });
  }

  /** Row latency (last sample of the hop in → row out), ms, over the last rows. */
  latencyPercentiles(): { p50: number; p99: number; count: number } {
    return percentiles(this.#latency, Math.min(this.#latencyCount, LATENCY_HISTORY));
  }

  /** Wall time of one pooled spectrum update (the slowest worker's share), ms, over the last rows. */
  scanPercentiles(): { p50: number; p99: number; count: number } {
    return percentiles(this.#scanWall, Math.min(this.#latencyCount, LATENCY_HISTORY));
  }

  /** Forget latency and scan-time history (benchmarks: measure one phase only). */
  clearTimings(): void {
    this.#latencyCount = 0;
  }

  status(): Record<string, unknown> {
    const p = this.#plan;
    const W = p.ranges.length;
    const { workers, sum } = workerFigures(p);
    const lat = this.latencyPercentiles();
    const eff = shedEffect(this.#shedder.step);
    return {
      workers: W,
      workerRestarts: this.#pool.restarts,
      workerErrors: this.#pool.errors,
      lastWorkerError: this.#pool.lastError,
      covarianceRestarts: { count: this.covarianceRestarts, recent: [...this.#restartLog] },
      load: this.#shedder.load,
      shed: { step: this.#shedder.step, changes: this.#shedder.changes, history: [...this.#shedder.history], spectrumRateHz: this.#params.spectrumRateHz / eff.rateDivisor, gridCoarsening: eff.gridCoarsening, covarianceDecimation: eff.covarianceDecimation },
      hops: this.hops,
      hopsSkipped: this.hopsSkipped,
      hopsDecimated: this.hopsDecimated,
      rows: this.rows,
      scansDropped: this.scansDropped,
      scansDeferred: this.scansDeferred,
      // Bins of the current plan flagged in scans: MVDR left at 0 because R + δI did not factor (no
      // signal in the bin), or left out as not finite (then that worker's covariance restarted).
      flaggedBins: { ...sum, rowValuesNotFinite: this.nonFiniteValues },
      bins: p.bins,
      directions: p.grid.count,
      planMiB: Math.round(this.#planBytes / 2 ** 20),
      stages: {
        stftMsPerHop: this.hops ? this.#stftMs / this.hops : 0,
        stftTransform: this.#stft.accelerated ? 'wasm-simd' : 'fft.js',
        workerMsPerHop: workers.map((w) => (w.hops ? w.busyMs / w.hops : 0)),
        lastScanMs: workers.map((w) => w.lastScanMs),
        combineMsPerRow: this.rows ? this.#combineMs / this.rows : 0,
      },
      latencyMs: { p50: lat.p50, p99: lat.p99 },
      perWorker: workers,
      ...(this.#remote ? { remote: { ...this.#remote.status(this.#pool.size), partialRows: this.partialRows, replans: this.replans, lastReplan: this.#lastReplan } } : {}),
    };
  }

  async close(): Promise<void> {
    if (this.#closed) return;
    this.#closed = true;
    this.opts.budget?.release(this);
    if (this.#shedTimer) clearInterval(this.#shedTimer);
    if (this.#deadlineTimer) clearInterval(this.#deadlineTimer);
    await Promise.all([this.#pool.close(), this.#remote?.close()]);
  }
}
