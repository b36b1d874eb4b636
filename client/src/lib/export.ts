/**
 * Exports from the dashboard: the direction history as PNG (by default the report image of
 * shared/report-image.ts, the same picture `nullsteer analyze --timeline` writes; plain: the canvas
 * as drawn), the current direction spectrum as CSV. The text, the report pixels and the file names
 * are pure (tested in test/unit/export.test.ts); only {@link downloadBlob}, {@link canvasPng} and
 * {@link rgbaPng} touch the DOM.
 */
import type { ProcessingDerived, ProcessingParams } from '../../../shared/messages.ts';
import { colorize } from '../../../shared/colormap.ts';
import { reportCaption } from '../../../shared/report-caption.ts';
import { composeReportImage, type ReportImage } from '../../../shared/report-image.ts';
import { TIME_COLUMNS_HEADER, timeColumns } from '../../../shared/time-columns.ts';
import type { ColourRange } from './history-painter.ts';
import type { HistoryMethod } from './history.ts';

const pad2 = (n: number): string => String(n).padStart(2, '0');

/** Compact ISO 8601 basic UTC time to the second: "20261202T143000Z" (sorts as text, safe in file names). */
export function utcStamp(d: Date): string {
  return `${d.getUTCFullYear()}${pad2(d.getUTCMonth() + 1)}${pad2(d.getUTCDate())}T${pad2(d.getUTCHours())}${pad2(d.getUTCMinutes())}${pad2(d.getUTCSeconds())}Z`;
}

/** "nullsteer-history-20261202T143000Z.png" */
export function historyPngName(d: Date): string {
  return `nullsteer-history-${utcStamp(d)}.png`;
}

/** "nullsteer-spectrum-20261202T143000Z.csv" */
export function spectrumCsvName(d: Date): string {
  return `nullsteer-spectrum-${utcStamp(d)}.csv`;
}

/**
 * time_s: seconds from the history's start (its oldest row held when the file was saved),
 * stream_time_s: sample_index / sample rate, sample_index: the row's (shared/time-columns.ts); the
 * same on every line, so files of several spectra concatenate.
 */
export const SPECTRUM_CSV_HEADER = `${TIME_COLUMNS_HEADER},azimuth_deg,elevation_deg,conventional_db,mvdr_db`;

/** One spectrum as it arrived, with what is known about how it was made. */
export interface SpectrumExport {
  /** Length nAz, degrees. */
  azimuthDeg: ArrayLike<number>;
  /** Length nEl, degrees ([0] for an azimuth-only grid). */
  elevationDeg: ArrayLike<number>;
  /** nAz·nEl levels in dB, index iEl·nAz + iAz; null when the method was not computed. */
  conventionalDb: ArrayLike<number> | null;
  mvdrDb: ArrayLike<number> | null;
  /** Stream-clock index of the row's last sample. */
  sampleIndex?: number | null;
  /** Stream-clock index of the history's start (time_s counts from it); unknown: time_s empty. */
  startSampleIndex?: number | null;
  /** The stream's sample rate (from the processing's derived figures); unknown: times empty. */
  sampleRateHz?: number | null;
  seq?: number | null;
  /** Server wall clock when the row was emitted, ms since the epoch. */
  emittedAtMs?: number | null;
  normalised?: boolean | null;
  params?: ProcessingParams | null;
  derived?: ProcessingDerived | null;
}

/** Angle field: three decimals ("35.000", "-12.500"). */
export function csvAngle(deg: number): string {
  return Number.isFinite(deg) ? (deg === 0 ? 0 : deg).toFixed(3) : csvNonFinite(deg);
}

/** Level field: seven significant digits (about float32's precision: "-12.34568"); "-inf", "inf", "nan" as numpy and pandas read them. */
export function csvDb(db: number): string {
  return Number.isFinite(db) ? (db === 0 ? 0 : db).toPrecision(7) : csvNonFinite(db);
}

function csvNonFinite(v: number): string {
  if (v === Infinity) return 'inf';
  if (v === -Infinity) return '-inf';
  return 'nan';
}

/**
 * The CSV text of one spectrum: `#` comment lines (what is known: sample index, row sequence,
 * emission time, parameters as compact JSON), the header {@link SPECTRUM_CSV_HEADER}, then one
 * line per direction in the row's order (elevation outer, azimuth inner); a method not computed
 * leaves its field empty. Lines end in "\n", the last one too.
 * @throws RangeError when a spectrum's length is not nAz·nEl
 */
