/**
 * Command line of `nullsteer send`: turns argv into {@link SendOptions}, checking every flag. Each
 * problem is reported as ERR_SEND_USAGE naming the flag, the value given and the values allowed.
 * Flags take their value as `--flag value` or `--flag=value`; a repeated flag keeps its last value.
 * FILE `-` reads standard input (a file named `-` is `./-`).
 */
import { FRAME_HEADER_BYTES, MAX_FRAME_BYTES, SAMPLE_ENCODINGS, type SampleEncoding } from '../../shared/frame.ts';
import { unknownFlagText } from './flag-suggest.ts';
import { sendError, type SendError } from './send-errors.ts';
import { DEFAULT_UDP_TARGET, type SendTarget } from './send-plan.ts';
import type { SendOptions } from './send.ts';

export { DEFAULT_UDP_TARGET };

export const SEND_USAGE =
  'usage: nullsteer send FILE|- [--udp HOST:PORT | --ws URL] [--raw --channels M --rate HZ --encoding int16|int24|int32|float32] ' +
  '[--speed X | --fast] [--stream-id N] [--frame-samples N | --max-frame-bytes B] [--start-sample N] [--loop] [--quiet]' +
  '\n  - reads raw samples from standard input (needs --raw …), sent as they arrive; --speed and --loop apply to files only';

/** The flag that sets each SendOptions field, for messages about options checked after parsing. */
export const FLAG_OF_OPTION: Record<string, string> = {
  speed: '--speed',
  streamId: '--stream-id',
  samplesPerFrame: '--frame-samples',
  maxFrameBytes: '--max-frame-bytes',
  startSample: '--start-sample',
  target: '--udp/--ws',
};

const VALUE_FLAGS = ['udp', 'ws', 'channels', 'rate', 'encoding', 'speed', 'stream-id', 'frame-samples', 'max-frame-bytes', 'start-sample'] as const;
const BOOLEAN_FLAGS = ['raw', 'fast', 'loop', 'quiet', 'help'] as const;
const ALL_FLAGS: readonly string[] = [...VALUE_FLAGS, ...BOOLEAN_FLAGS];
type ValueFlag = (typeof VALUE_FLAGS)[number];
type BooleanFlag = (typeof BOOLEAN_FLAGS)[number];

export interface ParsedSendArgs {
  options: SendOptions;
  /** FILE was `-`: read raw samples from standard input (options.raw is then set, speed and loop are not). */
  stdin: boolean;
  quiet: boolean;
  help: boolean;
}

function usage(detail: string): SendError {
  return sendError('ERR_SEND_USAGE', detail);
}

function flagError(flag: string, value: string, why: string, allowed: string): SendError {
  return usage(`${flag} ${JSON.stringify(value)}: ${why}; allowed ${allowed}`);
}

/** A decimal integer in [min, max]; no sign, exponent, hex or fraction. */
function intFlag(flag: string, text: string, min: number, max: number): number {
  const allowed = `an integer ${min}–${max}`;
  if (!/^[0-9]+$/.test(text)) return fail(flagError(`--${flag}`, text, 'not a whole number', allowed));
  const v = Number(text);
  if (!Number.isSafeInteger(v) || v < min || v > max) return fail(flagError(`--${flag}`, text, 'out of range', allowed));
  return v;
}

function fail(e: SendError): never {
  throw e;
}

function parseSpeed(text: string): number {
  const allowed = 'a number > 0 (1 = real time, 4 = four times real time); --fast sends without pacing';
  if (!/^(?:[0-9]+(?:\.[0-9]*)?|\.[0-9]+)(?:[eE][+-]?[0-9]+)?$/.test(text)) return fail(flagError('--speed', text, 'not a number', allowed));
  const v = Number(text);
  if (!(v > 0) || !Number.isFinite(v)) return fail(flagError('--speed', text, 'not positive and finite', allowed));
  return v;
}

/** `HOST:PORT` or `[IPv6]:PORT`, port 1–65535. */
function parseUdp(text: string): SendTarget {
  const allowed = 'HOST:PORT or [IPv6]:PORT with port 1–65535, e.g. 127.0.0.1:9750';
  const m = /^\[([0-9A-Fa-f:.]+(?:%[A-Za-z0-9_.-]+)?)\]:([^:]*)$/.exec(text) ?? /^([A-Za-z0-9_.-]+):([^:]*)$/.exec(text);
  if (m === null) {
    const why = text.split(':').length > 2 ? 'an IPv6 address must be in brackets' : 'not HOST:PORT';
    return fail(flagError('--udp', text, why, allowed));
  }
  if (!/^[0-9]+$/.test(m[2])) return fail(flagError('--udp', text, `port ${JSON.stringify(m[2])} is not a whole number`, allowed));
  const port = Number(m[2]);
  if (port < 1 || port > 65535) return fail(flagError('--udp', text, `port ${port} out of range`, allowed));
  return { kind: 'udp', host: m[1], port };
}

function parseWs(text: string): SendTarget {
  const allowed = 'a ws:// or wss:// URL, e.g. ws://127.0.0.1:8080/ingest';
  let url: URL;
  try {
    url = new URL(text);
  } catch {
    return fail(flagError('--ws', text, 'not a URL', allowed));
  }
  if (url.protocol !== 'ws:' && url.protocol !== 'wss:') return fail(flagError('--ws', text, `scheme ${url.protocol} is not ws: or wss:`, allowed));
  return { kind: 'ws', url: url.href };
}

