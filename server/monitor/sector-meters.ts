/**
 * Levels per direction: one steered beam per sector, metered every hop, and the array as one
 * omnidirectional microphone. Indicative levels only (no class-rated meter, no traceable
 * calibration); dBFS unless the array is calibrated.
 *
 * Each sector owns one of the engine's beams (server/engine/beam-set.ts; the same weights, smoothing
 * and audio as a beam steered by hand, so a sector can be listened to and its clips come from the
 * same beam). The beam looks at the strongest grid direction inside the sector in the latest row of
 * the sector's method (MVDR or conventional power); it is re-steered only when another direction of
 * the sector is stronger by more than RESTEER_DB, so a steady source does not make the weights wander.
 * A sector whose beam cannot be made (all MAX_BEAMS in use) says so in status and is not measured.
 *
 * Per hop the beam's output power over the sector's band, each bin weighted by the sector's
 * frequency weighting (A, C or Z), is taken from the hop's snapshot with the weights the beam
 * applied on that hop (band-power.ts |w_kᴴ x_k|² per bin, then weighted-band-power.ts: the weighted
 * sum scaled to a mean square re full scale), and the omnidirectional level likewise from the mean
 * of the channels' powers. Each value is handed to its sink with the span the frame stands for
 * (its middle hop, WeightedBandPower.hopSpanStart). Hops before a beam has weights are not metered
 * (the second is then partly covered, which the 1-s accumulator reports). Nothing is allocated per hop.
 */
import type { DirectionGrid } from '../dsp/steering.ts';
import type { BeamState } from '../engine/beam-set.ts';
import type { WeightingKind } from '../../shared/frequency-weighting.ts';
import { sectorDirections } from '../../shared/sectors.ts';
import { beamBinPowers } from './band-power.ts';
import { WeightedBandPower } from './weighted-band-power.ts';

/** Re-steer a sector's beam when another of its directions is stronger by more than this, dB (chosen). */
export const RESTEER_DB = 1;

export type Weighting = WeightingKind;

/** What a meter needs of a sector (shared/sectors.ts's Sector is one). */
export interface MeteredSector {
  name: string;
  azimuthDeg: [number, number];
  elevationDeg?: [number, number];
  bandHz?: [number, number];
  method: 'mvdr' | 'conventional';
  weighting: Weighting;
}

/** The engine as the meters use it (server/engine/engine.ts). */
export interface MeterEngine {
  readonly channels: number;
  readonly fftSize: number;
  readonly grid: DirectionGrid;
  readonly beams: readonly BeamState[];
  addBeam(azimuthDeg: number, elevationDeg: number, method: 'mvdr' | 'delay-and-sum'): BeamState;
  updateBeam(id: number, patch: { azimuthDeg?: number; elevationDeg?: number; method?: 'mvdr' | 'delay-and-sum' }): BeamState | null;
  removeBeam(id: number): boolean;
  beamWeights(id: number): Float64Array | null;
  readonly band: { startBin: number; count: number };
}

/** The row fields the meters read (EngineRow). */
export interface MeterRow {
  mvdrPower: Float64Array | null;
  conventionalPower: Float64Array | null;
}

/** Where a meter's hop values go: a 1-s accumulator (level-stats.ts SecondLeq). */
export interface LevelSink {
  push(sampleIndex: number, frames: number, meanSquare: number): void;
}

export interface SectorMeterStatus {
  name: string;
  beamId: number | null;
  lookAzimuthDeg: number | null;
  lookElevationDeg: number | null;
  /** Why the sector is not measured, or null. */
  error: string | null;
  hopsMetered: number;
}

export interface SectorMetersOptions {
  sampleRateHz: number;
  /** A sink per sector (by name) and one for the omnidirectional level (name null). */
  sink: (name: string | null) => LevelSink;
  /** Weighting of the omnidirectional level (default A). */
  omniWeighting?: Weighting;
}

interface Meter {
  sector: MeteredSector;
  directions: Int32Array;
  beamId: number | null;
  look: number;
  power: WeightedBandPower | null;
  powerFor: string;
  sink: LevelSink;
  error: string | null;
  hops: number;
}

const NO_LOOK = Object.freeze({ azimuthDeg: null, elevationDeg: null });

export class SectorMeters {
  readonly #engine: MeterEngine;
  readonly #o: SectorMetersOptions;
  #meters: Meter[] = [];
  #omniSink: LevelSink;
  #omni: WeightedBandPower | null = null;
  #omniFor = '';
  #binPower = new Float64Array(0);
  #grid: DirectionGrid | null = null;

  constructor(engine: MeterEngine, o: SectorMetersOptions) {
    this.#engine = engine;
    this.#o = o;
    this.#omniSink = o.sink(null);
  }

