/**
 * Retention: keep the folders the server fills by itself (recordings, event clips, level and event
 * logs) within an age and a size limit by deleting their oldest files first.
 *
 * {@link enforceRetention} makes one pass over a set of folders ("groups"), each with a pattern that
 * says which of its files are the server's: other files, subfolders and symbolic links are never
 * touched (a symbolic link is neither followed nor deleted), and nothing outside the listed folders
 * is looked at (no recursion; a name from a listing never holds a slash). Files that belong together,
 * a WAV and its JSON sidecar with the same stem (`nullsteer-20250102T030405Z-raw-0001.wav` and
 * `.json`, see server/outputs/recorder.ts), form one *set*: deleted together, told once, and aged by
 * their newest member (a sidecar is rewritten at close, so the set is as old as its last write).
 *
 * Order of a pass: every set older than `maxAgeDays` goes ('age'); then, while the matched files of
 * all groups together take more than `maxBytes`, the oldest remaining set goes ('size'). Sets that
 * are in use (the open part of a running recording: `inUse`; a group's newest set with `keepNewest`)
 * are never deleted and count as kept.
 * A file that cannot be deleted is counted and told (without the folder's absolute path:
 * ../io/disk-space.ts), its set is kept, and the pass goes on with the next oldest.
 *
 * {@link RetentionScheduler} runs such passes at start and every `intervalS` seconds, one at a time,
 * and keeps the counters status shows.
 *
 * Bounds: a pass lists at most `maxEntries` matched files (default 100 000, about 100 bytes each
 * held during the pass); beyond it the pass is marked truncated, applies only the age limit to what
 * it listed (the oldest files may be among those not listed, so a size cut could pick wrong ones),
 * and counts an error. At most {@link MAX_FAILURES_KEPT} failure texts are kept per pass.
 */
import { lstat, opendir, unlink } from 'node:fs/promises';
import { dirname, join, resolve } from 'node:path';
import { freeBytes as diskFreeBytes, fsErrorText } from '../io/disk-space.ts';

/** One folder to keep in bounds. */
export interface RetentionGroup {
  /** The folder (absolute, or relative to the working directory); only its direct files are seen. */
  dir: string;
  /** How messages and journal entries name the group ("recordings", "clips"): never a path. */
  label: string;
  /** File names the server owns in this folder; others are left alone. Flags g and y are ignored. */
  match: RegExp;
  /** Never delete the group's newest set (a per-day file still being appended); default false. */
  keepNewest?: boolean;
}

export type RetentionReason = 'age' | 'size';

/** One set of files deleted (told once per set, after its files are gone). */
export interface RetentionDeletion {
  label: string;
  /** The set's main file (its largest, e.g. the WAV; a .json only when nothing larger), name only. */
  file: string;
  /** Every file of the set that was deleted, names only (main file first). */
  files: string[];
  /** Bytes freed by this set (file sizes as listed). */
  bytes: number;
  /** Newest modification time of the set, ISO 8601 UTC. */
  mtimeUtc: string;
  reason: RetentionReason;
}

/** A file or folder the pass could not handle; `file` null for the folder itself. */
export interface RetentionFailure {
  label: string;
  file: string | null;
  /** Without paths, e.g. "permission denied (EACCES)". */
  message: string;
}

export interface RetentionOptions {
  groups: readonly RetentionGroup[];
  /** Delete sets whose newest file is older than this many days; null = no age limit. */
  maxAgeDays: number | null;
  /** Most bytes the matched files of all groups together may take; null = no size limit. */
  maxBytes: number | null;
  /** Wall clock of the pass, ms since the epoch (ages are measured from it). */
  nowMs: number;
  /** Told after each set is deleted, e.g. to journal it. An exception from it is ignored. */
  onDelete?: (info: RetentionDeletion) => void;
  /** Told once per failure. An exception from it is ignored. */
  onError?: (failure: RetentionFailure) => void;
  /** True for a file that must stay (being written); its whole set is kept. */
  inUse?: (label: string, file: string) => boolean;
  /** Most matched files listed per pass; default {@link DEFAULT_MAX_ENTRIES}. */
  maxEntries?: number;
  /** Deletes one file; default fs.promises.unlink (tests inject a failing one). */
  unlinkFile?: (path: string) => Promise<void>;
}

