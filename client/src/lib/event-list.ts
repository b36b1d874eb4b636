/**
 * Pure helpers of the Events panel and the event marks on the direction history: the list of the
 * most recent events (newest first, bounded), and where a stream sample index falls on the
 * history's time line. Event levels are indicative (no class-rated meter, no traceable calibration).
 */
import type { EventMessage } from '../../../shared/messages.ts';
import type { RowHistory } from './history.ts';

export type MonitorEvent = EventMessage['event'];

/** Events kept by the dashboard (the oldest beyond it are dropped). */
export const MAX_EVENTS = 200;

/** Whether a value has an event's shape (answers of GET /api/events are checked before use). */
export function isEvent(v: unknown): v is MonitorEvent {
  if (typeof v !== 'object' || v === null) return false;
  const e = v as Record<string, unknown>;
  return (
    typeof e.id === 'string' &&
    typeof e.rule === 'string' &&
    typeof e.sector === 'string' &&
    (e.state === 'active' || e.state === 'ended') &&
    typeof e.startSample === 'number' &&
    typeof e.startUtc === 'string' &&
    Array.isArray(e.clips)
  );
}

/**
 * `list` (newest first) with `incoming` merged in: an event already held is replaced by the newer
 * copy (its state, end, peak and clips change while it lasts), a new one is added; sorted newest
 * start first (by start sample, then start time); at most `max` kept. `list` is not changed.
 */
export function mergeEvents(list: readonly MonitorEvent[], incoming: readonly MonitorEvent[], max = MAX_EVENTS): MonitorEvent[] {
  const byId = new Map<string, MonitorEvent>();
  for (const e of list) byId.set(e.id, e);
  for (const e of incoming) byId.set(e.id, e);
  const out = [...byId.values()];
  out.sort((a, b) => b.startSample - a.startSample || (b.startUtc < a.startUtc ? -1 : b.startUtc > a.startUtc ? 1 : 0));
  return out.length > max ? out.slice(0, max) : out;
}

/** An event's length, s: from its sample indices (to `newestSample` while it is active), null when unknown. */
export function eventDurationS(e: MonitorEvent, sampleRateHz: number | null | undefined, newestSample?: number | null): number | null {
  if (!sampleRateHz || sampleRateHz <= 0) return null;
  const end = e.endSample ?? (newestSample !== undefined && newestSample !== null ? newestSample : null);
  if (end === null || end < e.startSample) return null;
  return (end - e.startSample) / sampleRateHz;
}

/** "2026-12-04 01:55:12" from an ISO 8601 UTC time ("—" when it does not parse). */
export function utcText(iso: string): string {
  const t = Date.parse(iso);
  if (!Number.isFinite(t)) return '—';
  return new Date(t).toISOString().slice(0, 19).replace('T', ' ');
}

/** The clip to play: the event's beam clip file name, or null when it has none. */
export function beamClip(e: MonitorEvent): string | null {
  return e.clips.find((f) => f.endsWith('-beam.wav')) ?? null;
}

/**
 * Where stream sample `sampleIndex` lies on the history's time line (RowHistory.timeS), seconds:
 * from the newest held row at or before it, plus the samples between over the rate. Null when it
 * is older than the oldest row held or there is no row. Assumes the held rows' sample indices do
 * not go backwards (a discontinuity within the held rows places marks before it approximately).
 */
export function timeOfSample(h: RowHistory, sampleIndex: number, sampleRateHz: number): number | null {
  if (h.stored === 0 || !(sampleRateHz > 0)) return null;
  let lo = h.oldest;
  let hi = h.count - 1;
  if (h.sampleIndex[h.slot(lo)] > sampleIndex) return null;
  while (lo < hi) {
    const mid = Math.ceil((lo + hi) / 2);
    if (h.sampleIndex[h.slot(mid)] <= sampleIndex) lo = mid;
    else hi = mid - 1;
  }
  const s = h.slot(lo);
  return h.timeS[s] + (sampleIndex - h.sampleIndex[s]) / sampleRateHz;
}

/**
 * How to show an event on the history: the span (one of `spansS`, the shortest that holds the
 * event with a margin and fits `maxRows` rows at `rowsPerS`, else the longest that fits) and the
 * row to put at the top (a little after the event's end, or the newest row). Null when the event's
 * start is no longer held.
 */
export function eventView(
  h: RowHistory,
  e: MonitorEvent,
  sampleRateHz: number,
  spansS: readonly number[],
  rowsPerS: number,
): { spanS: number; topRow: number } | null {
  const startT = timeOfSample(h, e.startSample, sampleRateHz);
  if (startT === null) return null;
  const newestT = h.timeS[h.slot(h.count - 1)];
  const endT = Math.min(newestT, e.endSample === null ? newestT : (timeOfSample(h, e.endSample, sampleRateHz) ?? newestT));
  const lengthS = Math.max(0, endT - startT);
  const fits = spansS.filter((s) => s * rowsPerS <= h.capacity);
  const choices = fits.length > 0 ? fits : [spansS[0]];
  const spanS = choices.find((s) => s >= lengthS * 1.25 + 2) ?? choices[choices.length - 1];
  const topT = Math.min(newestT, endT + Math.min(0.1 * spanS, Math.max(0, spanS - lengthS) / 2));
  const below = h.rowAtOrBefore(topT);
  const topRow = below < 0 ? h.oldest : Math.min(h.count - 1, below + (h.timeS[h.slot(below)] < topT ? 1 : 0));
  return { spanS, topRow };
}
