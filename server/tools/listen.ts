/**
 * `nullsteer listen --beam ID`: one beam's audio, live, on standard output — float32 little-endian,
 * mono, at the stream's sample rate — for `aplay`, `sox` or a file. The format is printed once on
 * standard error.
 *
 * It listens to the beam-audio WebSocket (`outputs.streamPath`, default /api/beams/audio), whose
 * frames carry every beam, one channel each in the order of `GET /api/beams`
 * (shared/beam-listen.ts). The output is sample-exact: a sample-index jump in the stream (frames
 * the server dropped for a slow listener, frames skipped here while the beam list was being
 * fetched again, frames skipped while standard output was full) is written as zeros of exactly its
 * length and counted on standard error; a jump beyond {@link MAX_GAP_S} starts a new timeline
 * instead (said on standard error). Memory is bounded: while more than {@link MAX_BACKLOG_BYTES}
 * wait to be written, incoming frames are skipped (they become a counted gap).
 * A closed standard output (EPIPE: `| head -c …`, the player quit) ends it quietly with exit 0.
 */
import type { Writable } from 'node:stream';
import WebSocket from 'ws';
import { BeamTimeline, beamChannel, frameChannels, MAX_BEAM_FRAME_SAMPLES, readBeamChannel } from '../../shared/beam-listen.ts';
import { FlagError, parseFlags } from './flag-suggest.ts';

export const DEFAULT_LISTEN_URL = 'http://127.0.0.1:8750';
export const DEFAULT_STREAM_PATH = '/api/beams/audio';
/** Largest sample-index jump written as zeros, seconds; beyond it the output starts a new timeline. */
export const MAX_GAP_S = 10;
/** Bytes waiting for standard output beyond which incoming frames are skipped (≈ 10 s at 48 kHz). */
export const MAX_BACKLOG_BYTES = 2 << 20;
/** Gaps reported one by one on standard error; later ones only in the summary. */
const GAP_LINES = 20;

export const LISTEN_USAGE = `usage: nullsteer listen --beam ID [--url URL] [--token T] [--seconds S]
  Writes one beam's audio to standard output as it arrives: float32 little-endian, mono, at the
  stream's sample rate (the format is printed on standard error). Gaps in the stream are written as
  zeros of exactly their length and counted on standard error.
  --beam     the beam's id (GET /api/beams, or the dashboard, lists them)
  --url      the server: http://HOST:PORT or ws://HOST:PORT (default ${DEFAULT_LISTEN_URL}); a path
             in it is taken as the beam-audio path (default: the server's outputs.streamPath)
  --token    the server's token (default: the NULLSTEER_TOKEN environment variable); listening
             needs it whenever the server has one
  --seconds  stop after this much audio, 0 < S ≤ 86400 (default: until interrupted)
  e.g. nullsteer listen --beam 1 | aplay -t raw -f FLOAT_LE -r 48000 -c 1
       nullsteer listen --beam 1 --seconds 60 | sox -t raw -e floating-point -b 32 -L -r 48000 -c 1 - beam-1.wav
  Steered audio on headphones can be loud: start low. Recording or listening to people's speech may
  be regulated where you are — follow local law.`;

const OPTIONS = {
  beam: { type: 'string' },
  url: { type: 'string' },
  token: { type: 'string' },
  seconds: { type: 'string' },
  help: { type: 'boolean', short: 'h' },
} as const;

export interface ListenArgs {
  beamId: number;
  /** http(s) base of the server (no path). */
  httpBase: string;
  /** Beam-audio path from --url, or null to ask the server. */
  streamPath: string | null;
  token: string | null;
  seconds: number | null;
  help: boolean;
}

class UsageError extends Error {}

