/**
 * `nullsteer analyze FILE --array ARRAY.json …`: offline scan of a multichannel recording through the
 * same DSP code as the live server (dsp/scan-pipeline.ts). Prints, per method, the direction grid,
 * the broadband spectrum in dB over the whole file and the peaks; a table by default, JSON with --json.
 */
import { nearestLandmark, type Landmark } from '../../shared/landmarks.ts';
import { readFile, stat } from 'node:fs/promises';
import { decodeInterleaved, SAMPLE_ENCODINGS, type SampleEncoding } from '../../shared/frame.ts';
import type { ArrayGeometry } from '../../shared/types.ts';
import { validateGeometry } from '../config/array-file.ts';
import { loadArrayFile } from '../config/load.ts';
import { TIMELINE_OPTIONS } from './timeline-flags.ts';
import { ConfigError } from '../config/validate.ts';
import { validateLoading, type LoadingSpec } from '../dsp/loading.ts';
import { defaultGrid, ScanPipeline, type ScanPipelineOptions, type ScanResult } from '../dsp/scan-pipeline.ts';
import type { SpectrumMethod } from '../dsp/spectrum.ts';
import type { AngleRangeDeg } from '../dsp/steering.ts';
import { lambdaFromTau, speedOfSoundFromTemperature } from '../dsp/units.ts';
import { openRaw, type FileSampleReader } from '../io/raw.ts';
import { openWav } from '../io/wav.ts';
import { FlagError, parseFlags } from './flag-suggest.ts';
import { arrayCheckFile, arrayCheckTable } from './array-check-file.ts';
import { DEFAULT_MISPLACED_BOUND_US } from '../dsp/array-check.ts';

export const ANALYZE_USAGE = `usage: nullsteer analyze FILE [--array ARRAY.json] [--band LO:HI] [--method mvdr|conventional|both]
         [--grid AZ0:AZ1:STEP[,EL0:EL1:STEP]] [--lambda L | --tau S] [--loading SPEC] [--fft N]
         [--c M_PER_S | --temperature DEG_C] [--focus-range M] [--mask CH[,CH…]] [--dead-db DB|off]
         [--normalise] [--threshold-db DB] [--max-peaks N] [--json | --all]
         [--raw --channels M --rate HZ --encoding int16|int24|int32|float32]
       nullsteer analyze FILE --array-check [--azimuth DEG] [--bound-us N] [--array ARRAY.json] [--band LO:HI] [--fft N] [--json]
  --array-check: with one dominant source (at --azimuth, else the strongest peak), each channel's delay,
  phase and gain against the geometry, the faults (swapped, misplaced, inverted, dead, hot) and a
  proposed calibration (--json: the same object as POST /api/array-check answers).
  Without --array the geometry comes from the recording's sidecar (FILE.json, written beside it).
  The table gives the summary and the peaks; --all adds the spectrum at every direction of the grid.
  SPEC: ratio:R (δ = R·tr(R)/M, default ratio:0.01), db:D (the same in dB), fixed:δ, wng:FLOOR_DB, none`;

export interface AnalyzeIo {
  out?: (s: string) => void;
  err?: (s: string) => void;
}

class UsageError extends Error {}

function num(flag: string, text: string, min: number, max: number, integer = false): number {
  const v = Number(text);
  if (text.trim() === '' || !Number.isFinite(v) || v < min || v > max || (integer && !Number.isInteger(v))) {
    throw new UsageError(`--${flag} ${text}: allowed ${integer ? 'an integer' : 'a number'} ${min}–${max}`);
  }
  return v;
}

function range(flag: string, text: string, lo: number, hi: number): AngleRangeDeg {
  const parts = text.split(':');
  if (parts.length !== 3) throw new UsageError(`--${flag} ${text}: expected START:STOP:STEP in degrees`);
  const [startDeg, stopDeg, stepDeg] = parts.map((p) => num(flag, p, lo, hi));
  if (!(stepDeg > 0) || stopDeg < startDeg) throw new UsageError(`--${flag} ${text}: need STOP ≥ START and STEP > 0`);
  return { startDeg, stopDeg, stepDeg };
}