export interface RetentionResult {
  /** Files deleted (a WAV and its sidecar are 2). */
  deletedFiles: number;
  /** Sets deleted (a WAV and its sidecar are 1). */
  deletedSets: number;
  freedBytes: number;
  /** Matched files left after the pass (including in-use ones and those that could not be deleted). */
  keptFiles: number;
  keptBytes: number;
  /** Files that could not be deleted or looked at, and folders that could not be listed. */
  failedFiles: number;
  /** The first {@link MAX_FAILURES_KEPT} failures. */
  failures: RetentionFailure[];
  /** More than `maxEntries` matched files: the size limit was not applied in this pass. */
  truncated: boolean;
}

export const DEFAULT_MAX_ENTRIES = 100_000;
export const MAX_FAILURES_KEPT = 16;
const DAY_MS = 86_400_000;

/** Patterns of the files the server writes, for the groups the service configures. */
export const RETENTION_PATTERNS = {
  /** Recording parts and their sidecars: `<prefix>-<UTC start>[-k]-<track>-<NNNN>.wav|json` (server/outputs/recorder.ts). */
  recordings: /^[A-Za-z0-9._-]+-\d{8}T\d{6}Z(-\d{1,2})?-[a-z0-9_-]+-\d{4}\.(wav|json)$/,
} as const;

interface Entry {
  name: string;
  bytes: number;
  mtimeMs: number;
}

/** Files with one stem in one group. */
interface FileSet {
  group: RetentionGroup;
  /** Largest first (the data file before its sidecar; a .json last among equals), then by name. */
  files: Entry[];
  bytes: number;
  mtimeMs: number;
  inUse: boolean;
}

/** The stem that ties files together: the name without its last extension. */
function stemOf(name: string): string {
  const dot = name.lastIndexOf('.');
  return dot > 0 ? name.slice(0, dot) : name;
}

function checkOptions(o: RetentionOptions): void {
  if (!Array.isArray(o.groups)) throw new TypeError('retention: groups must be a list');
  for (const g of o.groups) {
    if (typeof g?.dir !== 'string' || g.dir === '') throw new TypeError('retention: each group needs a dir');
    if (typeof g.label !== 'string' || g.label === '') throw new TypeError('retention: each group needs a label');
    if (!(g.match instanceof RegExp)) throw new TypeError(`retention: group ${g.label} needs a RegExp match`);
  }
  if (o.maxAgeDays !== null && !(typeof o.maxAgeDays === 'number' && Number.isFinite(o.maxAgeDays) && o.maxAgeDays > 0)) {
    throw new RangeError(`retention: maxAgeDays ${String(o.maxAgeDays)}, allowed a number > 0 or null`);
  }
  if (o.maxBytes !== null && !(Number.isSafeInteger(o.maxBytes) && o.maxBytes >= 0)) {
    throw new RangeError(`retention: maxBytes ${String(o.maxBytes)}, allowed an integer ≥ 0 or null`);
  }
  if (!Number.isFinite(o.nowMs)) throw new RangeError(`retention: nowMs ${String(o.nowMs)}, allowed a finite number`);
  const m = o.maxEntries ?? DEFAULT_MAX_ENTRIES;
  if (!(Number.isSafeInteger(m) && m >= 1)) throw new RangeError(`retention: maxEntries ${String(m)}, allowed an integer ≥ 1`);
}

const quiet = <A extends unknown[]>(f: ((...a: A) => void) | undefined, ...a: A): void => {
  try {
    f?.(...a);
  } catch {
    // A caller's journal failing must not stop the pass.
  }
};

/**
 * One retention pass (see the module comment). Rejects only on invalid options (TypeError,
 * RangeError); file-system failures are counted in the result and told through `onError`.
 */