/** Split argv into flag values, booleans and positionals; unknown flags and missing values throw. */
function tokenize(argv: readonly string[]) {
  const values = new Map<ValueFlag, string>();
  const booleans = new Set<BooleanFlag>();
  const positionals: string[] = [];
  for (let i = 0; i < argv.length; i++) {
    const arg = argv[i];
    if (arg === '--') {
      positionals.push(...argv.slice(i + 1));
      break;
    }
    if (arg === '-h') {
      booleans.add('help');
      continue;
    }
    if (!arg.startsWith('--')) {
      if (arg.startsWith('-') && arg.length > 1) throw usage(unknownFlagText(arg, ALL_FLAGS));
      positionals.push(arg);
      continue;
    }
    const eq = arg.indexOf('=');
    const name = eq < 0 ? arg.slice(2) : arg.slice(2, eq);
    if ((BOOLEAN_FLAGS as readonly string[]).includes(name)) {
      if (eq >= 0) throw usage(`--${name} takes no value (got ${JSON.stringify(arg.slice(eq + 1))})`);
      booleans.add(name as BooleanFlag);
    } else if ((VALUE_FLAGS as readonly string[]).includes(name)) {
      let value: string | undefined;
      if (eq >= 0) value = arg.slice(eq + 1);
      else if (i + 1 < argv.length && !argv[i + 1].startsWith('--')) value = argv[++i];
      if (value === undefined || value === '') throw usage(`--${name} needs a value`);
      values.set(name as ValueFlag, value);
    } else {
      throw usage(unknownFlagText(arg, ALL_FLAGS));
    }
  }
  return { values, booleans, positionals };
}

function exclusive(present: (f: string) => boolean, a: string, b: string): void {
  if (present(a) && present(b)) throw usage(`--${a} and --${b} cannot be combined`);
}

/**
 * Parse `nullsteer send` arguments (without the subcommand name).
 * @throws SendError ERR_SEND_USAGE naming the flag at fault
 */
export function parseSendArgs(argv: readonly string[]): ParsedSendArgs {
  const { values, booleans, positionals } = tokenize(argv);
  const help = booleans.has('help');
  const has = (f: string) => values.has(f as ValueFlag) || booleans.has(f as BooleanFlag);
  if (help) return { options: { path: positionals[0] ?? '' }, stdin: false, quiet: booleans.has('quiet'), help };
  if (positionals.length === 0) throw usage('FILE is missing (- reads standard input)');
  if (positionals.length > 1) throw usage(`one FILE expected, got ${positionals.length}: ${positionals.map((p) => JSON.stringify(p)).join(' ')}`);
  const stdin = positionals[0] === '-';
  if (stdin) {
    if (!booleans.has('raw')) throw usage('- (standard input) needs --raw --channels M --rate HZ --encoding int16|int24|int32|float32: a pipe carries no header');
    if (has('speed')) throw usage('--speed does not apply to standard input (-): the source paces it, samples are sent as they arrive');
    if (has('loop')) throw usage('--loop needs a file: standard input (-) cannot be replayed');
  }
  exclusive(has, 'udp', 'ws');
  exclusive(has, 'speed', 'fast');
  exclusive(has, 'frame-samples', 'max-frame-bytes');

  const options: SendOptions = { path: positionals[0] };
  const udp = values.get('udp');
  const ws = values.get('ws');
  options.target = udp !== undefined ? parseUdp(udp) : ws !== undefined ? parseWs(ws) : { ...DEFAULT_UDP_TARGET };

  const rawFlags = ['channels', 'rate', 'encoding'] as const;
  if (booleans.has('raw')) {
    const missing = rawFlags.filter((f) => !values.has(f));
    if (missing.length) throw usage(`--raw needs ${missing.map((f) => `--${f}`).join(', ')} (a raw file has no header)`);
    const encoding = values.get('encoding')!;
    if (!(SAMPLE_ENCODINGS as readonly string[]).includes(encoding)) {
      throw flagError('--encoding', encoding, 'unknown encoding', SAMPLE_ENCODINGS.join(', '));
    }
    options.raw = {
      channels: intFlag('channels', values.get('channels')!, 1, 65535),
      sampleRateHz: intFlag('rate', values.get('rate')!, 1, 0xffffffff),
      encoding: encoding as SampleEncoding,
    };
  } else {
    const stray = rawFlags.find((f) => values.has(f));
    if (stray) throw usage(`--${stray} is only used with --raw (a WAV file carries its own format)`);
  }

  const speed = values.get('speed');
  if (!stdin) options.speed = booleans.has('fast') ? 'fast' : speed !== undefined ? parseSpeed(speed) : 1;
  const streamId = values.get('stream-id');
  if (streamId !== undefined) options.streamId = intFlag('stream-id', streamId, 0, 0xffffffff);
  const frameSamples = values.get('frame-samples');
  if (frameSamples !== undefined) options.samplesPerFrame = intFlag('frame-samples', frameSamples, 1, 65535);
  const maxFrameBytes = values.get('max-frame-bytes');
  if (maxFrameBytes !== undefined) options.maxFrameBytes = intFlag('max-frame-bytes', maxFrameBytes, FRAME_HEADER_BYTES + 2, MAX_FRAME_BYTES);
  const startSample = values.get('start-sample');
  if (startSample !== undefined) options.startSample = intFlag('start-sample', startSample, 0, Number.MAX_SAFE_INTEGER);
  if (!stdin) options.loop = booleans.has('loop');
  return { options, stdin, quiet: booleans.has('quiet'), help };
}