/** Parse a loading spec of the form MODE:VALUE. */
export function parseLoading(text: string): LoadingSpec {
  if (text === 'none') return { mode: 'fixed', delta: 0 };
  const [mode, value, extra] = text.split(':');
  if (value === undefined || extra !== undefined) throw new UsageError(`--loading ${text}: expected ratio:R, db:D, fixed:δ, wng:FLOOR_DB or none`);
  const v = Number(value);
  const spec: unknown =
    mode === 'ratio' ? { mode: 'relative', ratio: v } : mode === 'db' ? { mode: 'relative-db', db: v } : mode === 'fixed' ? { mode: 'fixed', delta: v } : mode === 'wng' ? { mode: 'wng', floorDb: v } : null;
  if (spec === null) throw new UsageError(`--loading ${text}: unknown mode ${JSON.stringify(mode)}; allowed ratio, db, fixed, wng, none`);
  try {
    validateLoading(spec);
  } catch (e) {
    throw new UsageError(`--loading ${text}: ${(e as Error).message}`);
  }
  return spec;
}

interface Parsed {
  file: string;
  /** null: take the geometry from the recording's sidecar. */
  arrayFile: string | null;
  json: boolean;
  /** Table output: print the spectrum at every direction too. */
  all: boolean;
  raw: { channels: number; sampleRateHz: number; encoding: SampleEncoding } | null;
  build: (fs: number, geometry: ScanPipelineOptions['geometry']) => ScanPipelineOptions;
  /** --array-check: the stated azimuth (null: the strongest peak), the bound, the FFT size if given. */
  arrayCheck: { azimuthDeg: number | null; boundUs: number; fftSize: number | null } | null;
}

const ANALYZE_OPTIONS = {
  array: { type: 'string' },
  band: { type: 'string' },
  method: { type: 'string' },
  grid: { type: 'string' },
  lambda: { type: 'string' },
  tau: { type: 'string' },
  loading: { type: 'string' },
  fft: { type: 'string' },
  c: { type: 'string' },
  temperature: { type: 'string' },
  'focus-range': { type: 'string' },
  mask: { type: 'string' },
  'dead-db': { type: 'string' },
  normalise: { type: 'boolean' },
  'threshold-db': { type: 'string' },
  'max-peaks': { type: 'string' },
  json: { type: 'boolean' },
  all: { type: 'boolean' },
  raw: { type: 'boolean' },
  channels: { type: 'string' },
  rate: { type: 'string' },
  encoding: { type: 'string' },
  'array-check': { type: 'boolean' },
  azimuth: { type: 'string' },
  'bound-us': { type: 'string' },
} as const;
const ANALYZE_FLAGS = Object.keys(ANALYZE_OPTIONS);

const TIMELINE_ONLY_FLAGS = Object.keys(TIMELINE_OPTIONS).filter((f) => !(f in ANALYZE_OPTIONS));