export async function enforceRetention(o: RetentionOptions): Promise<RetentionResult> {
  checkOptions(o);
  const maxEntries = o.maxEntries ?? DEFAULT_MAX_ENTRIES;
  const remove = o.unlinkFile ?? unlink;
  const result: RetentionResult = { deletedFiles: 0, deletedSets: 0, freedBytes: 0, keptFiles: 0, keptBytes: 0, failedFiles: 0, failures: [], truncated: false };
  const fail = (label: string, file: string | null, e: unknown): void => {
    const failure = { label, file, message: typeof e === 'string' ? e : fsErrorText(e) };
    result.failedFiles++;
    if (result.failures.length < MAX_FAILURES_KEPT) result.failures.push(failure);
    quiet(o.onError, failure);
  };

  // 1. List: direct regular files whose names match, per group; sets by stem.
  const sets: FileSet[] = [];
  let listed = 0;
  for (const group of o.groups) {
    if (result.truncated) break;
    const match = new RegExp(group.match.source, group.match.flags.replace(/[gy]/g, ''));
    const byStem = new Map<string, FileSet>();
    let dir;
    try {
      dir = await opendir(group.dir);
    } catch (e) {
      if ((e as NodeJS.ErrnoException).code !== 'ENOENT') fail(group.label, null, e); // a missing folder is empty
      continue;
    }
    try {
      for await (const d of dir) {
        // Dirent types come from the listing itself (lstat semantics): links and folders are not files.
        if (!d.isFile() || !match.test(d.name)) continue;
        if (listed >= maxEntries) {
          result.truncated = true;
          break;
        }
        let st;
        try {
          st = await lstat(join(group.dir, d.name));
        } catch (e) {
          if ((e as NodeJS.ErrnoException).code !== 'ENOENT') fail(group.label, d.name, e);
          continue;
        }
        if (!st.isFile()) continue; // replaced by a link or folder since the listing
        listed++;
        const stem = stemOf(d.name);
        let set = byStem.get(stem);
        if (set === undefined) {
          set = { group, files: [], bytes: 0, mtimeMs: -Infinity, inUse: false };
          byStem.set(stem, set);
          sets.push(set);
        }
        set.files.push({ name: d.name, bytes: st.size, mtimeMs: st.mtimeMs });
        set.bytes += st.size;
        if (st.mtimeMs > set.mtimeMs) set.mtimeMs = st.mtimeMs;
        if (o.inUse?.(group.label, d.name)) set.inUse = true;
      }
    } catch (e) {
      fail(group.label, null, e);
    } finally {
      // for-await closes the handle when it ends or breaks; after an error it may still be open.
      await dir.close().catch(() => {});
    }
  }
  if (result.truncated) fail('retention', null, `more than ${maxEntries} matching files; the size limit was not applied in this pass`);

  // 2. Oldest first (ties: group order, then name, so passes are repeatable).
  const groupIndex = new Map(o.groups.map((g, i) => [g, i]));
  const sidecarLast = (name: string) => (name.endsWith('.json') ? 1 : 0);
  for (const s of sets) s.files.sort((a, b) => b.bytes - a.bytes || sidecarLast(a.name) - sidecarLast(b.name) || (a.name < b.name ? -1 : a.name > b.name ? 1 : 0));
  sets.sort((a, b) => a.mtimeMs - b.mtimeMs || groupIndex.get(a.group)! - groupIndex.get(b.group)! || (a.files[0].name < b.files[0].name ? -1 : 1));

  // The newest set of a keepNewest group is the last of its group in this order.
  const newest = new Map<RetentionGroup, FileSet>();
  for (const s of sets) if (s.group.keepNewest) newest.set(s.group, s);
  for (const s of newest.values()) s.inUse = true;

  let totalBytes = 0;
  for (const s of sets) totalBytes += s.bytes;
  const ageLimitMs = o.maxAgeDays === null ? null : o.nowMs - o.maxAgeDays * DAY_MS;
  const sizeLimit = o.maxBytes === null || result.truncated ? null : o.maxBytes;

  // 3. Delete: a set's main file first; if it stays, the rest of the set stays with it.
  const deleteSet = async (s: FileSet, reason: RetentionReason): Promise<void> => {
    const gone: Entry[] = [];
    for (const f of s.files) {
      try {
        await remove(join(s.group.dir, f.name));
        gone.push(f);
      } catch (e) {
        if ((e as NodeJS.ErrnoException).code === 'ENOENT') {
          gone.push(f); // already gone: its space is free all the same
          continue;
        }
        fail(s.group.label, f.name, e);
        if (gone.length === 0) return;
      }
    }
    if (gone.length === 0) return;
    let bytes = 0;
    for (const f of gone) bytes += f.bytes;
    s.bytes -= bytes;
    totalBytes -= bytes;
    s.files = s.files.filter((f) => !gone.includes(f));
    result.deletedFiles += gone.length;
    result.deletedSets++;
    result.freedBytes += bytes;
    quiet(o.onDelete, { label: s.group.label, file: gone[0].name, files: gone.map((f) => f.name), bytes, mtimeUtc: new Date(s.mtimeMs).toISOString(), reason });
  };

  for (const s of sets) {
    if (s.inUse) continue;
    if (ageLimitMs !== null && s.mtimeMs < ageLimitMs) await deleteSet(s, 'age');
    else if (sizeLimit !== null && totalBytes > sizeLimit) await deleteSet(s, 'size');
    // Sets are in age order: once one is young enough and the total fits, the rest are too.
    else break;
  }

  for (const s of sets) {
    result.keptFiles += s.files.length;
    result.keptBytes += s.bytes;
  }
  return result;
}