/** Parse listen's flags; throws FlagError or UsageError with a one-line message. */
export function parseListenArgs(argv: string[], env: NodeJS.ProcessEnv = {}): ListenArgs {
  const { values, positionals } = parseFlags(argv, OPTIONS, true);
  const none: ListenArgs = { beamId: 0, httpBase: '', streamPath: null, token: null, seconds: null, help: true };
  if (values.help === true) return none;
  if (positionals.length > 0) throw new UsageError(`unexpected argument ${JSON.stringify(positionals[0].slice(0, 64))}`);
  if (values.beam === undefined) throw new UsageError('--beam ID is required');
  if (!/^\d{1,9}$/.test(values.beam) || Number(values.beam) < 1) throw new UsageError(`--beam ${JSON.stringify(values.beam.slice(0, 64))}: a beam id is a whole number ≥ 1`);
  let url: URL;
  try {
    url = new URL(values.url ?? DEFAULT_LISTEN_URL);
  } catch {
    throw new UsageError(`--url ${JSON.stringify((values.url ?? '').slice(0, 200))}: not a URL; e.g. ws://127.0.0.1:8750`);
  }
  const scheme: Record<string, string> = { 'ws:': 'http:', 'wss:': 'https:', 'http:': 'http:', 'https:': 'https:' };
  if (!(url.protocol in scheme)) throw new UsageError(`--url: ${url.protocol} is not allowed; use http://, https://, ws:// or wss://`);
  let seconds: number | null = null;
  if (values.seconds !== undefined) {
    seconds = Number(values.seconds);
    if (values.seconds.trim() === '' || !Number.isFinite(seconds) || seconds <= 0 || seconds > 86400) throw new UsageError(`--seconds ${JSON.stringify(values.seconds.slice(0, 64))}: allowed 0 < S ≤ 86400`);
  }
  const token = values.token ?? env.NULLSTEER_TOKEN ?? null;
  return {
    beamId: Number(values.beam),
    httpBase: `${scheme[url.protocol]}//${url.host}`,
    streamPath: url.pathname !== '/' && url.pathname !== '' ? url.pathname : null,
    token: token === null || token === '' ? null : token,
    seconds,
    help: false,
  };
}

export interface ListenIo {
  /** Where the samples go (default process.stdout). */
  out?: Writable;
  /** One line to standard error (default process.stderr). */
  err?: (line: string) => void;
  env?: NodeJS.ProcessEnv;
  /** Aborting ends the listening (exit 0, with the summary); the CLI aborts it on SIGINT/SIGTERM. */
  signal?: AbortSignal;
}

interface BeamInfo {
  id: number;
  azimuthDeg?: number;
  elevationDeg?: number;
  method?: string;
}

/** What a beam list says of each beam, one short phrase (`1 (60°, mvdr)`). */
function describeBeam(b: BeamInfo): string {
  const az = typeof b.azimuthDeg === 'number' ? `${Number(b.azimuthDeg.toFixed(1))}°` : '?°';
  const el = typeof b.elevationDeg === 'number' && b.elevationDeg !== 0 ? ` / ${Number(b.elevationDeg.toFixed(1))}°` : '';
  return `${b.id} (${az}${el}${typeof b.method === 'string' ? `, ${b.method}` : ''})`;
}

class ListenError extends Error {
  constructor(message: string, readonly exitCode: number) {
    super(message);
  }
}

async function getJson(url: string, token: string | null): Promise<unknown> {
  let res: Response;
  try {
    res = await fetch(url, { headers: { accept: 'application/json', ...(token ? { authorization: `Bearer ${token}` } : {}) } });
  } catch (e) {
    const cause = (e as { cause?: { code?: string; message?: string } }).cause;
    throw new ListenError(`cannot reach ${new URL(url).origin} (${cause?.code ?? cause?.message ?? (e as Error).message})`, 1);
  }
  const text = await res.text();
  let json: unknown = null;
  try {
    json = JSON.parse(text);
  } catch {
    json = null;
  }
  if (!res.ok) {
    const msg = (json as { error?: { message?: unknown } } | null)?.error?.message;
    const hint = res.status === 401 ? (token ? ' (the token was refused)' : ' (this server needs a token: --token or NULLSTEER_TOKEN)') : '';
    throw new ListenError(`${new URL(url).pathname}: HTTP ${res.status}${typeof msg === 'string' ? ` ${msg}` : ''}${hint}`, 1);
  }
  return json;
}

async function beamList(base: string, token: string | null): Promise<BeamInfo[]> {
  const j = (await getJson(`${base}/api/beams`, token)) as { beams?: unknown } | null;
  if (!j || !Array.isArray(j.beams)) throw new ListenError('/api/beams: the answer has no beam list', 1);
  return j.beams.filter((b): b is BeamInfo => typeof b === 'object' && b !== null && Number.isInteger((b as BeamInfo).id));
}

/** Float32 little-endian bytes of x[from … to). */
function le32(x: Float32Array, from: number, to: number): Buffer {
  const b = Buffer.allocUnsafe(4 * (to - from));
  for (let i = from, p = 0; i < to; i++, p += 4) b.writeFloatLE(x[i], p);
  return b;
}

