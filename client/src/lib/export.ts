/**
 * Exports from the dashboard: the direction history as PNG, the current direction spectrum as
 * CSV. The text building and file naming are pure (tested in test/unit/export.test.ts); only
 * {@link downloadBlob} and {@link canvasPng} touch the DOM.
 */
import type { ProcessingDerived, ProcessingParams } from '../../../shared/messages.ts';

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

export const SPECTRUM_CSV_HEADER = 'azimuth_deg,elevation_deg,conventional_db,mvdr_db';

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
  if (s.sampleIndex !== undefined && s.sampleIndex !== null) lines.push(`# sample_index: ${s.sampleIndex}`);
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
      lines.push(`${csvAngle(s.azimuthDeg[a])},${el},${conv ? csvDb(conv[i]) : ''},${mvdr ? csvDb(mvdr[i]) : ''}`);
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
