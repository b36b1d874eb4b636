/**
 * `npm run bench:monitor [-- --channels 32 --sectors 8 --hops 20000]`: the main-thread cost of levels per
 * direction (server/monitor/sector-meters.ts) per STFT hop: each sector's beam power per bin from the
 * snapshot and its weights (band-power.ts), weighted and summed (weighted-band-power.ts), and the
 * omnidirectional level, into the 1-s accumulators. A stand-in engine (random weights and snapshots
 * of W32's shape: 32 channels, FFT 512 at 48 kHz, band 300–6000 Hz) so only the meters are timed.
 * Prints µs per hop and the share of one core at 48 kHz / 256-sample hops. A script, not a test.
 */
import { parseArgs } from 'node:util';
import { SectorMeters, type LevelSink, type MeterEngine } from '../server/monitor/sector-meters.ts';
import { SecondLeq } from '../server/monitor/level-stats.ts';

const { values } = parseArgs({ options: { channels: { type: 'string' }, sectors: { type: 'string' }, hops: { type: 'string' } } });
const M = Number(values.channels ?? 32), S = Number(values.sectors ?? 8), HOPS = Number(values.hops ?? 20_000);
const FS = 48_000, N = 512, hop = N / 2;
const startBin = Math.ceil((300 * N) / FS), count = Math.floor((6000 * N) / FS) - startBin + 1;
const grid = { count: 360, nAz: 360, nEl: 1, azimuthDeg: Float64Array.from({ length: 360 }, (_, i) => i), elevationDeg: new Float64Array(360) };
const weights = Float64Array.from({ length: count * 2 * M }, () => Math.random() - 0.5);
let nextId = 1;
const beams: { id: number; azimuthDeg: number; elevationDeg: number; method: 'mvdr' | 'delay-and-sum' }[] = [];
const engine: MeterEngine = {
  channels: M,
  fftSize: N,
  grid,
  get beams() {
    return beams as never;
  },
  band: { startBin, count },
  addBeam: (az, el, method) => {
    const b = { id: nextId++, azimuthDeg: az, elevationDeg: el, method };
    beams.push(b);
    return b as never;
  },
  updateBeam: (id) => (beams.find((b) => b.id === id) ?? null) as never,
  removeBeam: () => true,
  beamWeights: () => weights,
};
let seconds = 0;
const sink = (): LevelSink => new SecondLeq(FS, () => void seconds++);
const meters = new SectorMeters(engine, { sampleRateHz: FS, sink, omniWeighting: 'A' });
meters.setSectors(Array.from({ length: S }, (_, k) => ({ name: `s${k}`, azimuthDeg: [k * 40, k * 40 + 30] as [number, number], method: 'mvdr' as const, weighting: 'A' as const })));
const snapshot = Float64Array.from({ length: (N / 2 + 1) * 2 * M }, () => Math.random() - 0.5);
for (let k = 0; k < 2000; k++) meters.hop(snapshot, 0, k * hop); // warm-up
const t0 = process.hrtime.bigint();
for (let k = 0; k < HOPS; k++) meters.hop(snapshot, 0, (2000 + k) * hop);
const us = Number(process.hrtime.bigint() - t0) / 1000 / HOPS;
const hopsPerS = FS / hop;
console.log(`levels per direction: ${M} channels, ${count} band bins, ${S} sectors + omni: ${us.toFixed(1)} µs per hop, ${((100 * us * hopsPerS) / 1e6).toFixed(2)} % of one core at ${hopsPerS.toFixed(1)} hops/s (${seconds} 1-s values made)`);
