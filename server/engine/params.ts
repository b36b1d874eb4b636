/**
 * The live processing parameters: what REST `GET/PUT/PATCH /api/processing` reads and writes, what
 * the engine applies at the next hop. Validated here, once, with messages naming the field and the
 * allowed range.
 */
import type { LoadingSpec } from '../dsp/loading.ts';
import { cleanLoading, validateLoading } from '../dsp/loading.ts';
import type { SpectrumMethod } from '../dsp/spectrum.ts';
import type { AngleRangeDeg } from '../dsp/steering.ts';
import { inRange, PROCESSING_LIMITS } from '../../shared/processing-fields.ts';

export interface ProcessingParams {
  /** Forgetting factor per hop, (0, 1). */
  lambda: number;
  loading: LoadingSpec;
  /** Band of bins scanned, Hz. */
  bandHz: [number, number];
  grid: { azimuthDeg: AngleRangeDeg; elevationDeg?: AngleRangeDeg };
  methods: SpectrumMethod[];
  /** Spectrum rows per second (the display rate). */
  spectrumRateHz: number;
  /** Broadband combination with each bin normalised to its maximum. */
  normalise: boolean;
  /** STFT size N (hop N/2), a power of two 256–4096; a change re-plans and keeps τ unless λ/τ is given. */
  fftSize: number;
}

export const FFT_SIZES = [256, 512, 1024, 2048, 4096] as const;

export class ParamError extends Error {
  readonly code = 'ERR_PARAM_INVALID';
  readonly field: string;
  constructor(field: string, message: string) {
    super(`${field}: ${message}`);
    this.name = 'ParamError';
    this.field = field;
  }
}

export const SPECTRUM_RATE_LIMITS_HZ = [PROCESSING_LIMITS.spectrumRateHz.min, PROCESSING_LIMITS.spectrumRateHz.max] as const;
export const MAX_DIRECTIONS = 20_000;

function angleRange(field: string, v: unknown, lo: number, hi: number): AngleRangeDeg {
  if (typeof v !== 'object' || v === null || Array.isArray(v)) throw new ParamError(field, 'must be an object { startDeg, stopDeg, stepDeg }');
  const r = v as Record<string, unknown>;
  for (const k of Object.keys(r)) if (k !== 'startDeg' && k !== 'stopDeg' && k !== 'stepDeg') throw new ParamError(`${field}.${k.slice(0, 40)}`, 'unknown field; known: startDeg, stopDeg, stepDeg');
  for (const k of ['startDeg', 'stopDeg', 'stepDeg']) {
    const x = r[k];
    if (typeof x !== 'number' || !Number.isFinite(x)) throw new ParamError(`${field}.${k}`, `must be a number, got ${JSON.stringify(x)}`);
    if (k !== 'stepDeg' && (x < lo || x > hi)) throw new ParamError(`${field}.${k}`, `${x} out of range; allowed ${lo}–${hi}`);
  }
  const { startDeg, stopDeg, stepDeg } = r as unknown as AngleRangeDeg;
  const step = PROCESSING_LIMITS.azimuthStepDeg;
  if (!(stepDeg >= step.min && stepDeg <= step.max)) throw new ParamError(`${field}.stepDeg`, `${stepDeg} out of range; allowed ${step.min}–${step.max}`);
  if (stopDeg < startDeg) throw new ParamError(`${field}.stopDeg`, `${stopDeg} is below startDeg ${startDeg}`);
  return { startDeg, stopDeg, stepDeg };
}

function count(r: AngleRangeDeg): number {
  return Math.floor((r.stopDeg - r.startDeg) / r.stepDeg + 1e-9) + 1;
}

/**
 * Apply a patch (any subset of the fields, plus `tauS` as an alternative to `lambda`) to `base`.
 * Returns a new, fully validated object; `base` is unchanged. Unknown fields are refused.
 */
