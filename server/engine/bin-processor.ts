/**
 * The work one bin worker owns: the covariance of a contiguous range of bins, updated every hop,
 * and on request that range's share of the broadband spectra (sums over its bins). The pool runs
 * one per worker thread; the single-thread reference runs one over all bins. Same code, so the
 * pooled result differs from the reference only by the order of a final sum over workers.
 */
import { CovarianceBank } from '../dsp/covariance.ts';
import { ConventionalTracker } from '../dsp/fast/conventional-tracker.ts';
import { FastMvdrScanner } from '../dsp/fast/mvdr-scan.ts';
import type { LoadingSpec } from '../dsp/loading.ts';
import { SpectrumScanner } from '../dsp/spectrum.ts';
import { SteeringTable, type DirectionGrid } from '../dsp/steering.ts';
import { beamResponse, BeamWeights, createWeightResult } from '../dsp/weights.ts';

export interface BinProcessorOptions {
  positions: [number, number, number][];
  /** Frequencies of this processor's bins, Hz. */
  freqsHz: Float64Array;
  grid: DirectionGrid;
  speedOfSoundMps: number;
  /** Snapshots are multiplied by this before use (2/N: one bin's power in full-scale units). */
  snapshotScale: number;
  /**
   * Use the fast paths (WebAssembly MVDR scan, conventional spectrum tracked per snapshot); false
   * runs the plain float64 kernels, which are the reference the fast paths are tested against.
   */
  fast?: boolean;
  /**
   * With `fast`: 'f32' (default) runs the MVDR scan's bins that are within the stated error bound
   * (mvdr-scan.ts float32RelativeBound ≤ FLOAT32_RELATIVE_LIMIT) and the conventional tracker's
   * inner products in single precision (f32x4, twice the directions per instruction; errors
   * derived in mvdr-scan.ts and conventional-tracker.ts); 'f64' keeps the fast kernels in float64.
   */
  precision?: 'f64' | 'f32';
  /**
   * How the fast path forms the conventional spectrum. 'tracker': per snapshot (O(M·D) per bin and
   * hop, conventional-tracker.ts); 'rows': per row from the covariance (O(M²·D/2) per bin and row,
   * FastMvdrScanner.conventional; needs precision 'f32'); 'auto' (default): rows while more than
   * M'/2 hops pass between rows, the tracker again below 0.4·M' — the break-even measured with
   * bench/kernels.ts (W32-2D: rows 3.3 ms against 4.9 ms of tracking per row of 31 bins).
   */
  conventional?: 'auto' | 'tracker' | 'rows';
}

export const SCAN_CONVENTIONAL = 1;
export const SCAN_MVDR = 2;
export const SCAN_NORMALISE = 4;

export class BinProcessor {
  #tracker: ConventionalTracker | null = null;
  #fastMvdr: FastMvdrScanner | null = null;

  /** A processor with its fast kernels compiled (when opts.fast). */
  static async create(opts: BinProcessorOptions): Promise<BinProcessor> {
    const p = new BinProcessor(opts);
    if (opts.fast) await p.#buildFast();
    return p;
  }

