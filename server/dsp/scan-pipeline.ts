/**
 * The whole scan for one array in one place: blocks → STFT → per-bin covariance (recursive with a
 * forgetting factor, or averaged over everything pushed) → conventional and MVDR spectra over a
 * direction grid → broadband spectra in dB → peaks. `nullsteer analyze` runs a file through it; the
 * live engine reuses its parts.
 *
 * Channel levels are tracked too, so a dead channel (silent next to the others) can be found and
 * masked out at scan time without restarting anything.
 */
import type { ArrayGeometry, Block } from '../../shared/types.ts';
import { CovarianceBank } from './covariance.ts';
import type { LoadingSpec } from './loading.ts';
import { PeakFinder, type Peak } from './peaks.ts';
import { combineBroadband, powerToDb, SpectrumScanner, type SpectrumMethod } from './spectrum.ts';
import { ChannelCorrection } from './calibration.ts';
import { MultiChannelStft, type BinRange } from './stft.ts';
import { aliasingCheck, directionGrid, SteeringTable, type AliasingCheck, type AngleRangeDeg, type DirectionGrid } from './steering.ts';
import { lambdaFromTau, tauFromLambda } from './units.ts';

export interface ScanPipelineOptions {
  geometry: ArrayGeometry;
  sampleRateHz: number;
  fftSize: number;
  bandHz: [number, number];
  grid: { azimuthDeg: AngleRangeDeg; elevationDeg?: AngleRangeDeg };
  methods: SpectrumMethod[];
  /** null: covariance averaged over everything pushed; else the forgetting factor per hop. */
  lambda: number | null;
  loading: LoadingSpec;
  speedOfSoundMps: number;
  focusRangeM?: number | null;
  /** Channels excluded by the user (indices). */
  maskedChannels?: number[];
  /** A channel this many dB below the median channel power is flagged dead and excluded; null: never. */
  deadBelowMedianDb?: number | null;
  normalise?: boolean;
  peakThresholdDb?: number;
  maxPeaks?: number;
}

export interface MethodResult {
  /** Broadband spectrum per direction: band power in dBFS (dB re the maximum when normalised). */
  spectrumDb: Float64Array;
  peaks: Peak[];
}

export interface ScanResult {
  grid: DirectionGrid;
  band: BinRange & { loHz: number; hiHz: number };
  snapshots: number;
  lambda: number | null;
  tauS: number | null;
  channelPowerDb: Float64Array;
  deadChannels: number[];
  maskedChannels: number[];
  activeChannels: number[];
  aliasing: AliasingCheck;
  loadingDelta: Float64Array;
  methods: Partial<Record<SpectrumMethod, MethodResult>>;
}

/** Default grid: a line array is symmetric about its axis, so half a turn; anything else a full turn. */
export function defaultGrid(geometry: ArrayGeometry): { azimuthDeg: AngleRangeDeg } {
  return isCollinear(geometry) ? { azimuthDeg: { startDeg: 0, stopDeg: 180, stepDeg: 1 } } : { azimuthDeg: { startDeg: 0, stopDeg: 359, stepDeg: 1 } };
}

function isCollinear(g: ArrayGeometry): boolean {
  const p = g.positions;
  if (p.length < 3) return true;
  const a = p[0];
  let k = 1;
  while (k < p.length && Math.hypot(p[k][0] - a[0], p[k][1] - a[1], p[k][2] - a[2]) < 1e-9) k++;
  if (k === p.length) return true;
  const d = [p[k][0] - a[0], p[k][1] - a[1], p[k][2] - a[2]];
  const n = Math.hypot(d[0], d[1], d[2]);
  for (const q of p) {
    const e = [q[0] - a[0], q[1] - a[1], q[2] - a[2]];
    const cx = e[1] * d[2] - e[2] * d[1];
    const cy = e[2] * d[0] - e[0] * d[2];
    const cz = e[0] * d[1] - e[1] * d[0];
    if (Math.hypot(cx, cy, cz) / n > 1e-6) return false;
  }
  return true;
}

export class ScanPipeline {
  readonly options: ScanPipelineOptions;
  readonly channels: number;
  readonly grid: DirectionGrid;
  readonly band: BinRange & { loHz: number; hiHz: number };
  readonly table: SteeringTable;
  readonly bank: CovarianceBank;
  readonly #stft: MultiChannelStft;
  readonly #scanner: SpectrumScanner;
  readonly #power: Float64Array;
  #samples = 0;
  #snapshots = 0;
  readonly #onHop: (snapshot: Float64Array) => void;