export function parseAnalyzeArgs(argv: string[]): Parsed {
  const { values, positionals } = parseFlags(argv, ANALYZE_OPTIONS, true, [...TIMELINE_ONLY_FLAGS, 'help']);
  if (positionals.length !== 1) throw new UsageError(positionals.length === 0 ? 'FILE is required' : `one FILE expected, got ${positionals.length}`);
  if (values.array === '') throw new UsageError('--array needs a file name');
  if (values.json && values.all) throw new UsageError('give --json or --all, not both (the JSON report always holds every direction)');
  if (values.lambda !== undefined && values.tau !== undefined) throw new UsageError('give --lambda or --tau, not both');
  if (values.c !== undefined && values.temperature !== undefined) throw new UsageError('give --c or --temperature, not both');
  const methodText = values.method ?? 'both';
  const methods: SpectrumMethod[] = methodText === 'both' ? ['mvdr', 'conventional'] : methodText === 'mvdr' || methodText === 'conventional' ? [methodText] : [];
  if (methods.length === 0) throw new UsageError(`--method ${methodText}: allowed mvdr, conventional, both`);
  const fftSize = values.fft === undefined ? 512 : num('fft', values.fft, 256, 4096, true);
  if ((fftSize & (fftSize - 1)) !== 0) throw new UsageError(`--fft ${fftSize}: must be a power of two 256–4096`);
  let grid: ScanPipelineOptions['grid'] | null = null;
  if (values.grid !== undefined) {
    const [az, el, more] = values.grid.split(',');
    if (more !== undefined) throw new UsageError(`--grid ${values.grid}: expected AZ0:AZ1:STEP[,EL0:EL1:STEP]`);
    grid = { azimuthDeg: range('grid', az, -360, 720), ...(el !== undefined ? { elevationDeg: range('grid', el, -90, 90) } : {}) };
  }
  let band: [number, number] | null = null;
  if (values.band !== undefined) {
    const p = values.band.split(':');
    if (p.length !== 2) throw new UsageError(`--band ${values.band}: expected LO:HI in Hz`);
    band = [num('band', p[0], 0, 1e6), num('band', p[1], 0, 1e6)];
    if (band[1] <= band[0]) throw new UsageError(`--band ${values.band}: HI must exceed LO`);
  }
  const speedOfSoundMps =
    values.c !== undefined ? num('c', values.c, 200, 2000) : values.temperature !== undefined ? speedOfSoundFromTemperature(num('temperature', values.temperature, -60, 70)) : 343.2;
  const mask = values.mask === undefined ? [] : values.mask.split(',').map((s) => num('mask', s, 0, 1023, true));
  const deadText = values['dead-db'] ?? '30';
  const deadBelowMedianDb = deadText === 'off' ? null : num('dead-db', deadText, 1, 300);
  const lambdaText = values.lambda;
  const tauText = values.tau;
  let raw: Parsed['raw'] = null;
  if (values.raw) {
    if (!values.channels || !values.rate || !values.encoding) throw new UsageError('--raw needs --channels, --rate and --encoding');
    if (!(SAMPLE_ENCODINGS as readonly string[]).includes(values.encoding)) throw new UsageError(`--encoding ${values.encoding}: allowed ${SAMPLE_ENCODINGS.join(', ')}`);
    raw = { channels: num('channels', values.channels, 1, 1024, true), sampleRateHz: num('rate', values.rate, 1000, 384000, true), encoding: values.encoding as SampleEncoding };
  } else if (values.channels || values.rate || values.encoding) {
    throw new UsageError('--channels, --rate and --encoding go with --raw');
  }
  const loading = values.loading === undefined ? ({ mode: 'relative', ratio: 0.01 } as LoadingSpec) : parseLoading(values.loading);
  const focusRangeM = values['focus-range'] === undefined ? null : num('focus-range', values['focus-range'], 0.01, 1e6);
  const peakThresholdDb = values['threshold-db'] === undefined ? 3 : num('threshold-db', values['threshold-db'], 0, 200);
  const maxPeaks = values['max-peaks'] === undefined ? 8 : num('max-peaks', values['max-peaks'], 1, 1000, true);
  if (!values['array-check'] && (values.azimuth !== undefined || values['bound-us'] !== undefined)) throw new UsageError('--azimuth and --bound-us go with --array-check');
  if (values['array-check'] && values.all) throw new UsageError('--all is not an --array-check option (the check prints every channel)');
  const arrayCheck = values['array-check']
    ? { azimuthDeg: values.azimuth === undefined ? null : num('azimuth', values.azimuth, -360, 360), boundUs: values['bound-us'] === undefined ? DEFAULT_MISPLACED_BOUND_US : num('bound-us', values['bound-us'], 1, 1000), fftSize: values.fft === undefined ? null : fftSize }
    : null;
  return {
    arrayCheck,
    file: positionals[0],
    arrayFile: values.array ?? null,
    json: values.json === true,
    all: values.all === true,
    raw,
    build: (fs, geometry) => {
      const hop = fftSize / 2;
      const lambda = lambdaText !== undefined ? num('lambda', lambdaText, 1e-6, 1 - 1e-12) : tauText !== undefined ? lambdaFromTau(num('tau', tauText, hop / fs, 1e6), hop, fs) : null;
      const b: [number, number] = band ?? [300, Math.min(6000, fs / 2)];
      if (b[1] > fs / 2) throw new UsageError(`--band ${b[0]}:${b[1]}: HI above fs/2 = ${fs / 2} Hz`);
      for (const c of mask) if (c >= geometry.positions.length) throw new UsageError(`--mask ${c}: the array has channels 0–${geometry.positions.length - 1}`);
      return { geometry, sampleRateHz: fs, fftSize, bandHz: b, grid: grid ?? defaultGrid(geometry), methods, lambda, loading, speedOfSoundMps, focusRangeM, maskedChannels: mask, deadBelowMedianDb, normalise: values.normalise === true, peakThresholdDb, maxPeaks };
    },
  };
}