export async function listenCommand(argv: string[], io: ListenIo = {}): Promise<number> {
  const out = io.out ?? process.stdout;
  const err = io.err ?? ((l: string) => void process.stderr.write(`${l}\n`));
  const say = (l: string) => err(`nullsteer listen: ${l}`);
  let a: ListenArgs;
  try {
    a = parseListenArgs(argv, io.env ?? process.env);
  } catch (e) {
    if (e instanceof FlagError || e instanceof UsageError) {
      err(`nullsteer listen: ${e.message}\n${LISTEN_USAGE}`);
      return 2;
    }
    throw e;
  }
  if (a.help) {
    err(LISTEN_USAGE);
    return 0;
  }
  let list: BeamInfo[];
  let path: string;
  try {
    list = await beamList(a.httpBase, a.token);
    if (!list.some((b) => b.id === a.beamId)) {
      say(list.length === 0 ? `no beam ${a.beamId}: the server has no beams now (add one with POST /api/beams or in the dashboard)` : `no beam ${a.beamId}; the beams are: ${list.map(describeBeam).join(', ')}`);
      return 2;
    }
    if (a.streamPath !== null) path = a.streamPath;
    else {
      const rec = (await getJson(`${a.httpBase}/api/recording`, a.token).catch(() => null)) as { streamOut?: { wsPath?: unknown } } | null;
      path = typeof rec?.streamOut?.wsPath === 'string' ? rec.streamOut.wsPath : DEFAULT_STREAM_PATH;
    }
  } catch (e) {
    if (e instanceof ListenError) {
      say(e.message);
      return e.exitCode;
    }
    throw e;
  }
  return stream(a, list, path, out, say, io.signal);
}

