/**
 * The annotated `history.png` of `nullsteer analyze FILE --timeline DIR`: the bare history of
 * timeline.ts (historyPixels) inside the report image of shared/report-image.ts, with time from the
 * file's start, the colour scale in dB and a caption naming the array, method, band, τ, loading
 * and the file's UTC span (from its sidecar's startWallClock; "UTC not known" without one).
 */
import { composeReportImage, type ReportLayout } from '../../shared/report-image.ts';
import { reportCaption } from '../../shared/report-caption.ts';
import type { EngineRow } from '../engine/engine.ts';
import type { ProcessingParams } from '../engine/params.ts';
import { tauFromLambda } from '../dsp/units.ts';
import { encodePng } from '../io/png.ts';
import type { HistoryPixels } from './timeline.ts';

export interface TimelineReportInfo {
  arrayName: string;
  /** Parameters at the file's start (the caption's). */
  params: ProcessingParams;
  /** Parameter changes replayed during the file (named in the caption when any). */
  changes: number;
  sampleRateHz: number;
  /** Stream sample index of the file's first frame. */
  startSampleIndex: number;
  /** Frames in the file. */
  frames: number;
  /** UTC of the file's first frame, ms since the epoch; null when the sidecar does not say. */
  startUtcMs: number | null;
}

/**
 * The history `px` of `rows` (timeline.ts historyPixels, the image's method) as a report PNG.
 * Columns follow `azimuthDeg` (the last grid; a history wider than it spreads the grid's span over
 * its columns); the colour bar spans px.lowDb…px.highDb.
 */
export function reportHistoryImage(px: HistoryPixels, rows: readonly EngineRow[], azimuthDeg: readonly number[], method: 'mvdr' | 'conventional', info: TimelineReportInfo): { width: number; height: number; png: Uint8Array; layout: ReportLayout } {
  const fs = info.sampleRateHz;
  const az = azimuthDeg.length === px.width ? azimuthDeg : Array.from({ length: px.width }, (_, i) => lerpAxis(azimuthDeg, i, px.width));
  const timeS = rows.length > 0 ? rows.map((r) => (r.sampleIndex - info.startSampleIndex) / fs) : [0];
  // No levels at all (no rows, method off): a nominal scale, the picture is one colour anyway.
  const finite = Number.isFinite(px.highDb) && Number.isFinite(px.lowDb) && px.highDb > px.lowDb;
  const highDb = finite ? px.highDb : 0;
  const lowDb = finite ? px.lowDb : -30;
  const p = info.params;
  let caption = reportCaption({
    arrayName: info.arrayName,
    method,
    bandHz: p.bandHz,
    tauS: tauFromLambda(p.lambda, p.fftSize / 2, fs),
    lambda: p.lambda,
    loading: p.loading,
    utcStartMs: info.startUtcMs,
    utcEndMs: info.startUtcMs === null ? null : info.startUtcMs + (info.frames * 1000) / fs,
  });
  if (info.changes > 0) caption += ` · ${info.changes} parameter change${info.changes === 1 ? '' : 's'} replayed`;
  const img = composeReportImage({ width: px.width, height: px.height, channels: 3, data: px.rgb }, { azimuthDeg: az, timeS, lowDb, highDb, caption }, { channels: 3 });
  return { width: img.width, height: img.height, png: encodePng(img.width, img.height, img.data), layout: img.layout };
}

/** Column i of n spread evenly over the span of `axis` (first to last). */
function lerpAxis(axis: readonly number[], i: number, n: number): number {
  if (axis.length === 0) return i;
  const a = axis[0];
  const b = axis[axis.length - 1];
  return n > 1 ? a + ((b - a) * i) / (n - 1) : a;
}
