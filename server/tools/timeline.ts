/**
 * `nullsteer analyze FILE --timeline DIR …`: the time-resolved re-analysis of a raw capture. The
 * file goes through the live engine itself (STFT, worker pool, fast kernels, the same scan schedule)
 * as fast as the machine allows, with the parameters of the recording's sidecar and its parameter
 * changes replayed at their sample indices, or with a preset. Writes to DIR:
 *   history.png   the direction history, one row per spectrum row (time downward), nightfield scale,
 *                 with azimuth and time axes, a colour bar in dB and a caption (timeline-report.ts);
 *                 --plain: the bare history only, one pixel per row and azimuth
 *   history.csv   time_s,stream_time_s,sample_index (shared/time-columns.ts: time_s from the file's
 *                 start), then the level in dB per direction (the image's method)
 *   history.json  grid, parameters, changes and every row (both methods, peaks)
 *   peaks.csv     every peak of every row (the same time columns); tracks.json  peaks linked into tracks row to row
 * Progress goes to stderr; the last line gives the speed as a multiple of real time.
 */
import { mkdirSync, readFileSync, writeFileSync } from 'node:fs';
import { basename, join } from 'node:path';
import { parseArgs } from 'node:util';
import { COLORMAP_RGB, COLORMAP_SIZE } from '../../shared/colormap.ts';
import { decodeInterleaved } from '../../shared/frame.ts';
import type { ArrayGeometry, Block } from '../../shared/types.ts';
import { validateGeometry } from '../config/array-file.ts';
import { loadArrayFile } from '../config/load.ts';
import { TIMELINE_OPTIONS } from './timeline-flags.ts';
import { Engine, type EngineRow } from '../engine/engine.ts';
import { FFT_SIZES, patchParams, type ProcessingParams } from '../engine/params.ts';
import { encodePng } from '../io/png.ts';
import { openWav } from '../io/wav.ts';
import { TIME_COLUMNS_HEADER, timeColumns } from '../../shared/time-columns.ts';
import { reportHistoryImage } from './timeline-report.ts';
import type { FileSampleReader } from '../io/raw.ts';

export const TIMELINE_USAGE = `usage: nullsteer analyze FILE.wav --timeline DIR [--array ARRAY.json] [--preset PRESET.json] [--no-replay]
         [--image-method mvdr|conventional] [--plain] [--workers N] [--c M_PER_S] [--quiet]
  Parameters: the recording's sidecar (FILE.json: parameters at its start, changes replayed at their
  sample index) unless --preset gives a preset file (then no replay); --no-replay keeps the start ones.
  history.png has azimuth and time axes, a dB colour bar and a caption; --plain writes the bare history.`;

/** What the engine starts from before the file's parameters replace every field. */
const BASE: ProcessingParams = {
  lambda: 0.99,
  loading: { mode: 'relative', ratio: 0.01 },
  bandHz: [300, 6000],
  grid: { azimuthDeg: { startDeg: 0, stopDeg: 359, stepDeg: 1 } },
  methods: ['mvdr', 'conventional'],
  spectrumRateHz: 20,
  normalise: false,
  fftSize: 512,
};

/** Full parameters from a sidecar, preset or change, checked like a REST PUT. @throws Error naming `what` */
export function checkParams(p: unknown, sampleRateHz: number, what: string): ProcessingParams {
  try {
    const n = typeof p === 'object' && p !== null && (FFT_SIZES as readonly number[]).includes((p as { fftSize?: number }).fftSize ?? 0) ? (p as { fftSize: number }).fftSize : BASE.fftSize;
    return patchParams(BASE, p, { sampleRateHz, hop: n / 2 });
  } catch (e) {
    throw new Error(`${what}: ${(e as Error).message}`);
  }
}

export interface TimelineChange {
  sampleIndex: number;
  params: ProcessingParams;
}

export interface TimelineOptions {
  geometry: ArrayGeometry;
  params: ProcessingParams;
  /** Applied when the stream reaches their sample index (ascending). */
  changes: TimelineChange[];
  /** Stream sample index of the file's first frame (rows keep the live stream's clock). */
  startSampleIndex: number;
  workers: number;
  speedOfSoundMps: number;
  progress?: (framesDone: number, framesTotal: number) => void;
}