/** Read a whole file through a fresh pipeline. */
export async function analyzeFile(reader: FileSampleReader, options: ScanPipelineOptions): Promise<ScanResult> {
  const info = reader.info;
  const M = info.channels;
  const pipe = new ScanPipeline(options);
  const chunkFrames = 8192;
  const planar = new Float32Array(M * chunkFrames);
  let index = 0;
  for await (const bytes of reader.chunks(chunkFrames)) {
    const n = bytes.byteLength / info.blockAlignBytes;
    const data = n === chunkFrames ? planar : new Float32Array(M * n);
    if (!decodeInterleaved(bytes, M, n, info.encoding, data)) {
      throw new RangeError(`the file holds NaN or infinite samples between frames ${index} and ${index + n}`);
    }
    pipe.push({ streamId: 0, sampleIndex: index, sampleRateHz: info.sampleRateHz, channels: M, frames: n, data, gap: false, discontinuity: false });
    index += n;
  }
  return pipe.result();
}

const r3 = (x: number) => Math.round(x * 1000) / 1000;
/** `{ landmark: name }` when the array file names an azimuth within LANDMARK_TOLERANCE_DEG of the peak. */
const landmarkOf = (azDeg: number, landmarks: readonly Landmark[] | undefined) => {
  const near = landmarks ? nearestLandmark(azDeg, landmarks) : null;
  return near ? { landmark: near.landmark.name } : {};
};

/** The JSON report: snake_case keys, angles in degrees, levels in dB. */
export function reportJson(file: string, arrayName: string, fs: number, frames: number, o: ScanPipelineOptions, r: ScanResult): Record<string, unknown> {
  const twoD = r.grid.nEl > 1;
  const methods: Record<string, unknown> = {};
  for (const [name, m] of Object.entries(r.methods)) {
    methods[name] = {
      spectrum_db: Array.from(m!.spectrumDb, r3),
      peaks: m!.peaks.map((p) => ({ azimuth_deg: r3(p.azimuthDeg), ...(twoD ? { elevation_deg: r3(p.elevationDeg) } : {}), level_db: r3(p.levelDb), ...landmarkOf(p.azimuthDeg, o.geometry.landmarks) })),
    };
  }
  return {
    file,
    array: arrayName,
    sample_rate_hz: fs,
    channels: o.geometry.positions.length,
    frames,
    duration_s: frames / fs,
    fft_size: o.fftSize,
    band_hz: [r.band.loHz, r.band.hiHz],
    bins: r.band.count,
    snapshots: r.snapshots,
    covariance: r.lambda === null ? 'average over the file' : 'recursive',
    lambda: r.lambda,
    tau_s: r.tauS,
    loading: o.loading,
    speed_of_sound_mps: o.speedOfSoundMps,
    channel_power_dbfs: Array.from(r.channelPowerDb, r3),
    dead_channels: r.deadChannels,
    masked_channels: r.maskedChannels,
    active_channels: r.activeChannels.length,
    aliasing: { limit_hz: Math.round(r.aliasing.limitHz), exceeded: r.aliasing.exceeded, message: r.aliasing.message },
    grid: { azimuth_deg: Array.from(r.grid.azimuthDeg), ...(twoD ? { elevation_deg: Array.from(r.grid.elevationDeg) } : {}) },
    methods,
  };
}