export function spectrumCsv(s: SpectrumExport): string {
  const nAz = s.azimuthDeg.length;
  const nEl = s.elevationDeg.length;
  const n = nAz * nEl;
  for (const [name, src] of [
    ['conventionalDb', s.conventionalDb],
    ['mvdrDb', s.mvdrDb],
  ] as const) {
    if (src && src.length !== n) throw new RangeError(`${name}: ${src.length} values for a ${nAz}×${nEl} grid (${n} expected)`);
  }
  const lines: string[] = ['# nullsteer direction spectrum'];
  const si = s.sampleIndex ?? null;
  const fs = s.sampleRateHz ?? s.derived?.sampleRateHz ?? null;
  const start = s.startSampleIndex ?? null;
  // The time fields, the same on every line: empty where not known.
  let time = ',,';
  if (si !== null) {
    lines.push(`# sample_index: ${si}`);
    lines.push(start !== null ? `# time_s from: the history's start, stream sample ${start}` : '# time_s from: not known (no history start)');
    if (fs !== null && fs > 0) {
      lines.push(`# sample_rate_hz: ${fs}`);
      const t = timeColumns(si, start ?? si, fs).split(',');
      time = `${start !== null ? t[0] : ''},${t[1]},${si}`;
    } else time = `,,${si}`;
  }
  if (s.seq !== undefined && s.seq !== null) lines.push(`# row_seq: ${s.seq}`);
  if (s.emittedAtMs !== undefined && s.emittedAtMs !== null && Number.isFinite(s.emittedAtMs)) lines.push(`# emitted_at: ${new Date(s.emittedAtMs).toISOString()}`);
  if (s.normalised !== undefined && s.normalised !== null) lines.push(`# normalised_per_bin: ${s.normalised}`);
  if (s.params) lines.push(`# params: ${JSON.stringify(s.params)}`);
  if (s.derived) lines.push(`# derived: ${JSON.stringify(s.derived)}`);
  lines.push(SPECTRUM_CSV_HEADER);
  const conv = s.conventionalDb;
  const mvdr = s.mvdrDb;
  for (let e = 0; e < nEl; e++) {
    const el = csvAngle(s.elevationDeg[e]);
    for (let a = 0; a < nAz; a++) {
      const i = e * nAz + a;
      lines.push(`${time},${csvAngle(s.azimuthDeg[a])},${el},${conv ? csvDb(conv[i]) : ''},${mvdr ? csvDb(mvdr[i]) : ''}`);
    }
  }
  return `${lines.join('\n')}\n`;
}

/** Save `blob` as `fileName` through a temporary object URL and `<a download>`. */
export function downloadBlob(blob: Blob, fileName: string): void {
  const url = URL.createObjectURL(blob);
  const a = document.createElement('a');
  a.href = url;
  a.download = fileName;
  a.style.display = 'none';
  document.body.appendChild(a);
  a.click();
  a.remove();
  // The browser fetches the blob URL asynchronously after click(): revoking at once can fail the
  // download, so free it a while later.
  setTimeout(() => URL.revokeObjectURL(url), 60_000);
}

/** The canvas as a PNG blob (null when the canvas has no pixels or cannot be encoded). */
export function canvasPng(canvas: HTMLCanvasElement): Promise<Blob | null> {
  return new Promise((resolve) => {
    if (canvas.width === 0 || canvas.height === 0) return resolve(null);
    try {
      canvas.toBlob((b) => resolve(b), 'image/png');
    } catch {
      resolve(null);
    }
  });
}

/**
 * What the report export reads of the history ring (client/src/lib/history.ts RowHistory). The
 * rows' stream sample indices are used when the ring keeps them (`sampleIndex`, one per slot);
 * otherwise their arrival times stand in.
 */
export interface HistorySource {
  readonly nAz: number;
  readonly azimuthDeg: ArrayLike<number>;
  readonly levels: Record<HistoryMethod, Float32Array>;
  readonly rowMaxDb: Record<HistoryMethod, Float32Array>;
  /** performance.now() at arrival of each slot, ms. */
  readonly arrivalMs: ArrayLike<number>;
  readonly sampleIndex?: ArrayLike<number>;
  readonly count: number;
  readonly oldest: number;
  slot(n: number): number;
}

/** The newest row when the image was saved (the UTC anchor): its sample index and emission time. */
export interface NewestRow {
  sampleIndex: number;
  /** Server wall clock at emission, ms since the epoch. */
  emittedAtMs: number;
}

export interface HistoryReportRequest {
  history: HistorySource;
  method: HistoryMethod;
  range: ColourRange;
  /** Row number at the view's top (the newest shown). */
  topRow: number;
  /** The view's time span, s: rows back from the top row within it are exported. */
  spanS: number;
  /** The stream's sample rate; null when not known (arrival times are used). */
  sampleRateHz: number | null;
  params: ProcessingParams | null;
  /** τ as the server derived it, s (from λ when null). */
  tauS: number | null;
  arrayName: string;
  newest: NewestRow | null;
  /** Font scale of the report (shared/report-image.ts), default 2. */
  textScale?: number;
}

/** The exported rows (oldest first), their times from the first, and the UTC span. */
export interface HistoryReportRows {
  rows: number[];
  timeS: number[];
  /** True when the times come from the rows' sample indices (else from their arrival). */
  fromSampleIndex: boolean;
  utcStartMs: number | null;
  utcEndMs: number | null;
}