  constructor(opts: ScanPipelineOptions) {
    this.options = opts;
    const M = opts.geometry.positions.length;
    this.channels = M;
    const fs = opts.sampleRateHz;
    const [lo, hi] = opts.bandHz;
    if (!(lo >= 0 && hi > lo && hi <= fs / 2)) throw new RangeError(`band ${lo}–${hi} Hz must satisfy 0 ≤ low < high ≤ fs/2 = ${fs / 2}`);
    if (opts.lambda !== null && !(opts.lambda > 0 && opts.lambda < 1)) throw new RangeError(`lambda ${opts.lambda} must be in (0, 1)`);
    if (opts.methods.length === 0) throw new RangeError('at least one method is needed');
    this.#stft = new MultiChannelStft(M, opts.fftSize);
    const range = this.#stft.bandBins(lo, hi, fs);
    if (range.count < 1) throw new RangeError(`band ${lo}–${hi} Hz holds no FFT bin at N = ${opts.fftSize}, fs = ${fs}`);
    this.band = { ...range, loHz: lo, hiHz: hi };
    this.grid = directionGrid(opts.grid);
    const freqs = new Float64Array(range.count);
    for (let i = 0; i < range.count; i++) freqs[i] = ((range.startBin + i) * fs) / opts.fftSize;
    this.table = new SteeringTable({ positions: opts.geometry.positions, grid: this.grid, freqsHz: freqs, speedOfSoundMps: opts.speedOfSoundMps, focusRangeM: opts.focusRangeM ?? null });
    this.bank = new CovarianceBank(M, range.count);
    this.#scanner = new SpectrumScanner(this.table);
    this.#power = new Float64Array(M);
    for (const c of opts.maskedChannels ?? []) {
      if (!Number.isInteger(c) || c < 0 || c >= M) throw new RangeError(`masked channel ${c} not in 0–${M - 1}`);
    }
    const a = 2 * M * range.startBin;
    const b = 2 * M * (range.stopBin + 1);
    // Scale X by 2/N so one bin's power is in full-scale units and the powers of the one-sided
    // bins add up to the signal's mean power (Parseval; a full-scale sine gives 1/2 = −3 dBFS,
    // white noise of variance σ² gives σ² summed over 0…fs/2).
    const scale = 2 / opts.fftSize;
    const correction = ChannelCorrection.create(opts.geometry.calibration, M, freqs);
    this.#onHop = (snapshot) => {
      const band = snapshot.subarray(a, b);
      correction?.apply(band, 0);
      for (let i = 0; i < band.length; i++) band[i] *= scale;
      if (opts.lambda === null) this.bank.accumulate(band);
      else this.bank.update(band, opts.lambda);
      this.#snapshots++;
    };
  }

  /** Feed one block (planar, the array's channel count). Gap blocks are fed like any other. */
  push(block: Block): void {
    const M = this.channels;
    if (block.channels !== M) throw new RangeError(`block has ${block.channels} channels, the array ${M}`);
    const n = block.frames;
    const x = block.data;
    for (let c = 0; c < M; c++) {
      let s = 0;
      for (let i = c * n, e = (c + 1) * n; i < e; i++) s += x[i] * x[i];
      this.#power[c] += s;
    }
    this.#samples += n;
    this.#stft.push(x, n, block.sampleIndex, this.#onHop);
  }

  get snapshots(): number {
    return this.#snapshots;
  }

  /** Scan what has been pushed and return spectra and peaks per method. */
  result(): ScanResult {
    const o = this.options;
    const M = this.channels;
    if (this.#snapshots === 0) throw new RangeError(`no complete STFT frame yet (needs ${o.fftSize} samples, have ${this.#samples})`);
    if (o.lambda === null) this.bank.finishAverage();
    const powerDb = new Float64Array(M);
    for (let c = 0; c < M; c++) powerDb[c] = this.#power[c] > 0 ? 10 * Math.log10(this.#power[c] / this.#samples) : -300;
    const sorted = Array.from(powerDb).sort((p, q) => p - q);
    const median = sorted[Math.floor((M - 1) / 2)];
    const dead: number[] = [];
    if (o.deadBelowMedianDb !== null && o.deadBelowMedianDb !== undefined) {
      for (let c = 0; c < M; c++) if (powerDb[c] < median - o.deadBelowMedianDb) dead.push(c);
    }
    const masked = [...new Set(o.maskedChannels ?? [])].sort((p, q) => p - q);
    const active = Array.from({ length: M }, (_, c) => !dead.includes(c) && !masked.includes(c));
    this.bank.setMask(active);
    const B = this.band.count;
    const D = this.grid.count;
    const conv = o.methods.includes('conventional') ? new Float64Array(B * D) : null;
    const mvdr = o.methods.includes('mvdr') ? new Float64Array(B * D) : null;
    const delta = new Float64Array(B);
    this.#scanner.scan(this.bank, { loading: o.loading }, { conventional: conv, mvdr, loadingDelta: delta });
    const g = this.grid;
    const finder = new PeakFinder({
      nAz: g.nAz,
      nEl: g.nEl,
      azimuthStepDeg: o.grid.azimuthDeg.stepDeg,
      elevationStepDeg: g.nEl > 1 ? o.grid.elevationDeg!.stepDeg : 0,
      azimuthStartDeg: g.azimuthDeg[0],
      elevationStartDeg: g.elevationDeg[0],
      circularAzimuth: g.nAz * o.grid.azimuthDeg.stepDeg === 360 && g.nAz >= 3,
      thresholdDb: o.peakThresholdDb ?? 3,
      maxPeaks: o.maxPeaks ?? 8,
    });
    const methods: Partial<Record<SpectrumMethod, MethodResult>> = {};
    for (const [name, perBin] of [['mvdr', mvdr], ['conventional', conv]] as const) {
      if (perBin === null) continue;
      const bb = new Float64Array(D);
      combineBroadband(bb, perBin, B, D, o.normalise ?? false);
      // The incoherent average times the bin count is the band's total power: dBFS. (Normalised
      // spectra stay relative: 0 dB where every bin peaks together.)
      if (!o.normalise) for (let d = 0; d < D; d++) bb[d] *= B;
      powerToDb(bb, bb);
      methods[name] = { spectrumDb: bb, peaks: finder.find(bb).map((p) => ({ ...p })) };
    }
    const fs = o.sampleRateHz;
    const hop = o.fftSize / 2;
    return {
      grid: g,
      band: this.band,
      snapshots: this.#snapshots,
      lambda: o.lambda,
      tauS: o.lambda === null ? null : tauFromLambda(o.lambda, hop, fs),
      channelPowerDb: powerDb,
      deadChannels: dead,
      maskedChannels: masked,
      activeChannels: Array.from(this.bank.activeChannels),
      aliasing: aliasingCheck(o.geometry.positions, o.speedOfSoundMps, this.band.hiHz),
      loadingDelta: delta,
      methods,
    };
  }
}

export { lambdaFromTau };
