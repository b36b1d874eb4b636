/**
 * The parameter journal: every change made to the running server (processing parameters, covariance
 * resets, beams, channel mask, presets applied, recordings started and stopped), with who made it,
 * the value before and after, the stream sample index at which it applied and the wall clock.
 *
 * Kept in memory (the last `keep` entries) and appended as one JSON line per entry to
 * `<data dir>/journal.jsonl`, so it survives a restart: at start the file's last `keep` entries are
 * read back (a line that does not parse is counted in `corruptLines` and skipped; the others stay).
 * Each server run is a session (`session` = its start time); entries of earlier sessions keep theirs.
 * Appends are synchronous: one small line per change, rare by nature, and never lost to a crash
 * right after the answer went out.
 */
import { appendFileSync, existsSync, mkdirSync, readFileSync } from 'node:fs';
import { join } from 'node:path';

export { JOURNAL_KINDS, type Actor, type JournalEntry, type JournalKind } from '../../shared/session.ts';
import type { Actor, JournalEntry, JournalKind } from '../../shared/session.ts';

export const JOURNAL_FILE = 'journal.jsonl';
export const JOURNAL_KEEP = 10_000;

function isEntry(v: unknown): v is JournalEntry {
  if (typeof v !== 'object' || v === null) return false;
  const e = v as Record<string, unknown>;
  return Number.isSafeInteger(e.seq) && typeof e.session === 'string' && typeof e.at === 'string' && typeof e.kind === 'string' && typeof e.summary === 'string' && typeof e.actor === 'object' && e.actor !== null;
}

/** Short text of a value for summaries: numbers as they are, others as compact JSON (cut at 80). */
function brief(v: unknown): string {
  const t = typeof v === 'number' ? String(v) : JSON.stringify(v) ?? String(v);
  return t.length > 80 ? `${t.slice(0, 77)}…` : t;
}

/** "field old → new" for each top-level field that differs between two objects. */
export function diffSummary(before: unknown, after: unknown): string {
  if (typeof before !== 'object' || typeof after !== 'object' || before === null || after === null) return `${brief(before)} → ${brief(after)}`;
  const b = before as Record<string, unknown>;
  const a = after as Record<string, unknown>;
  const parts: string[] = [];
  for (const k of new Set([...Object.keys(b), ...Object.keys(a)])) {
    if (JSON.stringify(b[k]) !== JSON.stringify(a[k])) parts.push(`${k} ${brief(b[k])} → ${brief(a[k])}`);
  }
  return parts.length > 0 ? parts.join('; ') : 'no change';
}

export class ParameterJournal {
  readonly session: string;
  readonly startedAt: string;
  /** Lines of the file that did not parse at start (skipped). */
  readonly corruptLines: number;
  /** Appends that failed (disk full, folder removed); the entry stays in memory. */
  writeErrors = 0;
  lastWriteError: string | null = null;
  readonly #file: string | null;
  readonly #keep: number;
  readonly #entries: JournalEntry[] = [];
  #seq = 0;

  /**
   * @param dir the data folder (created when missing); null keeps the journal in memory only
   * @throws Error when `dir` exists but the journal file cannot be read
   */
  constructor(dir: string | null, opts: { keep?: number; now?: () => Date } = {}) {
    this.#keep = opts.keep ?? JOURNAL_KEEP;
    const now = (opts.now ?? (() => new Date()))();
    this.startedAt = now.toISOString();
    this.session = this.startedAt;
    let corrupt = 0;
    if (dir === null) this.#file = null;
    else {
      mkdirSync(dir, { recursive: true });
      this.#file = join(dir, JOURNAL_FILE);
      if (existsSync(this.#file)) {
        for (const line of readFileSync(this.#file, 'utf8').split('\n')) {
          if (line.trim() === '') continue;
          let v: unknown;
          try {
            v = JSON.parse(line);
          } catch {
            corrupt++;
            continue;
          }
          if (!isEntry(v)) {
            corrupt++;
            continue;
          }
          this.#push(v);
          this.#seq = Math.max(this.#seq, v.seq);
        }
      }
    }
    this.corruptLines = corrupt;
  }

  #push(e: JournalEntry): void {
    this.#entries.push(e);
    if (this.#entries.length > this.#keep) this.#entries.splice(0, this.#entries.length - this.#keep);
  }

  get total(): number {
    return this.#seq;
  }

  /** Record one change; returns the entry as stored. */
  record(kind: JournalKind, actor: Actor, sampleIndex: number | null, before: unknown, after: unknown, summary = diffSummary(before, after)): JournalEntry {
    const e: JournalEntry = { seq: ++this.#seq, session: this.session, at: new Date().toISOString(), sampleIndex, actor, kind, summary, before, after };
    this.#push(e);
    if (this.#file !== null) {
      try {
        appendFileSync(this.#file, `${JSON.stringify(e)}\n`);
      } catch (err) {
        this.writeErrors++;
        this.lastWriteError = (err as Error).message;
      }
    }
    return e;
  }

  /** Entries with seq > afterSeq, oldest first, at most `limit` (the newest ones); optionally this session only. */
  query(opts: { afterSeq?: number; limit?: number; session?: string } = {}): JournalEntry[] {
    const after = opts.afterSeq ?? 0;
    const out = this.#entries.filter((e) => e.seq > after && (opts.session === undefined || e.session === opts.session));
    const limit = opts.limit ?? out.length;
    return out.slice(Math.max(0, out.length - limit));
  }
}