  async #buildFast(): Promise<void> {
    const table = this.#table;
    const precision = this.#opts.precision ?? 'f32';
    const [tracker, mvdr] = await Promise.all([
      ConventionalTracker.create(table, 0, table.bins, precision),
      FastMvdrScanner.create(table, 0, table.bins, { precision }),
    ]);
    if (table !== this.#table) return; // a newer grid won the race; it builds its own
    // Synchronous from here: no hop runs between seeding and installing.
    tracker.setMask(this.#active);
    // The bank's own weight state: the tracker continues its recursion from there (a tracker made
    // for a new grid has seen none of the bank's updates, and hops left out vary λ).
    if (this.bank.updates > 0) tracker.seedFrom(this.bank, this.bank.weightSum);
    this.#tracker = tracker;
    this.#fastMvdr = mvdr;
  }

  #active: boolean[];

  readonly channels: number;
  readonly bins: number;
  #grid: DirectionGrid;
  #table: SteeringTable;
  #scanner: SpectrumScanner;
  readonly bank: CovarianceBank;
  readonly #opts: BinProcessorOptions;
  #conv: Float64Array;
  #mvdr: Float64Array;

  constructor(opts: BinProcessorOptions) {
    this.#opts = opts;
    this.channels = opts.positions.length;
    this.#active = Array(this.channels).fill(true);
    this.bins = opts.freqsHz.length;
    this.bank = new CovarianceBank(this.channels, this.bins);
    this.#grid = opts.grid;
    this.#table = this.#makeTable(opts.grid);
    this.#scanner = new SpectrumScanner(this.#table);
    this.#conv = new Float64Array(this.bins * opts.grid.count);
    this.#mvdr = new Float64Array(this.bins * opts.grid.count);
    this.#singular = new Uint8Array(this.bins);
  }

  #makeTable(grid: DirectionGrid): SteeringTable {
    return new SteeringTable({ positions: this.#opts.positions, grid, freqsHz: this.#opts.freqsHz, speedOfSoundMps: this.#opts.speedOfSoundMps });
  }

  get directions(): number {
    return this.#grid.count;
  }

  /** A new direction grid; the covariance is kept (it does not depend on the grid). */
  async setGrid(grid: DirectionGrid): Promise<void> {
    this.#grid = grid;
    this.#table = this.#makeTable(grid);
    this.#scanner = new SpectrumScanner(this.#table);
    this.#conv = new Float64Array(this.bins * grid.count);
    this.#mvdr = new Float64Array(this.bins * grid.count);
    // Until the new fast kernels are ready the plain ones serve the new grid.
    this.#tracker = null;
    this.#fastMvdr = null;
    if (this.#opts.fast) await this.#buildFast();
  }

  /**
   * One hop: scale this processor's bins of the snapshot in place, then update the covariance.
   * @param snap exactly this processor's bins of one bin-major snapshot (2·M·bins doubles; a view
   *   into the shared ring, made once per slot)
   */
  hop(snap: Float64Array, lambda: number): void {
    const s = this.#opts.snapshotScale;
    for (let i = 0; i < snap.length; i++) snap[i] *= s;
    this.bank.update(snap, lambda);
    if (!this.#rows) this.#tracker?.update(snap, lambda);
    this.#hopsSinceScan++;
  }

  /** True while the conventional spectrum is formed per row (the tracker is not fed meanwhile). */
  #rows = false;
  #hopsSinceScan = 0;

  /** Whether the conventional spectrum is formed per row now (see BinProcessorOptions.conventional). */
  get conventionalPerRow(): boolean {
    return this.#rows;
  }

  /** Whether per-row conventional spectra are possible: the single-precision fast scanner and a tracker. */
  #rowsPossible(): boolean {
    return this.#fastMvdr !== null && this.#fastMvdr.precision === 'f32' && this.#tracker !== null;
  }

  /**
   * After a scan: picks per-row or tracked conventional spectra for the next interval from the hops
   * that passed since the last scan. Going back to the tracker hands it this scan's per-row values.
   */
  #chooseConventional(convFresh: boolean): void {
    const hops = this.#hopsSinceScan;
    this.#hopsSinceScan = 0;
    const mode = this.#opts.conventional ?? 'auto';
    const possible = this.#rowsPossible();
    const m = this.bank.activeChannels.length;
    let rows = this.#rows;
    if (!possible || mode === 'tracker') rows = false;
    else if (mode === 'rows') rows = true;
    else if (!rows && hops > 0.5 * m) rows = true;
    else if (rows && hops < 0.4 * m) rows = false;
    if (this.#rows && !rows && this.#tracker !== null) {
      if (!convFresh) (this.#fastMvdr as FastMvdrScanner).conventional(this.bank, this.#conv);
      this.#tracker.adopt(this.bank, this.#conv);
    }
    this.#rows = rows;
  }

  /**
   * This range's share of the broadband spectra: for each direction the sum over its bins of P(θ, b)
   * (divided by the bin's maximum when normalising). The combiner adds the shares of all workers.
   * @param conv, mvdr length ≥ D; written when the flag asks for that method
   * @param deltaOut optional, the loading level per bin
   */
  scan(flags: number, loading: LoadingSpec, conv: Float64Array, mvdr: Float64Array, deltaOut?: Float64Array): void {
    const D = this.#grid.count;
    const B = this.bins;
    const wantConv = (flags & SCAN_CONVENTIONAL) !== 0;
    const wantMvdr = (flags & SCAN_MVDR) !== 0;
    const rows = this.#rows && this.#rowsPossible();
    const tracker = !rows && this.#tracker !== null && this.#tracker.consistent ? this.#tracker : null;
    // The fast MVDR scan needs a look direction for a WNG floor; the plain scan finds it itself.
    const fastMvdr = loading.mode === 'wng' ? null : this.#fastMvdr;
    const plainConv = wantConv && !rows && tracker === null;
    const plainMvdr = wantMvdr && fastMvdr === null;
    // Bins whose R + δI does not factor (no signal at all, or too few snapshots unloaded) get MVDR
    // power 0 and are counted, instead of ending the worker.
    const singular = this.#singular;
    singular.fill(0);
    if (plainConv || plainMvdr) {
      this.#scanner.scan(this.bank, { loading }, { conventional: plainConv ? this.#conv : null, mvdr: plainMvdr ? this.#mvdr : null, loadingDelta: deltaOut, singular });
    }
    if (wantConv && tracker !== null) this.#conv.set(tracker.power);
    // Per row: the conventional form in the same pass as the MVDR scan (one gather per bin).
    const convWithMvdr = wantConv && rows && wantMvdr && fastMvdr !== null;
    if (wantConv && rows && !convWithMvdr) (this.#fastMvdr as FastMvdrScanner).conventional(this.bank, this.#conv);
    if (wantMvdr && fastMvdr !== null) fastMvdr.scan(this.bank, loading, this.#mvdr, deltaOut, null, singular, convWithMvdr ? this.#conv : null);
    if (wantMvdr) for (let b = 0; b < B; b++) this.singularBins += singular[b];
    const normalise = (flags & SCAN_NORMALISE) !== 0;
    if (wantConv) sumBins(conv, this.#conv, B, D, normalise);
    if (wantMvdr) sumBins(mvdr, this.#mvdr, B, D, normalise);
    // A row never carries a non-finite value: a bin whose spectra are not finite is left out of
    // this scan, counted, and the covariance of this range restarts (the estimate is unusable).
    if ((wantConv && !allFinite(conv, D)) || (wantMvdr && !allFinite(mvdr, D))) {
      for (let b = 0; b < B; b++) {
        const o = b * D;
        if ((wantConv && !allFinite(this.#conv.subarray(o, o + D), D)) || (wantMvdr && !allFinite(this.#mvdr.subarray(o, o + D), D))) {
          this.nonFiniteBins++;
          this.#conv.fill(0, o, o + D);
          this.#mvdr.fill(0, o, o + D);
        }
      }
      if (wantConv) sumBins(conv, this.#conv, B, D, normalise);
      if (wantMvdr) sumBins(mvdr, this.#mvdr, B, D, normalise);
      this.reset();
      this.covarianceResets++;
      this.#hopsSinceScan = 0;
      return;
    }
    this.#chooseConventional(wantConv && rows);
  }

  /** MVDR bins scanned in single precision (within the error bound) so far, by this grid's scanner. */
  get float32Bins(): number {
    return this.#fastMvdr?.float32Bins ?? 0;
  }

  /** Bins left MVDR power 0 because R + δI did not factor, over every scan so far. */
  singularBins = 0;
  /** Bins whose spectra were not finite and were left out of their scan, so far. */
  nonFiniteBins = 0;
  /** Restarts of this range's covariance after a non-finite scan. */
  covarianceResets = 0;
  #singular: Uint8Array = new Uint8Array(0);

  /** Test hook: make bin 0's covariance (and its tracked power) not finite, as corrupted memory would. */
  poison(): void {
    this.bank.data.fill(Number.NaN, 0, 2 * this.channels * this.channels);
    if (this.#tracker) this.#tracker.seedFrom(this.bank, this.bank.weightSum);
  }

  /**
   * Every beam's share over this range's bins: for beam i, out[i·(D+1) + d] = Σ_b |w_bᴴ v_b(θ_d)|²
   * and out[i·(D+1) + D] = Σ_b WNG_b (linear). The combiner divides by the band's bin count.
   * With `weightsOut`, also each beam's weights per bin (2·M doubles, interleaved complex).
   */
  scanBeams(beams: readonly { lookIndex: number; method: 'mvdr' | 'delay-and-sum' }[], loading: LoadingSpec, out: Float64Array, weightsOut?: Float64Array, weightStride = 0): void {
    const D = this.#grid.count;
    const M = this.channels;
    if (this.#weights === null || this.#weightsTable !== this.#table) {
      this.#weights = new BeamWeights(this.#table);
      this.#weightsTable = this.#table;
      this.#w = new Float64Array(2 * M);
      this.#resp = new Float64Array(D);
    }
    const res = this.#weightResult;
    for (let i = 0; i < beams.length; i++) {
      const o = i * (D + 1);
      out.fill(0, o, o + D + 1);
      const look = Math.min(beams[i].lookIndex, D - 1);
      for (let b = 0; b < this.bins; b++) {
        this.#weights.compute(this.#w, beams[i].method, this.bank, b, look, loading, res);
        // Weights for beam i, bin b at weightsOut[i·weightStride + b·2M] (the engine's audio path).
        if (weightsOut) weightsOut.set(this.#w, i * weightStride + b * 2 * M);
        beamResponse(this.#resp, this.#w, this.#table, b);
        for (let d = 0; d < D; d++) out[o + d] += this.#resp[d];
        out[o + D] += Math.pow(10, res.wngDb / 10);
      }
    }
  }

  #weights: BeamWeights | null = null;
  #weightsTable: SteeringTable | null = null;
  #w = new Float64Array(0);
  #resp = new Float64Array(0);
  readonly #weightResult = createWeightResult();

  setMask(active: ArrayLike<boolean>): void {
    this.bank.setMask(active);
    this.#active = Array.from(active, Boolean);
    if (this.#tracker) {
      this.#tracker.setMask(active);
      // Per row, the tracker is not fed: it is handed the spectrum when tracking resumes.
      if (this.bank.updates > 0 && !this.#rows) this.#tracker.seedFrom(this.bank, this.bank.weightSum);
    }
  }

  reset(): void {
    this.bank.reset();
    this.#tracker?.reset();
  }
}

function allFinite(x: Float64Array, n: number): boolean {
  for (let i = 0; i < n; i++) if (!(x[i] - x[i] === 0)) return false;
  return true;
}

/** out[d] = Σ_b perBin[b·D + d] (each bin over its maximum when normalising). */
export function sumBins(out: Float64Array, perBin: Float64Array, bins: number, directions: number, normalise: boolean): void {
  const D = directions;
  out.fill(0, 0, D);
  for (let b = 0; b < bins; b++) {
    const o = b * D;
    let scale = 1;
    if (normalise) {
      let mx = 0;
      for (let d = 0; d < D; d++) if (perBin[o + d] > mx) mx = perBin[o + d];
      scale = mx > 0 ? 1 / mx : 0;
    }
    for (let d = 0; d < D; d++) out[d] += perBin[o + d] * scale;
  }
}
