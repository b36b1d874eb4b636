/**
 * The parameter journal: every change made to the running server (processing parameters, covariance
 * resets, beams, channel mask, presets applied, recordings started and stopped), with who made it,
 * the value before and after, the stream sample index at which it applied and the wall clock.
 *
 * Kept in memory (the last `keep` entries) and appended as one JSON line per entry to
 * `<data dir>/journal.jsonl`, so it survives a restart. Each server run is a session (`session` =
 * its start time); entries of earlier sessions keep theirs. Appends are synchronous: one small line
 * per change, rare by nature, and never lost to a crash right after the answer went out.
 *
 * Bounded on disk and at start: when an append would take the file past `maxBytes`
 * (data.journalMaxBytes) the file is renamed to `journal.1.jsonl` (replacing the one before) and a
 * new one begins, so the two take at most 2·maxBytes. At start only the last `maxBytes` of each are
 * read, in chunks, line by line: a line that does not parse, or is longer than a line can be, is
 * counted in `corruptLines` and skipped; a file that cannot be read at all is noted in `readError`
 * and the journal starts empty. A file found larger than `maxBytes` (an older server, a copy) is
 * rotated at once. No content of the files can stop the server from starting.
 */
import { appendFileSync, closeSync, existsSync, fstatSync, mkdirSync, openSync, readSync, renameSync, statSync } from 'node:fs';
import { join } from 'node:path';
import { plainNumber, tidy } from '../../shared/numbers.ts';
import { publicText } from '../public-text.ts';
export { JOURNAL_KINDS, type Actor, type JournalEntry, type JournalKind } from '../../shared/session.ts';
import type { Actor, JournalEntry, JournalKind } from '../../shared/session.ts';

export const JOURNAL_FILE = 'journal.jsonl';
/** The previous file after a rotation. */
export const JOURNAL_OLD_FILE = 'journal.1.jsonl';
export const JOURNAL_KEEP = 10_000;
/** Default size at which the file rotates (config data.journalMaxBytes). */
export const JOURNAL_MAX_BYTES = 8 * 2 ** 20;
/** Longest line read back; an entry is a few KiB (closed schemas bound every value in it). */
export const JOURNAL_MAX_LINE_BYTES = 256 * 1024;
const READ_CHUNK = 1 << 20;

/**
 * Call `line` for each complete line of the last `maxBytes` of a file, read in chunks (a line cut
 * by the start of that window is skipped, as is one longer than `maxLine`, which counts as bad).
 * @returns lines too long (bad)
 */
function tailLines(file: string, maxBytes: number, maxLine: number, line: (text: string) => void): number {
  const fd = openSync(file, 'r');
  let bad = 0;
  try {
    const size = fstatSync(fd).size;
    let pos = Math.max(0, size - maxBytes);
    // Starting mid-file: everything up to the first newline belongs to a line before the window.
    let skipping = pos > 0;
    let pending: Buffer[] = [];
    let pendingBytes = 0;
    let tooLong = false;
    const buf = Buffer.allocUnsafe(READ_CHUNK);
    while (pos < size) {
      const n = readSync(fd, buf, 0, Math.min(READ_CHUNK, size - pos), pos);
      if (n <= 0) break;
      pos += n;
      let start = 0;
      for (;;) {
        const nl = buf.indexOf(0x0a, start);
        const end = nl < 0 || nl >= n ? n : nl;
        if (!skipping && !tooLong) {
          if (pendingBytes + (end - start) > maxLine) {
            tooLong = true;
            pending = [];
            pendingBytes = 0;
          } else {
            pending.push(Buffer.from(buf.subarray(start, end)));
            pendingBytes += end - start;
          }
        }
        if (nl < 0 || nl >= n) break;
        if (skipping) skipping = false;
        else if (tooLong) bad++;
        else line(Buffer.concat(pending, pendingBytes).toString('utf8'));
        pending = [];
        pendingBytes = 0;
        tooLong = false;
        start = nl + 1;
      }
    }
    if (!skipping) {
      if (tooLong) bad++;
      else if (pendingBytes > 0) line(Buffer.concat(pending, pendingBytes).toString('utf8'));
    }
  } finally {
    closeSync(fd);
  }
  return bad;
}

function isEntry(v: unknown): v is JournalEntry {
  if (typeof v !== 'object' || v === null) return false;
  const e = v as Record<string, unknown>;
  return Number.isSafeInteger(e.seq) && typeof e.session === 'string' && typeof e.at === 'string' && typeof e.kind === 'string' && typeof e.summary === 'string' && typeof e.actor === 'object' && e.actor !== null;
}

/** Short text of a value for summaries: numbers to 6 significant digits, others as compact JSON (cut at 80). */
function brief(v: unknown): string {
  const t = typeof v === 'number' ? plainNumber(v) : JSON.stringify(v, (_k, x: unknown) => (typeof x === 'number' ? tidy(x) : x)) ?? String(v);
  return t.length > 80 ? `${t.slice(0, 77)}…` : t;
}

/** The STFT hop and rate, to word a forgetting factor λ as the time constant τ people tune. */
export interface SummaryClock {
  hopSamples: number;
  sampleRateHz: number;
}