export interface TimelineResult {
  rows: EngineRow[];
  /** Grid of each row is the one in force when it was made; this is the last one. */
  azimuthDeg: number[];
  elevationDeg: number[];
  frames: number;
  sampleRateHz: number;
  wallS: number;
}

/** Run a whole file through a fresh engine; the rows in order. */
export async function runTimeline(reader: FileSampleReader, o: TimelineOptions): Promise<TimelineResult> {
  const info = reader.info;
  const M = info.channels;
  const rows: EngineRow[] = [];
  const t0 = performance.now();
  const engine = await Engine.create({ geometry: o.geometry, sampleRateHz: info.sampleRateHz, params: o.params, workers: o.workers, speedOfSoundMps: o.speedOfSoundMps, onRow: (r) => rows.push(r), shedding: false });
  try {
    const chunkFrames = 8192;
    let done = 0;
    let next = 0; // index into o.changes
    const push = async (data: Float32Array, at: number, n: number) => {
      const block: Block = { streamId: 0, sampleIndex: o.startSampleIndex + at, sampleRateHz: info.sampleRateHz, channels: M, frames: n, data, gap: false, discontinuity: false };
      await engine.pushAsync(block);
    };
    // One read buffer and one planar buffer for every chunk: the engine has consumed a block when
    // pushAsync resolves.
    const raw = new Uint8Array(chunkFrames * info.blockAlignBytes);
    const planar = new Float32Array(M * chunkFrames);
    while (done < info.frames) {
      const bytes = await reader.readFrames(done, chunkFrames, raw);
      const n = bytes.byteLength / info.blockAlignBytes;
      const data = planar.subarray(0, M * n);
      if (!decodeInterleaved(bytes, M, n, info.encoding, data)) throw new RangeError(`the file holds NaN or infinite samples between frames ${done} and ${done + n}`);
      // Split at each change inside this chunk, so it applies from its exact sample on.
      let from = 0;
      while (next < o.changes.length && o.changes[next].sampleIndex - o.startSampleIndex < done + n) {
        const at = Math.max(0, o.changes[next].sampleIndex - o.startSampleIndex - done);
        if (at > from) await push(planarSlice(data, M, n, from, at), done + from, at - from);
        from = Math.max(from, at);
        await engine.drain();
        await engine.setParams(o.changes[next].params);
        next++;
      }
      if (from < n) await push(from === 0 ? data : planarSlice(data, M, n, from, n), done + from, n - from);
      done += n;
      o.progress?.(done, info.frames);
    }
    await engine.drain();
    const g = engine.grid;
    return {
      rows,
      azimuthDeg: Array.from(g.azimuthDeg.subarray(0, g.nAz)),
      elevationDeg: Array.from({ length: g.nEl }, (_, i) => g.elevationDeg[i * g.nAz]),
      frames: done,
      sampleRateHz: info.sampleRateHz,
      wallS: (performance.now() - t0) / 1000,
    };
  } finally {
    await engine.close();
  }
}

/** Frames [a, b) of a planar block of n frames per channel, as a new planar block. */
function planarSlice(data: Float32Array, M: number, n: number, a: number, b: number): Float32Array {
  const out = new Float32Array(M * (b - a));
  for (let c = 0; c < M; c++) out.set(data.subarray(c * n + a, c * n + b), c * (b - a));
  return out;
}

export interface Track {
  id: number;
  method: 'mvdr' | 'conventional';
  points: { sampleIndex: number; azimuthDeg: number; elevationDeg: number; levelDb: number }[];
}

/** Link each row's peaks to the nearest track of the previous row within `gateDeg` (azimuth, wrapped). */
export function linkTracks(rows: EngineRow[], method: 'mvdr' | 'conventional', gateDeg = 5): Track[] {
  const tracks: Track[] = [];
  let open: Track[] = [];
  const dist = (a: number, b: number) => Math.abs((((a - b) % 360) + 540) % 360 - 180);
  for (const r of rows) {
    const next: Track[] = [];
    for (const p of r.peaks[method]) {
      let best: Track | null = null;
      let bestD = gateDeg;
      for (const t of open) {
        const last = t.points[t.points.length - 1];
        const d = dist(last.azimuthDeg, p.azimuthDeg);
        if (d <= bestD && !next.includes(t)) {
          best = t;
          bestD = d;
        }
      }
      const pt = { sampleIndex: r.sampleIndex, azimuthDeg: p.azimuthDeg, elevationDeg: p.elevationDeg, levelDb: p.levelDb };
      if (best) {
        best.points.push(pt);
        next.push(best);
      } else {
        const t: Track = { id: tracks.length + 1, method, points: [pt] };
        tracks.push(t);
        next.push(t);
      }
    }
    open = next;
  }
  return tracks;
}