/** Which rows the report holds and when each was, from the sample indices when the ring has them. */
export function historyReportRows(r: HistoryReportRequest): HistoryReportRows {
  const h = r.history;
  const fs = r.sampleRateHz !== null && r.sampleRateHz > 0 ? r.sampleRateHz : null;
  const si = h.sampleIndex;
  const fromSampleIndex = si !== undefined && fs !== null;
  // Seconds on one time line per row number: stream time, or arrival time.
  const at = (n: number): number => (fromSampleIndex ? si![h.slot(n)] / fs! : h.arrivalMs[h.slot(n)] / 1000);
  const top = Math.min(h.count - 1, Math.max(h.oldest, r.topRow));
  const rows: number[] = [];
  if (h.count > 0) {
    const tTop = at(top);
    for (let n = top; n >= h.oldest; n--) {
      if (n < top && tTop - at(n) >= r.spanS) break;
      rows.push(n);
    }
    rows.reverse();
  }
  // Non-decreasing times from the first row (a stream restart steps back: hold the last time).
  const timeS: number[] = [];
  let prev = 0;
  for (const n of rows) {
    const t = Math.max(prev, at(n) - at(rows[0]));
    timeS.push(t);
    prev = t;
  }
  let utcStartMs: number | null = null;
  let utcEndMs: number | null = null;
  if (r.newest && fs !== null && rows.length > 0 && fromSampleIndex) {
    // Wall clock from the newest row's emission, moved back by sample-index time.
    const lastSi = si![h.slot(rows[rows.length - 1])];
    utcEndMs = r.newest.emittedAtMs - ((r.newest.sampleIndex - lastSi) * 1000) / fs;
    utcStartMs = utcEndMs - timeS[timeS.length - 1] * 1000;
  } else if (r.newest && rows.length > 0) {
    const newestArrival = h.arrivalMs[h.slot(h.count - 1)];
    utcEndMs = r.newest.emittedAtMs - (newestArrival - h.arrivalMs[h.slot(rows[rows.length - 1])]);
    utcStartMs = utcEndMs - timeS[timeS.length - 1] * 1000;
  }
  return { rows, timeS, fromSampleIndex, utcStartMs, utcEndMs };
}

/**
 * The report image of the history as shown: the rows within the view's span up to its top row,
 * oldest at the top (time downward, as `analyze --timeline` draws it), one pixel per row and
 * azimuth coloured exactly as the dashboard colours them (colorize, the same row ranges), with
 * axes, colour bar and caption (array, method, band, τ, loading, UTC span). RGBA, for ImageData.
 * Null when the history holds no row.
 */
export function historyReportImage(r: HistoryReportRequest): ReportImage | null {
  const h = r.history;
  const sel = historyReportRows(r);
  if (sel.rows.length === 0) return null;
  const w = h.nAz;
  const rgba = new Uint8Array(w * sel.rows.length * 4);
  const px = new Uint32Array(rgba.buffer);
  const levels = h.levels[r.method];
  sel.rows.forEach((n, y) => {
    const s = h.slot(n);
    let lo: number;
    let hi: number;
    if (r.range.mode === 'manual') [lo, hi] = [r.range.lowDb, r.range.highDb];
    else {
      hi = h.rowMaxDb[r.method][s];
      lo = hi - r.range.spanDb;
    }
    colorize(px, y * w, levels, s * w, w, lo, hi);
  });
  const p = r.params;
  const tauS = r.tauS ?? (p && r.sampleRateHz ? (p.fftSize / 2) / (r.sampleRateHz * (1 - p.lambda)) : Number.NaN);
  const caption = p
    ? reportCaption({ arrayName: r.arrayName, method: r.method, bandHz: p.bandHz, tauS, lambda: p.lambda, loading: p.loading, utcStartMs: sel.utcStartMs, utcEndMs: sel.utcEndMs })
    : `array ${r.arrayName} · ${r.method === 'mvdr' ? 'MVDR' : 'conventional'}`;
  const auto = r.range.mode === 'auto';
  return composeReportImage(
    { width: w, height: sel.rows.length, channels: 4, data: rgba },
    {
      azimuthDeg: h.azimuthDeg,
      timeS: sel.timeS,
      lowDb: auto ? -(r.range as { spanDb: number }).spanDb : (r.range as { lowDb: number }).lowDb,
      highDb: auto ? 0 : (r.range as { highDb: number }).highDb,
      dbTitle: auto ? 'dB re row max' : 'dB',
      caption: sel.fromSampleIndex ? caption : `${caption} · times from arrival`,
    },
    { channels: 4, textScale: r.textScale ?? 2 },
  );
}

/** RGBA pixels as a PNG blob through a canvas (null when the browser cannot encode it). */
export function rgbaPng(width: number, height: number, rgba: Uint8Array): Promise<Blob | null> {
  const canvas = document.createElement('canvas');
  canvas.width = width;
  canvas.height = height;
  const ctx = canvas.getContext('2d');
  if (!ctx) return Promise.resolve(null);
  ctx.putImageData(new ImageData(new Uint8ClampedArray(rgba.buffer as ArrayBuffer, rgba.byteOffset, rgba.byteLength), width, height), 0, 0);
  return canvasPng(canvas);
}

/** "nullsteer-history-20261202T143000Z-plain.png" for the bare canvas. */
export function historyPlainPngName(d: Date): string {
  return `nullsteer-history-${utcStamp(d)}-plain.png`;
}
