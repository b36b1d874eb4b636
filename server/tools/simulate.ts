/**
 * `nullsteer simulate OUT.wav --array ARRAY.json …`: renders the built-in scene (server/ingest/
 * scenario.ts) as heard by an array into a WAV file, through the same SceneSimulator that
 * `--source simulator` plays and the recordings' WavStreamWriter. Same array, seed, rate and speed of
 * sound → the same samples as the live simulator, from sample index 0 on.
 *
 * There is no scene-file format: the built-in scene is the only one.
 */
import { existsSync, readFileSync } from 'node:fs';
import { join } from 'node:path';
import type { ArrayGeometry } from '../../shared/types.ts';
import { loadArrayFile, PROJECT_CONFIG_DIR } from '../config/load.ts';
import { parseFlags } from './flag-suggest.ts';
import { ConfigError, validateConfig } from '../config/validate.ts';
import { SceneSimulator } from '../ingest/simulator.ts';
import { RECORDING_ENCODINGS, WavStreamWriter, type RecordingEncoding } from '../outputs/wav-writer.ts';

export const SIMULATE_USAGE = `usage: nullsteer simulate OUT.wav --array ARRAY.json [--seconds S] [--seed N] [--rate HZ]
         [--encoding int16|int24|int32|float32] [--force]
  Writes the built-in scene (the one \`--source simulator\` plays) as heard by the array to OUT.wav.
  --seconds  length, 0 < S ≤ 3600 (default 10)
  --seed     0–4294967295 (default simulator.seed of config/default.json)
  --rate     sample rate, 8000–384000 Hz (default 48000)
  --encoding sample format of the file (default int24)
  --force    overwrite OUT.wav if it exists`;

const OPTIONS = {
  array: { type: 'string' },
  seconds: { type: 'string' },
  seed: { type: 'string' },
  rate: { type: 'string' },
  encoding: { type: 'string' },
  force: { type: 'boolean' },
  help: { type: 'boolean', short: 'h' },
} as const;


/** Longest file, seconds. */
export const MAX_SIMULATE_SECONDS = 3600;

export interface SimulateOptions {
  /** Output WAV path. */
  path: string;
  geometry: ArrayGeometry;
  seconds: number;
  /** uint32. */
  seed: number;
  sampleRateHz: number;
  encoding: RecordingEncoding;
  /** Default 343.2 m/s, as config/default.json. */
  speedOfSoundMps?: number;
  /** Samples per channel rendered at a time; the samples do not depend on it. Default 4800. */
  blockFrames?: number;
  /** Overwrite an existing file; default false. */
  overwrite?: boolean;
}

export interface SimulateResult {
  frames: number;
  channels: number;
  bytes: number;
  container: 'wav' | 'rf64';
}

export interface SimulateIo {
  out?: (s: string) => void;
  err?: (s: string) => void;
}

class UsageError extends Error {}

/** Frames a file of `seconds` holds at `sampleRateHz` (rounded to the nearest frame). */
export function simulateFrames(seconds: number, sampleRateHz: number): number {
  return Math.round(seconds * sampleRateHz);
}

/** Defaults of the simulator section of config/default.json, validated. */
export function simulatorDefaults(): { seed: number; speedOfSoundMps: number; blockFrames: number } {
  const config = validateConfig(JSON.parse(readFileSync(join(PROJECT_CONFIG_DIR, 'default.json'), 'utf8')));
  return { ...config.simulator };
}

/**
 * Render the scene into a WAV at `options.path`. Blocks are rendered one at a time and handed to the
 * writer (memory: one block plus the writer's bounded queue); the event loop gets a turn after every
 * block so the writer's file writes keep up.
 */
export async function simulateToWav(options: SimulateOptions): Promise<SimulateResult> {
  const blockFrames = options.blockFrames ?? 4800;
  const sim = new SceneSimulator({
    geometry: options.geometry,
    sampleRateHz: options.sampleRateHz,
    blockFrames,
    seed: options.seed,
    speedOfSoundMps: options.speedOfSoundMps ?? 343.2,
  });
  const total = simulateFrames(options.seconds, options.sampleRateHz);
  const writer = await WavStreamWriter.open(options.path, {
    sampleRateHz: options.sampleRateHz,
    channels: sim.channels,
    encoding: options.encoding,
    onLimit: 'rf64',
    overwrite: options.overwrite === true,
  });
  try {
    let done = 0;
    let last: Float32Array | null = null;
    while (done < total) {
      const block = sim.next();
      const n = Math.min(blockFrames, total - done);
      if (n === blockFrames) {
        writer.write(block.data, n);
      } else {
        // Last, shorter block: keep the first n frames of every channel (planar layout).
        last ??= new Float32Array(sim.channels * n);
        for (let c = 0; c < sim.channels; c++) last.set(block.data.subarray(c * blockFrames, c * blockFrames + n), c * n);
        writer.write(last, n);
      }
      done += n;
      await new Promise<void>((resolve) => setImmediate(resolve));
    }
  } finally {
    if (!writer.closed) await writer.close().catch(() => {});
  }
  if (writer.error) throw writer.error;
  return { frames: writer.headerFrames, channels: sim.channels, bytes: writer.bytes, container: writer.container };
}

