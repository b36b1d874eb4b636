/**
 * The work one bin worker owns: the covariance of a contiguous range of bins, updated every hop,
 * and on request that range's share of the broadband spectra (sums over its bins). The pool runs
 * one per worker thread; the single-thread reference runs one over all bins. Same code, so the
 * pooled result differs from the reference only by the order of a final sum over workers.
 */
import { CovarianceBank } from '../dsp/covariance.ts';
import type { LoadingSpec } from '../dsp/loading.ts';
import { SpectrumScanner } from '../dsp/spectrum.ts';
import { SteeringTable, type DirectionGrid } from '../dsp/steering.ts';

export interface BinProcessorOptions {
  positions: [number, number, number][];
  /** Frequencies of this processor's bins, Hz. */
  freqsHz: Float64Array;
  grid: DirectionGrid;
  speedOfSoundMps: number;
  /** Snapshots are multiplied by this before use (2/N: one bin's power in full-scale units). */
  snapshotScale: number;
}

export const SCAN_CONVENTIONAL = 1;
export const SCAN_MVDR = 2;
export const SCAN_NORMALISE = 4;

export class BinProcessor {
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
    this.bins = opts.freqsHz.length;
    this.bank = new CovarianceBank(this.channels, this.bins);
    this.#grid = opts.grid;
    this.#table = this.#makeTable(opts.grid);
    this.#scanner = new SpectrumScanner(this.#table);
    this.#conv = new Float64Array(this.bins * opts.grid.count);
    this.#mvdr = new Float64Array(this.bins * opts.grid.count);
  }

  #makeTable(grid: DirectionGrid): SteeringTable {
    return new SteeringTable({ positions: this.#opts.positions, grid, freqsHz: this.#opts.freqsHz, speedOfSoundMps: this.#opts.speedOfSoundMps });
  }

  get directions(): number {
    return this.#grid.count;
  }

  /** A new direction grid; the covariance is kept (it does not depend on the grid). */
  setGrid(grid: DirectionGrid): void {
    this.#grid = grid;
    this.#table = this.#makeTable(grid);
    this.#scanner = new SpectrumScanner(this.#table);
    this.#conv = new Float64Array(this.bins * grid.count);
    this.#mvdr = new Float64Array(this.bins * grid.count);
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
    this.#scanner.scan(this.bank, { loading }, { conventional: wantConv ? this.#conv : null, mvdr: wantMvdr ? this.#mvdr : null, loadingDelta: deltaOut });
    const normalise = (flags & SCAN_NORMALISE) !== 0;
    if (wantConv) sumBins(conv, this.#conv, B, D, normalise);
    if (wantMvdr) sumBins(mvdr, this.#mvdr, B, D, normalise);
  }

  setMask(active: ArrayLike<boolean>): void {
    this.bank.setMask(active);
  }

  reset(): void {
    this.bank.reset();
  }
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