/** The sidecar the recorder writes beside FILE.wav (server/outputs/recorder.ts): FILE.json. */
export function sidecarPathOf(file: string): string {
  return /\.(wav|raw)$/i.test(file) ? file.replace(/\.(wav|raw)$/i, '.json') : `${file}.json`;
}

/** Largest sidecar read (it grows with parameter changes and gaps; a bound against a wrong file). */
const MAX_SIDECAR_BYTES = 64 * 1024 * 1024;

/** The array geometry of a recording's sidecar. @throws UsageError when there is none, ConfigError when it is invalid */
export async function geometryFromSidecar(file: string): Promise<{ geometry: ArrayGeometry; sidecar: string }> {
  const sidecar = sidecarPathOf(file);
  let text: string;
  try {
    const st = await stat(sidecar);
    if (st.size > MAX_SIDECAR_BYTES) throw new UsageError(`no array geometry: give --array (the sidecar ${sidecar} is ${st.size} bytes, above the ${MAX_SIDECAR_BYTES} read)`);
    text = await readFile(sidecar, 'utf8');
  } catch (e) {
    if (e instanceof UsageError) throw e;
    const code = (e as NodeJS.ErrnoException).code ?? String(e);
    throw new UsageError(`no array geometry: give --array (no sidecar ${sidecar}: ${code})`);
  }
  let doc: unknown;
  try {
    doc = JSON.parse(text);
  } catch (e) {
    throw new UsageError(`no array geometry: give --array (the sidecar ${sidecar} is not valid JSON: ${(e as Error).message})`);
  }
  const array = typeof doc === 'object' && doc !== null ? (doc as { array?: unknown }).array : undefined;
  if (array === undefined || array === null) throw new UsageError(`no array geometry: give --array (the sidecar ${sidecar} has none)`);
  return { geometry: validateGeometry(array, `${sidecar} array`), sidecar };
}

function reportTable(rep: Record<string, any>, all: boolean): string {
  const lines: string[] = [];
  lines.push(`${rep.file}: ${rep.channels} channels, ${rep.sample_rate_hz} Hz, ${rep.duration_s.toFixed(3)} s; array ${rep.array}${rep.array_from === 'sidecar' ? ` (from the sidecar ${rep.array_file})` : ''}`);
  lines.push(`band ${rep.band_hz[0]}–${rep.band_hz[1]} Hz (${rep.bins} bins, N = ${rep.fft_size}), ${rep.snapshots} snapshots, covariance ${rep.covariance}${rep.tau_s ? ` (λ = ${rep.lambda.toFixed(6)}, τ = ${rep.tau_s.toFixed(3)} s)` : ''}`);
  lines.push(`loading ${JSON.stringify(rep.loading)}, c = ${rep.speed_of_sound_mps.toFixed(1)} m/s, ${rep.active_channels} channels used`);
  if (rep.dead_channels.length) lines.push(`dead channels (excluded): ${rep.dead_channels.join(', ')}`);
  if (rep.masked_channels.length) lines.push(`masked channels (excluded): ${rep.masked_channels.join(', ')}`);
  if (rep.aliasing.exceeded) lines.push(`warning: ${rep.aliasing.message}`);
  const names = Object.keys(rep.methods);
  for (const n of names) {
    lines.push('', `${n} peaks:`, '  azimuth_deg' + (rep.grid.elevation_deg ? '  elevation_deg' : '') + '  level_db');
    for (const p of rep.methods[n].peaks) {
      lines.push(`  ${p.azimuth_deg.toFixed(2).padStart(11)}${p.elevation_deg !== undefined ? p.elevation_deg.toFixed(2).padStart(15) : ''}${p.level_db.toFixed(2).padStart(10)}${p.landmark !== undefined ? `  · ${p.landmark}` : ''}`);
    }
  }
  if (!all) {
    lines.push('', `(--all adds the broadband spectrum at all ${rep.grid.azimuth_deg.length} directions)`);
    return lines.join('\n');
  }
  lines.push('', `broadband spectrum (dB):`, '  azimuth_deg' + (rep.grid.elevation_deg ? '  elevation_deg' : '') + names.map((n) => n.padStart(14)).join(''));
  const az = rep.grid.azimuth_deg as number[];
  for (let d = 0; d < az.length; d++) {
    lines.push(`  ${az[d].toFixed(2).padStart(11)}${rep.grid.elevation_deg ? rep.grid.elevation_deg[d].toFixed(2).padStart(15) : ''}${names.map((n) => rep.methods[n].spectrum_db[d].toFixed(2).padStart(14)).join('')}`);
  }
  return lines.join('\n');
}