  /** Follow the sector list: beams made for new sectors, released for removed ones, re-aimed for changed ones. */
  setSectors(list: readonly MeteredSector[]): void {
    const keep = new Map(this.#meters.map((m) => [m.sector.name, m]));
    const next: Meter[] = [];
    for (const s of list) {
      const old = keep.get(s.name);
      keep.delete(s.name);
      if (old && sameSector(old.sector, s)) {
        next.push(old);
        continue;
      }
      if (old && old.beamId !== null) this.#engine.removeBeam(old.beamId);
      next.push({ sector: { ...s }, directions: new Int32Array(0), beamId: null, look: -1, power: null, powerFor: '', sink: old?.sink ?? this.#o.sink(s.name), error: null, hops: 0 });
    }
    for (const m of keep.values()) if (m.beamId !== null) this.#engine.removeBeam(m.beamId);
    this.#meters = next;
    this.#grid = null; // directions recomputed on the next row
    for (const m of this.#meters) if (m.beamId === null) this.#makeBeam(m);
  }

  #makeBeam(m: Meter): void {
    const g = this.#engine.grid;
    this.#directionsFor(m, g);
    const look = m.directions.length > 0 ? m.directions[0] : -1;
    if (look < 0) {
      m.error = 'no direction of the grid lies in the sector';
      return;
    }
    try {
      const b = this.#engine.addBeam(g.azimuthDeg[look], g.elevationDeg[look], m.sector.method === 'mvdr' ? 'mvdr' : 'delay-and-sum');
      m.beamId = b.id;
      m.look = look;
      m.error = null;
    } catch (e) {
      m.error = `no beam free for it (${(e as Error).message})`;
    }
  }

  #directionsFor(m: Meter, g: DirectionGrid): void {
    m.directions = sectorDirections(m.sector, g.azimuthDeg, g.elevationDeg);
  }

  /** A spectrum row: each sector's beam follows the strongest direction inside it. */
  row(row: MeterRow): void {
    const g = this.#engine.grid;
    if (g !== this.#grid) {
      this.#grid = g;
      for (const m of this.#meters) {
        this.#directionsFor(m, g);
        m.look = -1;
        if (m.beamId === null) this.#makeBeam(m);
      }
    }
    for (const m of this.#meters) {
      if (m.beamId === null || m.directions.length === 0) continue;
      const p = m.sector.method === 'mvdr' ? row.mvdrPower : row.conventionalPower;
      if (!p || p.length !== g.count) continue;
      let best = m.directions[0];
      for (let i = 1; i < m.directions.length; i++) if (p[m.directions[i]] > p[best]) best = m.directions[i];
      if (best === m.look) continue;
      if (m.look >= 0 && !(p[best] > p[m.look] * 10 ** (RESTEER_DB / 10))) continue;
      m.look = best;
      if (!this.#engine.updateBeam(m.beamId, { azimuthDeg: g.azimuthDeg[best], elevationDeg: g.elevationDeg[best] })) {
        m.beamId = null; // removed by hand: made again
        this.#makeBeam(m);
      }
    }
  }

  /** One hop's snapshot (engine onHopSnapshot): every meter's mean square over its weighted band. */
  hop(snapshot: Float64Array, offset: number, hopStart: number): void {
    const e = this.#engine;
    const fs = this.#o.sampleRateHz;
    const { startBin, count } = e.band;
    const key = `${startBin}:${count}:${e.fftSize}`;
    if (this.#binPower.length < count) this.#binPower = new Float64Array(count);
    for (const m of this.#meters) {
      if (m.beamId === null) continue;
      const w = e.beamWeights(m.beamId);
      if (!w || w.length < count * 2 * e.channels) continue;
      if (m.powerFor !== key || !m.power) {
        m.power = new WeightedBandPower({ weighting: m.sector.weighting, fftSize: e.fftSize, sampleRateHz: fs, startBin, count });
        // The sector's own band inside the engine's: bins outside it weigh nothing.
        const [lo, hi] = m.sector.bandHz ?? [0, fs / 2];
        for (let b = 0; b < count; b++) {
          const f = ((startBin + b) * fs) / e.fftSize;
          if (f < lo || f > hi) m.power.factors[b] = 0;
        }
        m.powerFor = key;
      }
      beamBinPowers(snapshot, offset, e.channels, w, startBin, count, this.#binPower);
      m.sink.push(m.power.hopSpanStart(hopStart), m.power.hopSamples, m.power.meanSquare(this.#binPower.subarray(0, count), startBin));
      m.hops++;
    }
    if (this.#omniFor !== key || !this.#omni) {
      this.#omni = new WeightedBandPower({ weighting: this.#o.omniWeighting ?? 'A', fftSize: e.fftSize, sampleRateHz: fs, startBin, count });
      this.#omniFor = key;
    }
    this.#omniSink.push(this.#omni.hopSpanStart(hopStart), this.#omni.hopSamples, this.#omni.meanSquareOfSnapshot(snapshot, e.channels, offset));
  }

  /** A sector's look direction now (null when it has no beam). No allocation. */
  look(name: string): { azimuthDeg: number | null; elevationDeg: number | null } {
    const g = this.#engine.grid;
    for (const m of this.#meters) {
      if (m.sector.name !== name) continue;
      if (m.look < 0 || m.look >= g.count) break;
      return { azimuthDeg: g.azimuthDeg[m.look], elevationDeg: g.elevationDeg[m.look] };
    }
    return NO_LOOK;
  }

  /** The beam ids the meters own (the service marks them in the beam list). */
  ownedBeams(): Map<number, string> {
    return new Map(this.#meters.filter((m) => m.beamId !== null).map((m) => [m.beamId!, m.sector.name]));
  }

  status(): SectorMeterStatus[] {
    const g = this.#engine.grid;
    return this.#meters.map((m) => ({
      name: m.sector.name,
      beamId: m.beamId,
      lookAzimuthDeg: m.look >= 0 && m.look < g.count ? g.azimuthDeg[m.look] : null,
      lookElevationDeg: m.look >= 0 && m.look < g.count ? g.elevationDeg[m.look] : null,
      error: m.error,
      hopsMetered: m.hops,
    }));
  }

  /** Release every beam. */
  close(): void {
    for (const m of this.#meters) if (m.beamId !== null) this.#engine.removeBeam(m.beamId);
    this.#meters = [];
  }
}

function sameSector(a: MeteredSector, b: MeteredSector): boolean {
  return JSON.stringify(a) === JSON.stringify(b);
}