/**
 * "field old → new" for each top-level field that differs between two objects. With `clock`, a
 * change of λ reads in the terms the panel uses: "time constant τ 2 s → 4 s (λ 0.997333 → 0.998667)".
 */
export function diffSummary(before: unknown, after: unknown, clock?: SummaryClock): string {
  if (typeof before !== 'object' || typeof after !== 'object' || before === null || after === null) return `${brief(before)} → ${brief(after)}`;
  const b = before as Record<string, unknown>;
  const a = after as Record<string, unknown>;
  const parts: string[] = [];
  for (const k of new Set([...Object.keys(b), ...Object.keys(a)])) {
    if (JSON.stringify(b[k]) === JSON.stringify(a[k])) continue;
    if (k === 'lambda' && clock && typeof b[k] === 'number' && typeof a[k] === 'number') {
      const tau = (l: number) => plainNumber(clock.hopSamples / (clock.sampleRateHz * (1 - l)), 4);
      parts.push(`time constant τ ${tau(b[k] as number)} s → ${tau(a[k] as number)} s (λ ${brief(b[k])} → ${brief(a[k])})`);
    } else parts.push(`${k} ${brief(b[k])} → ${brief(a[k])}`);
  }
  return parts.length > 0 ? parts.join('; ') : 'no change';
}

export class ParameterJournal {
  readonly session: string;
  readonly startedAt: string;
  /** Lines of the files that did not parse at start (skipped). */
  readonly corruptLines: number;
  /** Why the files could not be read at start (the journal then started empty), or null. */
  readonly readError: string | null;
  /** Rotations so far (this run). */
  rotations = 0;
  /** Appends that failed (disk full, folder removed); the entry stays in memory. */
  writeErrors = 0;
  lastWriteError: string | null = null;
  /** Told of every entry recorded (the site broker's journal subject); its failures never reach record(). */
  onRecord: ((e: JournalEntry) => void) | null = null;
  readonly #file: string | null;
  #oldFile = '';
  readonly #keep: number;
  readonly #maxBytes: number;
  /** Bytes in the current file (what appends add to). */
  #bytes = 0;
  readonly #entries: JournalEntry[] = [];
  #seq = 0;

  /**
   * @param dir the data folder (created when missing); null keeps the journal in memory only
   * @param opts.maxBytes size at which the file rotates (default JOURNAL_MAX_BYTES)
   * @throws Error only when `dir` cannot be created; what the files hold never throws
   */
  constructor(dir: string | null, opts: { keep?: number; now?: () => Date; maxBytes?: number } = {}) {
    this.#keep = opts.keep ?? JOURNAL_KEEP;
    this.#maxBytes = opts.maxBytes ?? JOURNAL_MAX_BYTES;
    if (!(this.#maxBytes >= 1024)) throw new RangeError(`maxBytes must be ≥ 1024, got ${this.#maxBytes}`);
    const now = (opts.now ?? (() => new Date()))();
    this.startedAt = now.toISOString();
    this.session = this.startedAt;
    let corrupt = 0;
    let readError: string | null = null;
    if (dir === null) this.#file = null;
    else {
      mkdirSync(dir, { recursive: true });
      this.#file = join(dir, JOURNAL_FILE);
      this.#oldFile = join(dir, JOURNAL_OLD_FILE);
      const take = (line: string) => {
        if (line.trim() === '') return;
        let v: unknown;
        try {
          v = JSON.parse(line);
        } catch {
          corrupt++;
          return;
        }
        if (!isEntry(v)) {
          corrupt++;
          return;
        }
        this.#push(v);
        this.#seq = Math.max(this.#seq, v.seq);
      };
      // The older file first, so entries stay in order; each read is bounded by maxBytes.
      for (const f of [this.#oldFile, this.#file]) {
        try {
          // (Not `corrupt += tailLines(…)`: that would read `corrupt` before `take` adds to it.)
          const tooLong = existsSync(f) ? tailLines(f, this.#maxBytes, JOURNAL_MAX_LINE_BYTES, take) : 0;
          corrupt += tooLong;
        } catch (e) {
          readError = publicText(e);
        }
      }
      try {
        this.#bytes = existsSync(this.#file) ? statSync(this.#file).size : 0;
        if (this.#bytes > this.#maxBytes) this.#rotate();
      } catch (e) {
        readError ??= publicText(e);
      }
    }
    this.corruptLines = corrupt;
    this.readError = readError;
  }

  /** journal.jsonl → journal.1.jsonl (replacing it); the next append starts a new file. */
  #rotate(): void {
    renameSync(this.#file!, this.#oldFile);
    this.#bytes = 0;
    this.rotations++;
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
        const line = `${JSON.stringify(e)}\n`;
        const n = Buffer.byteLength(line);
        if (this.#bytes > 0 && this.#bytes + n > this.#maxBytes) this.#rotate();
        appendFileSync(this.#file, line);
        this.#bytes += n;
      } catch (err) {
        this.writeErrors++;
        this.lastWriteError = publicText(err);
      }
    }
    try {
      this.onRecord?.(e);
    } catch {
      // An observer's problem is its own.
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