/** A named retention limit over one or more groups (e.g. 'outputs': recordings and clips). */
export interface RetentionPolicy {
  name: string;
  groups: readonly RetentionGroup[];
  maxAgeDays: number | null;
  maxBytes: number | null;
}

/** Timer functions (tests inject a manual clock; no real waiting). */
export interface RetentionTimers {
  set(fn: () => void, ms: number): unknown;
  clear(handle: unknown): void;
}

export interface RetentionSchedulerOptions {
  policies: readonly RetentionPolicy[];
  /** Seconds between passes; default 60. */
  intervalS?: number;
  /** Wall clock, ms since the epoch; default Date.now. */
  now?: () => number;
  timers?: RetentionTimers;
  /** Files being written, as `label/file`, asked once per pass (e.g. the open recording parts). */
  inUse?: () => ReadonlySet<string>;
  /** Told per deleted set (journal it). */
  onDelete?: (policy: string, info: RetentionDeletion) => void;
  /** Told per failure. */
  onError?: (policy: string, failure: RetentionFailure) => void;
  /** Free bytes on the disk of a folder; default statfs (../io/disk-space.ts) of it or its nearest existing parent. */
  freeBytes?: (dir: string) => Promise<number>;
  /** The pass itself; default {@link enforceRetention} (tests inject a slow one). */
  enforce?: (o: RetentionOptions) => Promise<RetentionResult>;
  maxEntries?: number;
  unlinkFile?: (path: string) => Promise<void>;
}

export interface RetentionPolicyStatus {
  name: string;
  maxAgeDays: number | null;
  maxBytes: number | null;
  /** After the last pass; null before it. */
  keptFiles: number | null;
  keptBytes: number | null;
  /** Free bytes on the disk of the policy's first folder after the last pass; null when unknown. */
  freeBytes: number | null;
}

export interface RetentionStatus {
  intervalS: number;
  running: boolean;
  /** Passes completed (each over every policy). */
  runs: number;
  /** Timer ticks that found a pass still running and did not start another. */
  skippedRuns: number;
  deletedFiles: number;
  deletedSets: number;
  freedBytes: number;
  /** Failures over all passes (files not deleted, folders not listed, a pass that threw). */
  errors: number;
  /** ISO 8601 UTC of the end of the last pass, null before it. */
  lastRunUtc: string | null;
  /** The latest failure, without paths. */
  lastError: string | null;
  policies: RetentionPolicyStatus[];
}

/** Free bytes on the disk of `dir`, or of its nearest existing parent while it does not exist yet. */
async function nearestFreeBytes(dir: string): Promise<number> {
  for (let d = resolve(dir); ; d = dirname(d)) {
    try {
      return await diskFreeBytes(d);
    } catch (e) {
      if ((e as NodeJS.ErrnoException).code !== 'ENOENT' || dirname(d) === d) throw e;
    }
  }
}

const REAL_TIMERS: RetentionTimers = {
  set: (fn, ms) => {
    const t = setTimeout(fn, ms);
    t.unref(); // retention never keeps the process alive by itself
    return t;
  },
  clear: (h) => clearTimeout(h as ReturnType<typeof setTimeout>),
};

/**
 * Runs {@link enforceRetention} for each policy once at start() and then every `intervalS`, one
 * pass at a time: a tick that finds a pass running is skipped and counted (the next tick comes
 * `intervalS` later as usual).
 */
export class RetentionScheduler {
  readonly #o: RetentionSchedulerOptions;
  readonly #intervalMs: number;
  readonly #timers: RetentionTimers;
  #handle: unknown = null;
  #started = false;
  #pass: Promise<void> | null = null;
  #runs = 0;
  #skipped = 0;
  #deletedFiles = 0;
  #deletedSets = 0;
  #freedBytes = 0;
  #errors = 0;
  #lastRunUtc: string | null = null;
  #lastError: string | null = null;
  #policies: RetentionPolicyStatus[];