/** The coloured history before encoding: RGB bytes and the colour scale's ends in dB. */
export interface HistoryPixels {
  width: number;
  height: number;
  rgb: Uint8Array;
  lowDb: number;
  highDb: number;
}

/** The history image: one pixel row per spectrum row, one column per azimuth (max over elevation). */
export function historyImage(rows: EngineRow[], method: 'mvdr' | 'conventional', rangeDb = 30): { width: number; height: number; png: Uint8Array } {
  const px = historyPixels(rows, method, rangeDb);
  return { width: px.width, height: px.height, png: encodePng(px.width, px.height, px.rgb) };
}

/** The pixels of {@link historyImage}: the scale runs from the largest level down `rangeDb`. */
export function historyPixels(rows: EngineRow[], method: 'mvdr' | 'conventional', rangeDb = 30): HistoryPixels {
  const pick = (r: EngineRow) => (method === 'mvdr' ? r.mvdrDb : r.conventionalDb);
  const width = rows.reduce((w, r) => Math.max(w, r.nAz), 1);
  const height = Math.max(1, rows.length);
  let hi = -Infinity;
  for (const r of rows) {
    const d = pick(r);
    if (d) for (let i = 0; i < d.length; i++) if (d[i] > hi) hi = d[i];
  }
  const lo = hi - rangeDb;
  const rgb = new Uint8Array(width * height * 3);
  rows.forEach((r, y) => {
    const d = pick(r);
    for (let x = 0; x < width; x++) {
      // A coarser row (load shedding, grid change) spreads over the image's columns.
      const a = Math.min(r.nAz - 1, Math.floor((x * r.nAz) / width));
      let v = -Infinity;
      if (d) for (let e = 0; e < r.nEl; e++) v = Math.max(v, d[e * r.nAz + a]);
      const t = Number.isFinite(v) && hi > lo ? (v - lo) / (hi - lo) : 0;
      const k = Math.max(0, Math.min(COLORMAP_SIZE - 1, Math.round(t * (COLORMAP_SIZE - 1))));
      rgb.set(COLORMAP_RGB.subarray(3 * k, 3 * k + 3), (y * width + x) * 3);
    }
  });
  return { width, height, rgb, lowDb: lo, highDb: hi };
}

export interface TimelineIo {
  out?: (s: string) => void;
  err?: (s: string) => void;
  /** Progress line writer; default: stderr, rewritten in place on a terminal. */
  progress?: (s: string) => void;
}

class UsageError extends Error {}

interface SidecarDoc {
  startSampleIndex?: number;
  startWallClock?: string;
  params?: unknown;
  array?: unknown;
  changes?: { sampleIndex: number; params?: unknown }[];
  source?: { speedOfSoundMps?: number };
}