export async function analyzeCommand(argv: string[], io: AnalyzeIo = {}): Promise<number> {
  const out = io.out ?? ((s: string) => process.stdout.write(`${s}\n`));
  const err = io.err ?? ((s: string) => process.stderr.write(`${s}\n`));
  if (argv.some((a) => a === '--timeline' || a.startsWith('--timeline='))) {
    const { timelineCommand, TIMELINE_USAGE } = await import('./timeline.ts');
    if (argv.includes('--help') || argv.includes('-h')) {
      out(TIMELINE_USAGE);
      return 0;
    }
    try {
      parseFlags(argv, TIMELINE_OPTIONS, true, [...ANALYZE_FLAGS, 'help']);
    } catch (e) {
      if (!(e instanceof FlagError)) throw e;
      err(`nullsteer analyze: ${e.message}\n${TIMELINE_USAGE}`);
      return 2;
    }
    return timelineCommand(argv, io);
  }
  if (argv.includes('--help') || argv.includes('-h')) {
    out(`${ANALYZE_USAGE}\n  Time-resolved through the live engine: nullsteer analyze FILE.wav --timeline DIR … (see --timeline --help)`);
    return 0;
  }
  let parsed: Parsed;
  try {
    parsed = parseAnalyzeArgs(argv);
  } catch (e) {
    err(`nullsteer analyze: ${(e as Error).message}\n${ANALYZE_USAGE}`);
    return 2;
  }
  let reader: FileSampleReader | null = null;
  try {
    reader = parsed.raw ? await openRaw(parsed.file, parsed.raw) : await openWav(parsed.file);
    const info = reader.info;
    const from = parsed.arrayFile !== null ? { ...(await loadArrayFile(parsed.arrayFile)), kind: 'file' as const } : { ...(await geometryFromSidecar(parsed.file)), kind: 'sidecar' as const };
    const geometry = from.geometry;
    if (info.channels !== geometry.positions.length) {
      throw new UsageError(`${parsed.file} has ${info.channels} channels, the array ${geometry.name} has ${geometry.positions.length}`);
    }
    const options = parsed.build(info.sampleRateHz, geometry);
    if (parsed.arrayCheck) {
      const r = await arrayCheckFile(reader, geometry, options, parsed.arrayCheck);
      out(parsed.json ? JSON.stringify({ file: parsed.file, array: geometry.name, ...r }) : arrayCheckTable(parsed.file, geometry.name, r));
      return 0;
    }
    const result = await analyzeFile(reader, options);
    const rep = reportJson(parsed.file, geometry.name, info.sampleRateHz, info.frames, options, result);
    rep.array_from = from.kind;
    rep.array_file = from.kind === 'file' ? from.arrayPath : from.sidecar;
    out(parsed.json ? JSON.stringify(rep) : reportTable(rep, parsed.all));
    return 0;
  } catch (e) {
    if (e instanceof UsageError || e instanceof FlagError) {
      err(`nullsteer analyze: ${e.message}\n${ANALYZE_USAGE}`);
      return 2;
    }
    if (e instanceof ConfigError) {
      err(`nullsteer analyze: ${e.message}`);
      return 2;
    }
    err(`nullsteer analyze: ${(e as Error).message}`);
    return 1;
  } finally {
    await reader?.close();
  }
}