/** The listening itself, once the beam is known to exist. */
function stream(a: ListenArgs, firstList: BeamInfo[], path: string, out: Writable, say: (l: string) => void, signal?: AbortSignal): Promise<number> {
  const wsUrl = `${a.httpBase.replace(/^http/, 'ws')}${path}`;
  const beam = firstList.find((b) => b.id === a.beamId)!;
  let listIds = firstList.map((b) => b.id);
  let listFetch: Promise<void> | null = null;
  const scratch = new Float32Array(MAX_BEAM_FRAME_SAMPLES);
  let timeline: BeamTimeline | null = null;
  let sampleRateHz = 0;
  let limit = Infinity; // samples to write (from --seconds, once the rate is known)
  let written = 0;
  let firstIndex = -1;
  let skippedFull = 0;
  let skippedUnmapped = 0;
  let gapLines = 0;
  let finished = false;

  return new Promise<number>((resolve) => {
    const ws = new WebSocket(wsUrl, { headers: a.token ? { authorization: `Bearer ${a.token}` } : {} });
    const finish = (code: number, line?: string) => {
      if (finished) return;
      finished = true;
      ws.removeAllListeners('message');
      ws.terminate();
      signal?.removeEventListener('abort', onAbort);
      if (line) say(line);
      if (timeline) {
        const rate = sampleRateHz;
        say(`wrote ${written} samples (${(written / rate).toFixed(3)} s) of beam ${a.beamId} from sample index ${firstIndex}; gaps ${timeline.gaps} (${timeline.gapSamples} zero samples), new timelines ${timeline.restarts}, frames skipped while standard output was full ${skippedFull}, while the beam list was stale ${skippedUnmapped}`);
      }
      // Exit once what was written has left (or at once when standard output is gone).
      if (epipe || out.destroyed || out.writableLength === 0) resolve(code);
      else out.write(Buffer.alloc(0), () => resolve(code)); // called once the writes before it are done (or failed)
    };
    let epipe = false;
    const onOutError = (e: NodeJS.ErrnoException) => {
      // The reader went away (`| head`, the player quit): the job is done, quietly.
      if (e.code === 'EPIPE' || e.code === 'ERR_STREAM_DESTROYED') {
        epipe = true;
        finish(0);
      } else finish(1, `standard output: ${e.message}`);
    };
    out.on('error', onOutError);
    const onAbort = () => finish(0);
    if (signal?.aborted) return finish(0);
    signal?.addEventListener('abort', onAbort, { once: true });

    const write = (b: Buffer) => {
      if (!epipe && !out.destroyed) out.write(b);
    };

    ws.on('unexpected-response', (req, res) => {
      let body = '';
      res.setEncoding('utf8');
      res.on('data', (d: string) => (body = (body + d).slice(0, 2000)));
      res.on('end', () => {
        req.destroy();
        let msg = '';
        try {
          const m = (JSON.parse(body) as { error?: { message?: unknown } }).error?.message;
          if (typeof m === 'string') msg = ` ${m}`;
        } catch {
          // not JSON: the status alone
        }
        const hint = res.statusCode === 401 ? (a.token ? ' (the token was refused)' : ' (this server needs a token: --token or NULLSTEER_TOKEN)') : '';
        finish(1, `${path}: HTTP ${res.statusCode}${msg}${hint}`);
      });
    });
    ws.on('error', (e) => finish(1, `${wsUrl}: ${e.message}`));
    ws.on('close', (code, reason) => {
      const why = code === 1013 ? 'the server closed the stream: this listener did not keep up (1013)' : code === 1001 ? 'the server is shutting down (1001)' : `the stream closed (${code}${reason.length ? ` ${reason.toString().slice(0, 200)}` : ''})`;
      finish(1, why);
    });
    const refetch = (channels: number) => {
      if (listFetch) return;
      listFetch = beamList(a.httpBase, a.token)
        .then((l) => {
          listIds = l.map((b) => b.id);
          if (listIds.length === channels && !listIds.includes(a.beamId)) finish(1, `beam ${a.beamId} was removed`);
        })
        .catch((e: Error) => finish(1, e.message))
        .finally(() => (listFetch = null));
    };

    ws.on('message', (data: Buffer, isBinary: boolean) => {
      if (finished || !isBinary) return;
      const bytes = new Uint8Array(data.buffer, data.byteOffset, data.byteLength);
      const channels = frameChannels(bytes);
      if (channels === null) return;
      const ch = beamChannel(listIds, a.beamId, channels);
      if (ch < 0) {
        // A beam came or went since the list was fetched: skip (a counted gap), ask again.
        skippedUnmapped++;
        refetch(channels);
        return;
      }
      const r = readBeamChannel(bytes, ch, scratch);
      if (!r.ok) return;
      if (timeline === null) {
        sampleRateHz = r.sampleRateHz;
        timeline = new BeamTimeline(Math.round(MAX_GAP_S * sampleRateHz));
        if (a.seconds !== null) limit = Math.max(1, Math.round(a.seconds * sampleRateHz));
        firstIndex = r.firstSample;
        const rate = sampleRateHz;
        say(`beam ${describeBeam(beam)}: float32le, ${rate} Hz, 1 channel, from sample index ${r.firstSample}`);
        say(`e.g. nullsteer listen --beam ${a.beamId} | aplay -t raw -f FLOAT_LE -r ${rate} -c 1`);
        say(`  or nullsteer listen --beam ${a.beamId} | sox -t raw -e floating-point -b 32 -L -r ${rate} -c 1 - beam-${a.beamId}.wav`);
      } else if (r.sampleRateHz !== sampleRateHz) {
        return finish(1, `the stream's sample rate changed (${sampleRateHz} → ${r.sampleRateHz} Hz); stopping`);
      }
      if (out.writableLength > MAX_BACKLOG_BYTES) {
        skippedFull++; // written later as zeros of its length (the next frame placed is a jump)
        return;
      }
      const p = timeline.place(r.firstSample, r.frames);
      if (p.skip >= r.frames) return;
      if (p.restart && written > 0) say(`the stream jumped to sample index ${r.firstSample} (more than ${MAX_GAP_S} s): nothing written for the jump`);
      if (p.zeros > 0) {
        const z = Math.min(p.zeros, limit - written);
        write(Buffer.alloc(4 * z));
        written += z;
        if (gapLines < GAP_LINES) say(`gap of ${p.zeros} samples before sample index ${r.firstSample}: written as zeros`);
        else if (gapLines === GAP_LINES) say('further gaps are counted in the summary only');
        gapLines++;
      }
      const n = Math.min(r.frames - p.skip, limit - written);
      if (n > 0) {
        write(le32(scratch, p.skip, p.skip + n));
        written += n;
      }
      if (written >= limit) finish(0);
    });
  });
}

/** `nullsteer listen` from the command line: SIGINT and SIGTERM end it with the summary (exit 0). */
export async function listenMain(argv: string[]): Promise<number> {
  const ac = new AbortController();
  const stop = () => ac.abort();
  process.once('SIGINT', stop);
  process.once('SIGTERM', stop);
  try {
    return await listenCommand(argv, { signal: ac.signal });
  } finally {
    process.off('SIGINT', stop);
    process.off('SIGTERM', stop);
  }
}