export async function timelineCommand(argv: string[], io: TimelineIo = {}): Promise<number> {
  const out = io.out ?? ((s: string) => process.stdout.write(`${s}\n`));
  const err = io.err ?? ((s: string) => process.stderr.write(`${s}\n`));
  const tty = process.stderr.isTTY === true;
  const progressOut = io.progress ?? ((s: string) => process.stderr.write(tty ? `\r${s}` : `${s}\n`));
  let reader: FileSampleReader | null = null;
  try {
    let parsed;
    try {
      parsed = parseArgs({
        args: argv,
        allowPositionals: true,
        strict: true,
        options: TIMELINE_OPTIONS,
      });
    } catch (e) {
      throw new UsageError((e as Error).message);
    }
    const v = parsed.values;
    if (parsed.positionals.length !== 1) throw new UsageError(`give exactly one FILE, got ${parsed.positionals.length}`);
    const file = parsed.positionals[0];
    const outDir = v.timeline!;
    const method = (v['image-method'] ?? 'mvdr') as 'mvdr' | 'conventional';
    if (method !== 'mvdr' && method !== 'conventional') throw new UsageError(`--image-method ${method}: allowed mvdr, conventional`);
    const workers = v.workers === undefined ? 2 : Number(v.workers);
    if (!Number.isInteger(workers) || workers < 1 || workers > 64) throw new UsageError(`--workers ${v.workers}: allowed an integer 1–64`);
    reader = await openWav(file);
    const info = reader.info;
    let side: SidecarDoc = {};
    const sideFile = file.replace(/\.wav$/i, '.json');
    try {
      side = JSON.parse(readFileSync(sideFile, 'utf8')) as SidecarDoc;
    } catch (e) {
      if ((e as NodeJS.ErrnoException).code !== 'ENOENT') throw new Error(`${sideFile}: ${(e as Error).message}`);
    }
    const c = v.c !== undefined ? Number(v.c) : (side.source?.speedOfSoundMps ?? 343.2);
    if (!(c >= 200 && c <= 2000)) throw new UsageError(`--c ${v.c}: allowed a number 200–2000`);
    const geometry = v.array ? (await loadArrayFile(v.array)).geometry : side.array ? validateGeometry(side.array, sideFile) : null;
    if (!geometry) throw new UsageError(`no array geometry: give --array (the sidecar ${sideFile} has none)`);
    if (geometry.positions.length !== info.channels) throw new UsageError(`${file} has ${info.channels} channels, the array ${geometry.name} has ${geometry.positions.length}`);
    let params: ProcessingParams;
    let changes: TimelineChange[] = [];
    let source: string;
    if (v.preset) {
      let doc: { params?: unknown };
      try {
        doc = JSON.parse(readFileSync(v.preset, 'utf8'));
      } catch (e) {
        throw new UsageError(`--preset ${v.preset}: ${(e as Error).message}`);
      }
      params = checkParams(doc.params, info.sampleRateHz, `preset ${basename(v.preset)}`);
      source = `preset ${basename(v.preset)}`;
    } else {
      if (side.params === undefined) throw new UsageError(`no parameters: ${sideFile} is missing or has none; give --preset`);
      params = checkParams(side.params, info.sampleRateHz, `${basename(sideFile)} params`);
      if (!v['no-replay']) {
        changes = (side.changes ?? [])
          .filter((ch) => ch.params !== undefined)
          .map((ch, i) => ({ sampleIndex: ch.sampleIndex, params: checkParams(ch.params, info.sampleRateHz, `${basename(sideFile)} change ${i + 1}`) }))
          .sort((a, b) => a.sampleIndex - b.sampleIndex);
      }
      source = `${basename(sideFile)}${changes.length ? `, ${changes.length} change(s) replayed` : ''}`;
    }
    let lastPct = -1;
    const result = await runTimeline(reader, {
      geometry,
      params,
      changes,
      startSampleIndex: side.startSampleIndex ?? 0,
      workers,
      speedOfSoundMps: c,
      progress: v.quiet
        ? undefined
        : (doneFrames, total) => {
            const pct = Math.floor((100 * doneFrames) / Math.max(1, total));
            if (tty ? pct !== lastPct : pct >= lastPct + 10 || doneFrames === total) {
              lastPct = pct;
              progressOut(`analyze: ${pct}% (${(doneFrames / info.sampleRateHz).toFixed(1)} of ${(total / info.sampleRateHz).toFixed(1)} s)`);
            }
          },
    });
    if (!v.quiet && tty) process.stderr.write('\n');
    mkdirSync(outDir, { recursive: true });
    const startWallMs = typeof side.startWallClock === 'string' ? Date.parse(side.startWallClock) : Number.NaN;
    writeOutputs(outDir, file, result, params, changes, method, {
      plain: v.plain === true,
      arrayName: geometry.name,
      startSampleIndex: side.startSampleIndex ?? 0,
      startUtcMs: Number.isFinite(startWallMs) ? startWallMs : null,
    });
    const signalS = result.frames / result.sampleRateHz;
    const speed = signalS / result.wallS;
    out(`${result.rows.length} rows from ${signalS.toFixed(2)} s of signal in ${result.wallS.toFixed(2)} s: ${speed.toFixed(1)}× real time (parameters: ${source}) → ${outDir}`);
    return 0;
  } catch (e) {
    if (e instanceof UsageError) {
      err(`nullsteer analyze: ${e.message}\n${TIMELINE_USAGE}`);
      return 2;
    }
    err(`nullsteer analyze: ${(e as Error).message}`);
    return 1;
  } finally {
    await reader?.close();
  }
}

