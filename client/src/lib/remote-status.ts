/**
 * Remote bin workers (issue 17) as the dashboard shows them: status `engine.remote` reduced to
 * what the "Remote workers" table in the Processing panel and the status strip's badge show. Null
 * when the engine has no remote workers (field absent or null). Every field is read defensively,
 * as in status-summary.ts: a missing or mistyped value is null (shown as "—"), never a guess; a
 * worker entry that is not an object is left out. (A plain module: unit tests import it.)
 */
import { fmtBytes, fmtCount, fmtFixed } from './format.ts';
import { num, obj, str, type Obj } from './status-summary.ts';

export type RemoteBrokerState = 'connected' | 'reconnecting' | 'off';
export type RemoteMode = 'remote' | 'local-fallback';

export interface RemoteWorkerRow {
  name: string | null;
  id: string | null;
  bins: number | null;
  firstBin: number | null;
  throughputBinsPerS: number | null;
  /** Since the worker's last answer, ms; null before its first. */
  lastAnswerAgeMs: number | null;
  bytesPerS: number | null;
  /** 'active' | 'joining' | 'lost' from this server; another word from a newer one is shown as it is. */
  state: string | null;
}

export interface RemoteView {
  enabled: boolean | null;
  broker: RemoteBrokerState | null;
  mode: RemoteMode | null;
  localThreads: number | null;
  workers: RemoteWorkerRow[];
  partialRows: number | null;
  lateParts: number | null;
  oldEpochMessages: number | null;
  /** Dropped messages by reason (only finite numbers kept). */
  dropped: Record<string, number>;
  /** Sum of {@link dropped}. */
  droppedTotal: number;
  replans: number | null;
  lastReplan: { at: string | null; reason: string | null } | null;
}

/** Most worker rows taken from one status document (a bound on what the table renders). */
export const MAX_REMOTE_WORKER_ROWS = 256;
/** Most `dropped` reasons kept. */
const MAX_DROP_REASONS = 32;

function oneOf<T extends string>(v: unknown, allowed: readonly T[]): T | null {
  return typeof v === 'string' && (allowed as readonly string[]).includes(v) ? (v as T) : null;
}

/** The remote workers of a status document, or null when it reports none (`engine.remote` absent or null). */
export function summariseRemote(raw: Obj): RemoteView | null {
  const r = obj(obj(raw.engine)?.remote);
  if (!r) return null;
  const workers: RemoteWorkerRow[] = [];
  if (Array.isArray(r.workers)) {
    for (const w of r.workers) {
      if (workers.length === MAX_REMOTE_WORKER_ROWS) break;
      const o = obj(w);
      if (!o) continue;
      workers.push({
        name: str(o.name),
        id: str(o.id),
        bins: num(o.bins),
        firstBin: num(o.firstBin),
        throughputBinsPerS: num(o.throughputBinsPerS),
        lastAnswerAgeMs: num(o.lastAnswerAgeMs),
        bytesPerS: num(o.bytesPerS),
        state: str(o.state),
      });
    }
  }
  const dropped: Record<string, number> = {};
  let droppedTotal = 0;
  const d = obj(r.dropped);
  if (d) {
    for (const [k, v] of Object.entries(d).slice(0, MAX_DROP_REASONS)) {
      const n = num(v);
      if (n === null) continue;
      dropped[k] = n;
      droppedTotal += n;
    }
  }
  const lr = obj(r.lastReplan);
  return {
    enabled: typeof r.enabled === 'boolean' ? r.enabled : null,
    broker: oneOf(r.broker, ['connected', 'reconnecting', 'off'] as const),
    mode: oneOf(r.mode, ['remote', 'local-fallback'] as const),
    localThreads: num(r.localThreads),
    workers,
    partialRows: num(r.partialRows),
    lateParts: num(r.lateParts),
    oldEpochMessages: num(r.oldEpochMessages),
    dropped,
    droppedTotal,
    replans: num(r.replans),
    lastReplan: lr ? { at: str(lr.at), reason: str(lr.reason) } : null,
  };
}

/** A worker's bins as "first–last" (inclusive); "—" when unknown or empty. */
export function fmtBinRange(firstBin: number | null, bins: number | null): string {
  if (firstBin === null || bins === null || !(bins >= 1)) return '—';
  return `${firstBin}–${firstBin + bins - 1}`;
}

/** Throughput in bins/s, short: "850", "12.4 k", "1.25 M"; "—" for null. */
export function fmtRate(v: number | null): string {
  if (v === null || !Number.isFinite(v) || v < 0) return '—';
  if (v >= 1e6) return `${Number((v / 1e6).toPrecision(3))} M`;
  if (v >= 1e4) return `${Number((v / 1e3).toPrecision(3))} k`;
  return String(Math.round(v));
}

/** Age of a worker's last answer: "40 ms", "2.3 s", "never" for null. */
export function fmtAnswerAge(ms: number | null): string {
  if (ms === null) return 'never';
  if (!Number.isFinite(ms) || ms < 0) return '—';
  if (ms < 1000) return `${Math.round(ms)} ms`;
  if (ms < 60_000) return `${fmtFixed(ms / 1000, 1)} s`;
  return `${Math.round(ms / 1000)} s`;
}

/** Bytes per second with a decimal unit, for the "bytes/s" column: "812 B", "1.3 MB"; "—" for null. */
export function fmtByteRate(v: number | null): string {
  return fmtBytes(v);
}

/** The `dropped` breakdown for a tooltip: "deadline 3 · malformed 1", or "none". */
export function droppedText(dropped: Record<string, number>): string {
  const parts = Object.entries(dropped)
    .filter(([, n]) => n > 0)
    .map(([k, n]) => `${k} ${fmtCount(n)}`);
  return parts.length ? parts.join(' · ') : 'none';
}

export interface RemoteBadge {
  text: string;
  title: string;
}

/**
 * The status strip's badge: lit when recent rows were partial (the live rows' flag) or when the
 * engine asked for remote workers but runs on its local threads alone ('local-fallback'). Null: no badge.
 */
export function remoteBadge(remote: RemoteView | null, partialRecent: boolean): RemoteBadge | null {
  const fallback = remote?.mode === 'local-fallback';
  if (!fallback && !partialRecent) return null;
  const parts: string[] = [];
  const titles: string[] = [];
  if (partialRecent) {
    parts.push('partial rows');
    titles.push('recent rows miss some bins: a remote worker did not answer in time (marked beside the direction history)');
  }
  if (fallback) {
    parts.push('local fallback');
    titles.push(`remote workers are configured but none is in the plan: the engine runs on its ${remote?.localThreads ?? '—'} local thread(s) alone (broker ${remote?.broker ?? '—'})`);
  }
  return { text: parts.join(' · '), title: `${titles.join('; ')} — see the remote workers table in the Processing panel` };
}