export function patchParams(base: ProcessingParams, patch: unknown, ctx: { sampleRateHz: number; hop: number }): ProcessingParams {
  if (typeof patch !== 'object' || patch === null || Array.isArray(patch)) throw new ParamError('(body)', 'must be a JSON object');
  const p = patch as Record<string, unknown>;
  const known = ['lambda', 'tauS', 'loading', 'bandHz', 'grid', 'methods', 'spectrumRateHz', 'normalise', 'fftSize'];
  for (const k of Object.keys(p)) if (!known.includes(k)) throw new ParamError(k.slice(0, 40), `unknown field; known: ${known.join(', ')}`);
  const out: ProcessingParams = structuredClone(base);
  if (p.lambda !== undefined && p.tauS !== undefined) throw new ParamError('tauS', 'give lambda or tauS, not both');
  let hop = ctx.hop;
  if (p.fftSize !== undefined) {
    const n = p.fftSize;
    if (typeof n !== 'number' || !(FFT_SIZES as readonly number[]).includes(n)) throw new ParamError('fftSize', `${JSON.stringify(n)} not allowed; allowed ${FFT_SIZES.join(', ')}`);
    if (n !== base.fftSize && p.lambda === undefined && p.tauS === undefined) {
      // Keep the time constant: τ = hop/(fs(1−λ)) with the new hop.
      out.lambda = 1 - ((n / 2) / hop) * (1 - base.lambda);
      if (!(out.lambda > 0)) throw new ParamError('fftSize', `${n} would need λ ≤ 0 to keep τ; lower τ first`);
    }
    out.fftSize = n;
    hop = n / 2;
  }
  if (p.lambda !== undefined) {
    const v = p.lambda;
    if (typeof v !== 'number' || !(v > 0 && v < 1)) throw new ParamError('lambda', `${JSON.stringify(v)} out of range; allowed a number in (0, 1)`);
    out.lambda = v;
  }
  if (p.tauS !== undefined) {
    const v = p.tauS;
    const { min, max } = PROCESSING_LIMITS.tauS;
    if (typeof v !== 'number' || !(v >= min && v <= max)) throw new ParamError('tauS', `${JSON.stringify(v)} out of range; allowed ${min}–${max} s`);
    // λ = 1 − hop/(fs τ) must stay above 0: τ longer than one hop.
    const hopS = hop / ctx.sampleRateHz;
    if (!(v > hopS)) throw new ParamError('tauS', `${v} out of range; allowed more than one hop (${Number(hopS.toPrecision(6))} s at FFT size ${2 * hop}) up to ${max} s`);
    out.lambda = 1 - hop / (ctx.sampleRateHz * v);
  }
  if (p.loading !== undefined) {
    try {
      validateLoading(p.loading);
    } catch (e) {
      throw new ParamError('loading', (e as Error).message.replace(/^loading\.?/, ''));
    }
    out.loading = cleanLoading(p.loading as LoadingSpec);
  }
  if (p.bandHz !== undefined) {
    const b = p.bandHz;
    const ny = ctx.sampleRateHz / 2;
    if (!Array.isArray(b) || b.length !== 2 || !b.every((x) => typeof x === 'number' && Number.isFinite(x))) throw new ParamError('bandHz', 'must be [lowHz, highHz]');
    if (!(b[0] >= 0 && b[1] > b[0] && b[1] <= ny && inRange(b[0], PROCESSING_LIMITS.bandLowHz) && inRange(b[1], PROCESSING_LIMITS.bandHighHz))) throw new ParamError('bandHz', `[${b[0]}, ${b[1]}] out of range; allowed 0 ≤ low < high ≤ ${Math.min(ny, PROCESSING_LIMITS.bandHighHz.max)}`);
    out.bandHz = [b[0], b[1]];
  }
  if (p.grid !== undefined) {
    const g = p.grid as Record<string, unknown>;
    if (typeof g !== 'object' || g === null || Array.isArray(g)) throw new ParamError('grid', 'must be an object { azimuthDeg, elevationDeg? }');
    for (const k of Object.keys(g)) if (k !== 'azimuthDeg' && k !== 'elevationDeg') throw new ParamError(`grid.${k.slice(0, 40)}`, 'unknown field; known: azimuthDeg, elevationDeg');
    const az = angleRange('grid.azimuthDeg', g.azimuthDeg, -360, 720);
    const el = g.elevationDeg === undefined ? undefined : angleRange('grid.elevationDeg', g.elevationDeg, -90, 90);
    const n = count(az) * (el ? count(el) : 1);
    if (n > MAX_DIRECTIONS) throw new ParamError('grid', `${n} directions; allowed at most ${MAX_DIRECTIONS}`);
    out.grid = el ? { azimuthDeg: az, elevationDeg: el } : { azimuthDeg: az };
  }
  if (p.methods !== undefined) {
    const m = p.methods;
    if (!Array.isArray(m) || m.length === 0 || !m.every((x) => x === 'mvdr' || x === 'conventional') || new Set(m).size !== m.length) {
      throw new ParamError('methods', `${JSON.stringify(m)}: allowed a non-empty list of mvdr, conventional`);
    }
    out.methods = m as SpectrumMethod[];
  }
  if (p.spectrumRateHz !== undefined) {
    const v = p.spectrumRateHz;
    const [lo, hi] = SPECTRUM_RATE_LIMITS_HZ;
    if (typeof v !== 'number' || !(v >= lo && v <= hi)) throw new ParamError('spectrumRateHz', `${JSON.stringify(v)} out of range; allowed ${lo}–${hi}`);
    out.spectrumRateHz = v;
  }
  if (p.normalise !== undefined) {
    if (typeof p.normalise !== 'boolean') throw new ParamError('normalise', 'must be true or false');
    out.normalise = p.normalise;
  }
  return out;
}

/** True when the change needs new steering tables and a fresh covariance (band or grid). */
export function needsReplan(a: ProcessingParams, b: ProcessingParams): boolean {
  return a.fftSize !== b.fftSize || JSON.stringify(a.bandHz) !== JSON.stringify(b.bandHz) || JSON.stringify(a.grid) !== JSON.stringify(b.grid);
}