  constructor(options: RetentionSchedulerOptions) {
    const intervalS = options.intervalS ?? 60;
    if (!(Number.isFinite(intervalS) && intervalS >= 1 && intervalS <= 86_400)) throw new RangeError(`retention: intervalS ${intervalS}, allowed 1–86400`);
    if (!Array.isArray(options.policies)) throw new TypeError('retention: policies must be a list');
    this.#o = options;
    this.#intervalMs = intervalS * 1000;
    this.#timers = options.timers ?? REAL_TIMERS;
    this.#policies = options.policies.map((p) => ({ name: p.name, maxAgeDays: p.maxAgeDays, maxBytes: p.maxBytes, keptFiles: null, keptBytes: null, freeBytes: null }));
  }

  /** Run a pass now and then every intervalS. A second start() does nothing. */
  start(): void {
    if (this.#started) return;
    this.#started = true;
    this.#schedule();
    void this.runNow();
  }

  /** No more passes; resolves when a pass under way has ended. */
  async stop(): Promise<void> {
    this.#started = false;
    if (this.#handle !== null) this.#timers.clear(this.#handle);
    this.#handle = null;
    await this.#pass;
  }

  /** Start a pass unless one is running; resolves when that pass (or the running one) ends. Never rejects. */
  runNow(): Promise<void> {
    if (this.#pass === null) {
      this.#pass = this.#run().finally(() => {
        this.#pass = null;
      });
    }
    return this.#pass;
  }

  status(): RetentionStatus {
    return {
      intervalS: this.#intervalMs / 1000,
      running: this.#pass !== null,
      runs: this.#runs,
      skippedRuns: this.#skipped,
      deletedFiles: this.#deletedFiles,
      deletedSets: this.#deletedSets,
      freedBytes: this.#freedBytes,
      errors: this.#errors,
      lastRunUtc: this.#lastRunUtc,
      lastError: this.#lastError,
      policies: this.#policies.map((p) => ({ ...p })),
    };
  }

  #schedule(): void {
    this.#handle = this.#timers.set(() => {
      this.#handle = null;
      if (!this.#started) return;
      this.#schedule();
      if (this.#pass !== null) this.#skipped++;
      else void this.runNow();
    }, this.#intervalMs);
  }

  async #run(): Promise<void> {
    const enforce = this.#o.enforce ?? enforceRetention;
    const now = this.#o.now ?? Date.now;
    let inUse: ReadonlySet<string> = new Set();
    try {
      inUse = this.#o.inUse?.() ?? inUse;
    } catch (e) {
      this.#error(e instanceof Error ? e.message : String(e));
    }
    for (let i = 0; i < this.#o.policies.length; i++) {
      const p = this.#o.policies[i];
      const st = this.#policies[i];
      try {
        const r = await enforce({
          groups: p.groups,
          maxAgeDays: p.maxAgeDays,
          maxBytes: p.maxBytes,
          nowMs: now(),
          inUse: (label, file) => inUse.has(`${label}/${file}`),
          onDelete: (info) => this.#o.onDelete?.(p.name, info),
          onError: (f) => {
            this.#lastError = `${f.label}${f.file !== null ? `/${f.file}` : ''}: ${f.message}`;
            this.#o.onError?.(p.name, f);
          },
          maxEntries: this.#o.maxEntries,
          unlinkFile: this.#o.unlinkFile,
        });
        this.#deletedFiles += r.deletedFiles;
        this.#deletedSets += r.deletedSets;
        this.#freedBytes += r.freedBytes;
        this.#errors += r.failedFiles;
        st.keptFiles = r.keptFiles;
        st.keptBytes = r.keptBytes;
      } catch (e) {
        this.#error(`${p.name}: ${e instanceof Error ? e.message : String(e)}`);
      }
      st.freeBytes = p.groups.length > 0 ? await (this.#o.freeBytes ?? nearestFreeBytes)(p.groups[0].dir).catch(() => null) : null;
    }
    this.#runs++;
    this.#lastRunUtc = new Date(now()).toISOString();
  }

  #error(text: string): void {
    this.#errors++;
    this.#lastError = text;
  }
}
