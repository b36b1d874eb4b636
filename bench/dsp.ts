/**
 * DSP kernels on the W32 workload of ../shared/DESIGN.md §4 (32-mic ring, radius 0.2 m; fs 48 kHz,
 * N = 512, hop 256; band 300–6000 Hz = 61 bins; azimuth 0–359° in 1° steps): one full spectrum
 * update (every bin, every direction) for MVDR and for the conventional scan, plus the per-hop
 * STFT and covariance costs. For the record: the live engine (threads, fast paths) is measured later.
 */
import { loadGeometry } from '../server/config/array-file.ts';
import { PROJECT_CONFIG_DIR } from '../server/config/load.ts';
import { CovarianceBank } from '../server/dsp/covariance.ts';
import { SpectrumScanner } from '../server/dsp/spectrum.ts';
import { MultiChannelStft } from '../server/dsp/stft.ts';
import { directionGrid, SteeringTable } from '../server/dsp/steering.ts';
import { time } from './util.ts';

export interface DspResult {
  workload: string;
  channels: number;
  bins: number;
  directions: number;
  mvdrUpdateMs: number;
  conventionalUpdateMs: number;
  stftHopMs: number;
  /** The STFT as the engine runs it: WebAssembly SIMD transform, only the band's bins formed. */
  stftFastHopMs: number;
  covarianceHopMs: number;
  /** MVDR spectrum at 20 Hz plus STFT and covariance every hop: core-seconds per second of signal. */
  rtfAt20Hz: number;
}

export async function benchW32Spectrum(): Promise<DspResult> {
  const fs = 48000;
  const N = 512;
  const hop = N / 2;
  const geometry = await loadGeometry(`${PROJECT_CONFIG_DIR}/arrays/ring-32.json`);
  const M = geometry.positions.length;
  const stft = new MultiChannelStft(M, N);
  const band = stft.bandBins(300, 6000, fs);
  const grid = directionGrid({ azimuthDeg: { startDeg: 0, stopDeg: 359, stepDeg: 1 } });
  const freqs = Float64Array.from({ length: band.count }, (_, i) => ((band.startBin + i) * fs) / N);
  const table = new SteeringTable({ positions: geometry.positions, grid, freqsHz: freqs, speedOfSoundMps: 343.2 });
  const bank = new CovarianceBank(M, band.count);
  // Fill the covariance with 4M hops of noise so MVDR sees a well-conditioned sample matrix.
  let seed = 1;
  const rnd = () => ((seed = (seed * 1103515245 + 12345) >>> 0) / 2 ** 32) - 0.5;
  const block = new Float32Array(M * hop);
  const a = 2 * M * band.startBin;
  const b = 2 * M * (band.stopBin + 1);
  const onHop = (s: Float64Array) => bank.update(s.subarray(a, b), 0.99);
  let index = 0;
  const pushHop = () => {
    for (let i = 0; i < block.length; i++) block[i] = rnd();
    stft.push(block, hop, index, onHop);
    index += hop;
  };
  for (let k = 0; k < 4 * M; k++) pushHop();
  const scanner = new SpectrumScanner(table);
  const out = new Float64Array(band.count * grid.count);
  const mvdr = time(() => scanner.scan(bank, { loading: { mode: 'relative', ratio: 0.01 } }, { conventional: null, mvdr: out }), 7);
  const conv = time(() => scanner.scan(bank, { loading: { mode: 'relative', ratio: 0.01 } }, { conventional: out, mvdr: null }), 7);
  // Per-hop costs, STFT separately from the covariance update.
  const hops = 200;
  const noop = () => {};
  for (let i = 0; i < block.length; i++) block[i] = rnd();
  const tStft = time(() => {
    for (let k = 0; k < hops; k++) {
      stft.push(block, hop, index, noop);
      index += hop;
    }
  }, 5);
  const fast = new MultiChannelStft(M, N);
  await fast.accelerate();
  const ring = new Float64Array(fast.snapshotLength);
  fast.setOutput(ring, () => 0, band);
  let fastIndex = 0;
  const tFast = time(() => {
    for (let k = 0; k < hops; k++) {
      fast.push(block, hop, fastIndex, noop);
      fastIndex += hop;
    }
  }, 5);
  const snap = new Float64Array(2 * M * band.count);
  for (let i = 0; i < snap.length; i++) snap[i] = rnd();
  const tCov = time(() => {
    for (let k = 0; k < hops; k++) bank.update(snap, 0.99);
  }, 5);
  const stftHopMs = (tStft.medianS / hops) * 1000;
  const covarianceHopMs = (tCov.medianS / hops) * 1000;
  const hopsPerS = fs / hop;
  return {
    workload: 'W32',
    channels: M,
    bins: band.count,
    directions: grid.count,
    mvdrUpdateMs: mvdr.medianS * 1000,
    conventionalUpdateMs: conv.medianS * 1000,
    stftHopMs,
    stftFastHopMs: (tFast.medianS / hops) * 1000,
    covarianceHopMs,
    rtfAt20Hz: 20 * mvdr.medianS + (hopsPerS * (stftHopMs + covarianceHopMs)) / 1000,
  };
}