const f3 = (x: number) => (Number.isFinite(x) ? x.toFixed(3) : '');

interface OutputInfo {
  /** Bare history image (today's) instead of the annotated one. */
  plain: boolean;
  arrayName: string;
  /** Stream sample index of the file's first frame: time_s counts from here. */
  startSampleIndex: number;
  startUtcMs: number | null;
}

function writeOutputs(dir: string, file: string, r: TimelineResult, params: ProcessingParams, changes: TimelineChange[], method: 'mvdr' | 'conventional', info: OutputInfo): void {
  const fs = r.sampleRateHz;
  const px = historyPixels(r.rows, method);
  const report = info.plain
    ? null
    : reportHistoryImage(px, r.rows, r.azimuthDeg, method, { arrayName: info.arrayName, params, changes: changes.length, sampleRateHz: fs, startSampleIndex: info.startSampleIndex, frames: r.frames, startUtcMs: info.startUtcMs });
  writeFileSync(join(dir, 'history.png'), report ? report.png : encodePng(px.width, px.height, px.rgb));
  const t = (row: EngineRow) => timeColumns(row.sampleIndex, info.startSampleIndex, fs);
  const lines = [
    `# ${basename(file)}: ${method} level in dB per direction, one line per spectrum row; time_s from the file's start (stream sample ${info.startSampleIndex}), stream_time_s = sample_index / ${fs} Hz`,
    `${TIME_COLUMNS_HEADER},${r.azimuthDeg.map((a) => `az_${a}`).join(',')}`,
  ];
  for (const row of r.rows) {
    const d = method === 'mvdr' ? row.mvdrDb : row.conventionalDb;
    lines.push(`${t(row)},${d ? Array.from(d.subarray(0, row.nAz), f3).join(',') : ''}`);
  }
  writeFileSync(join(dir, 'history.csv'), `${lines.join('\n')}\n`);
  const peaks = [`${TIME_COLUMNS_HEADER},method,rank,azimuth_deg,elevation_deg,level_db`];
  for (const row of r.rows)
    for (const m of ['mvdr', 'conventional'] as const)
      row.peaks[m].forEach((p, k) => peaks.push(`${t(row)},${m},${k + 1},${f3(p.azimuthDeg)},${f3(p.elevationDeg)},${f3(p.levelDb)}`));
  writeFileSync(join(dir, 'peaks.csv'), `${peaks.join('\n')}\n`);
  writeFileSync(join(dir, 'tracks.json'), `${JSON.stringify({ gateDeg: 5, tracks: [...linkTracks(r.rows, 'mvdr'), ...linkTracks(r.rows, 'conventional')] })}\n`);
  const doc = {
    file: basename(file),
    sampleRateHz: fs,
    startSampleIndex: info.startSampleIndex,
    // Where history.png's pixels are: the history raster (one pixel per row and azimuth) at `raster`
    // inside the image, and the colour scale's ends.
    image: {
      method,
      width: report ? report.width : px.width,
      height: report ? report.height : px.height,
      raster: report ? report.layout.raster : { x: 0, y: 0, w: px.width, h: px.height },
      lowDb: Number.isFinite(px.lowDb) ? px.lowDb : null,
      highDb: Number.isFinite(px.highDb) ? px.highDb : null,
    },
    frames: r.frames,
    params,
    changes,
    grid: { azimuthDeg: r.azimuthDeg, elevationDeg: r.elevationDeg },
    rows: r.rows.map((row) => ({
      seq: row.seq,
      sampleIndex: row.sampleIndex,
      timeS: row.sampleIndex / fs,
      nAz: row.nAz,
      nEl: row.nEl,
      mvdrDb: row.mvdrDb ? Array.from(row.mvdrDb) : null,
      conventionalDb: row.conventionalDb ? Array.from(row.conventionalDb) : null,
      peaks: row.peaks,
    })),
  };
  writeFileSync(join(dir, 'history.json'), `${JSON.stringify(doc)}\n`);
}
