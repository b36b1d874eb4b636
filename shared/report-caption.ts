/**
 * The caption of a report image (shared/report-image.ts): what was analysed and how, in one line of
 * fields joined by " · " (the composer wraps it between fields when the image is narrow).
 */
import { plainNumber, tidy } from './numbers.ts';

/** Diagonal loading as the processing parameters state it (server/engine/params.ts LoadingSpec). */
export type CaptionLoading = { mode: 'relative'; ratio: number } | { mode: 'relative-db'; db: number } | { mode: 'fixed'; delta: number } | { mode: 'wng'; floorDb: number };

export interface CaptionFields {
  /** The array's name (geometry name). */
  arrayName: string;
  method: 'mvdr' | 'conventional';
  /** Band of bins scanned, Hz. */
  bandHz: readonly [number, number];
  /** Averaging time constant τ, s. */
  tauS: number;
  /** Forgetting factor per hop, shown beside τ when given. */
  lambda?: number | null;
  loading: CaptionLoading;
  /** UTC of the image's first and last row, ms since the epoch; null when not known. */
  utcStartMs: number | null;
  utcEndMs: number | null;
}

export const CAPTION_SEPARATOR = ' · ';

const pad2 = (n: number): string => String(n).padStart(2, '0');

function utcDate(d: Date): string {
  return `${d.getUTCFullYear()}-${pad2(d.getUTCMonth() + 1)}-${pad2(d.getUTCDate())}`;
}

function utcTime(d: Date): string {
  return `${pad2(d.getUTCHours())}:${pad2(d.getUTCMinutes())}:${pad2(d.getUTCSeconds())}`;
}

/**
 * "2026-12-03 14:30:00–14:31:05 UTC" (the date once when both ends fall on one day), or
 * "2026-12-03 23:59:30–2026-12-04 00:00:30 UTC"; to the second. Null when an end is not known.
 */
export function utcSpan(startMs: number | null, endMs: number | null): string | null {
  if (startMs === null || endMs === null || !Number.isFinite(startMs) || !Number.isFinite(endMs)) return null;
  const a = new Date(startMs);
  const b = new Date(endMs);
  const sameDay = utcDate(a) === utcDate(b);
  return `${utcDate(a)} ${utcTime(a)}–${sameDay ? '' : `${utcDate(b)} `}${utcTime(b)} UTC`;
}

/** "loading 0.01·tr(R)/M", "loading −20 dB re tr(R)/M", "loading δ 0.001", "loading WNG ≥ 3 dB". */
export function loadingText(l: CaptionLoading): string {
  const n = (x: number) => plainNumber(x, 4).replace(/^-/, '−');
  switch (l.mode) {
    case 'relative':
      return `loading ${n(l.ratio)}·tr(R)/M`;
    case 'relative-db':
      return `loading ${n(l.db)} dB re tr(R)/M`;
    case 'fixed':
      return `loading δ ${n(l.delta)}`;
    case 'wng':
      return `loading WNG floor ${n(l.floorDb)} dB`;
  }
}

/** The caption's fields in order: array, method, band, τ (λ), loading, UTC span (when known). */
export function captionFields(f: CaptionFields): string[] {
  const tau = plainNumber(tidy(f.tauS), 4);
  const lambda = f.lambda !== undefined && f.lambda !== null && Number.isFinite(f.lambda) ? ` (λ ${plainNumber(f.lambda, 6)})` : '';
  const out = [
    `array ${f.arrayName}`,
    f.method === 'mvdr' ? 'MVDR' : 'conventional',
    `band ${plainNumber(f.bandHz[0], 6)}–${plainNumber(f.bandHz[1], 6)} Hz`,
    `τ ${tau} s${lambda}`,
    loadingText(f.loading),
  ];
  const span = utcSpan(f.utcStartMs, f.utcEndMs);
  out.push(span ?? 'UTC not known');
  return out;
}

/** The caption as one line: {@link captionFields} joined by " · ". */
export function reportCaption(f: CaptionFields): string {
  return captionFields(f).join(CAPTION_SEPARATOR);
}