function num(flag: string, text: string, min: number, max: number, integer: boolean): number {
  const v = Number(text);
  if (text.trim() === '' || !Number.isFinite(v) || v < min || v > max || (integer && !Number.isInteger(v))) {
    throw new UsageError(`--${flag} ${text}: allowed ${integer ? 'an integer' : 'a number'} ${min}–${max}`);
  }
  return v;
}

export interface ParsedSimulateArgs {
  out: string;
  arrayFile: string;
  seconds: number;
  seed: number | null;
  sampleRateHz: number;
  encoding: RecordingEncoding;
  force: boolean;
  help: boolean;
}

export function parseSimulateArgs(argv: string[]): ParsedSimulateArgs {
  let parsed;
  try {
    // The shared flag check: a misspelt flag gets the nearest valid one, as in the other commands.
    parsed = parseFlags(argv, OPTIONS, true);
  } catch (e) {
    throw new UsageError((e as Error).message);
  }
  const { values, positionals } = parsed;
  const help = values.help === true;
  if (help) return { out: '', arrayFile: '', seconds: 0, seed: null, sampleRateHz: 0, encoding: 'int24', force: false, help };
  if (positionals.length !== 1) throw new UsageError(positionals.length === 0 ? 'OUT.wav is required' : `one OUT.wav expected, got ${positionals.length}: ${positionals.join(' ')}`);
  if (values.array === undefined || values.array === '') throw new UsageError('--array ARRAY.json is required');
  const encoding = values.encoding ?? 'int24';
  if (!(RECORDING_ENCODINGS as readonly string[]).includes(encoding)) throw new UsageError(`--encoding ${encoding}: allowed ${RECORDING_ENCODINGS.join(', ')}`);
  const sampleRateHz = values.rate === undefined ? 48000 : num('rate', values.rate, 8000, 384000, true);
  const seconds = values.seconds === undefined ? 10 : num('seconds', values.seconds, 0, MAX_SIMULATE_SECONDS, false);
  if (simulateFrames(seconds, sampleRateHz) < 1) throw new UsageError(`--seconds ${values.seconds}: less than one sample at ${sampleRateHz} Hz`);
  const seed = values.seed === undefined ? null : num('seed', values.seed, 0, 0xffffffff, true);
  return { out: positionals[0], arrayFile: values.array, seconds, seed, sampleRateHz, encoding: encoding as RecordingEncoding, force: values.force === true, help };
}

export async function simulateCommand(argv: string[], io: SimulateIo = {}): Promise<number> {
  const out = io.out ?? ((s: string) => process.stdout.write(`${s}\n`));
  const err = io.err ?? ((s: string) => process.stderr.write(`${s}\n`));
  let p: ParsedSimulateArgs;
  try {
    p = parseSimulateArgs(argv);
  } catch (e) {
    err(`nullsteer simulate: ${(e as Error).message}\n${SIMULATE_USAGE}`);
    return 2;
  }
  if (p.help) {
    out(SIMULATE_USAGE);
    return 0;
  }
  try {
    if (!p.force && existsSync(p.out)) throw new UsageError(`${p.out} exists; give --force to overwrite it`);
    // Same lookup as the server's --array: the path as given (from the working directory), else under config/.
    // (a missing file is a ConfigError listing every path tried)
    const { geometry } = await loadArrayFile(p.arrayFile);
    const defaults = simulatorDefaults();
    const seed = p.seed ?? defaults.seed;
    const r = await simulateToWav({
      path: p.out, geometry, seconds: p.seconds, seed, sampleRateHz: p.sampleRateHz, encoding: p.encoding,
      speedOfSoundMps: defaults.speedOfSoundMps, overwrite: p.force,
    });
    out(`${p.out}: ${r.channels} channels, ${p.sampleRateHz} Hz, ${p.encoding}, ${r.frames} frames (${(r.frames / p.sampleRateHz).toFixed(3)} s), seed ${seed}, array ${geometry.name}${r.container === 'rf64' ? ', RF64' : ''}`);
    return 0;
  } catch (e) {
    if (e instanceof UsageError || e instanceof ConfigError) {
      err(`nullsteer simulate: ${e.message}`);
      return 2;
    }
    err(`nullsteer simulate: ${(e as Error).message}`);
    return 1;
  }
}
