/**
 * The committed numpy reference fixture (test/fixtures/dsp/spectra.json, written by
 * make_dsp_fixtures.py; definitions in test/fixtures/dsp/README.md), typed once for every test
 * that reads it.
 */
import { readFileSync } from 'node:fs';
import type { Peak } from '../../server/dsp/peaks.ts';

export interface FixtureGrid {
  nAz: number;
  nEl: number;
  azimuthStartDeg: number;
  azimuthStepDeg: number;
  elevationStartDeg: number;
  elevationStepDeg: number;
  circularAzimuth: boolean;
  azimuthDeg: number[];
  elevationDeg: number[];
}

export interface BroadbandSpectra {
  linear: number[];
  db: number[];
  normalisedLinear: number[];
  normalisedDb: number[];
}

export type PeakKey = 'conventional' | 'mvdr' | 'conventionalNormalised' | 'mvdrNormalised';

export interface FixtureScenario {
  name: string;
  covarianceKind: 'model' | 'sample';
  positionsM: [number, number, number][];
  speedOfSoundMPerS: number;
  freqsHz: number[];
  grid: FixtureGrid;
  loadingRatio: number;
  loading: number[];
  covariance: number[][];
  conventional: number[][];
  mvdr: number[][];
  broadband: { conventional: BroadbandSpectra; mvdr: BroadbandSpectra };
  look: { azimuthDeg: number; elevationDeg: number };
  weights: number[][];
  wng: { linear: number[]; db: number[] };
  beamResponse: { linear: number[][]; db: number[][] };
  peaks: { thresholdDb: number; maxPeaks: number } & Record<PeakKey, Peak[]>;
}

export interface DspFixture {
  note: string;
  scenarios: FixtureScenario[];
}

export const DSP_FIXTURE_DIR = new URL('../fixtures/dsp/', import.meta.url);

export function loadDspFixture(): DspFixture {
  return JSON.parse(readFileSync(new URL('spectra.json', DSP_FIXTURE_DIR), 'utf8')) as DspFixture;
}
