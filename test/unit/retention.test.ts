/**
 * Retention: oldest first under a size cap, the age limit, a WAV and its sidecar as one set,
 * unmatched files, subfolders and symbolic links left alone, an undeletable file counted while the
 * pass goes on, in-use files kept, and a scheduler that never runs two passes at once (driven by a
 * manual timer; no real waiting).
 *
 * Expected values are worked out by hand from the files each test writes (sizes and modification
 * times set with utimes), not from the module's own output.
 */
import { existsSync, mkdirSync, mkdtempSync, readdirSync, rmSync, symlinkSync, utimesSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { basename, join } from 'node:path';
import { afterEach, describe, expect, it } from 'vitest';
import { Recorder } from '../../server/outputs/recorder.ts';
import { CLIP_PATTERN, DAY_FILE_PATTERN, openRecordingFiles, retentionPolicies } from '../../server/monitor/retention-policies.ts';
import { enforceRetention, RETENTION_PATTERNS, RetentionScheduler, type RetentionDeletion, type RetentionOptions, type RetentionResult } from '../../server/monitor/retention.ts';

const DAY_MS = 86_400_000;
const NOW_MS = Date.UTC(2026, 0, 31, 12, 0, 0);
const dirs: string[] = [];

function tempDir(): string {
  const d = mkdtempSync(join(tmpdir(), 'nullsteer-retention-'));
  dirs.push(d);
  return d;
}

afterEach(() => {
  for (const d of dirs.splice(0)) rmSync(d, { recursive: true, force: true });
});

/** A file of `bytes` bytes whose modification time is `ageDays` before NOW_MS. */
function put(dir: string, name: string, bytes: number, ageDays: number): void {
  const p = join(dir, name);
  writeFileSync(p, Buffer.alloc(bytes, 1));
  const t = (NOW_MS - ageDays * DAY_MS) / 1000;
  utimesSync(p, t, t);
}

const ls = (dir: string) => readdirSync(dir).sort();
const part = (n: number, ext: 'wav' | 'json', day = 10) => `nullsteer-202601${String(day).padStart(2, '0')}T120000Z-raw-${String(n).padStart(4, '0')}.${ext}`;

describe('enforceRetention', () => {
  it('under a size cap deletes the oldest files first, and only until the total fits', async () => {
    const dir = tempDir();
    // Five files of 1000 bytes, 5 … 1 days old; cap 2500 → the three oldest go (5000 → 2000).
    for (const [i, age] of [5, 4, 3, 2, 1].entries()) put(dir, `clip-${i}.wav`, 1000, age);
    const told: RetentionDeletion[] = [];
    const r = await enforceRetention({ groups: [{ dir, label: 'clips', match: /^clip-\d\.wav$/ }], maxAgeDays: null, maxBytes: 2500, nowMs: NOW_MS, onDelete: (i) => told.push(i) });
    expect(r).toEqual({ deletedFiles: 3, deletedSets: 3, freedBytes: 3000, keptFiles: 2, keptBytes: 2000, failedFiles: 0, failures: [], truncated: false });
    expect(ls(dir)).toEqual(['clip-3.wav', 'clip-4.wav']);
    expect(told.map((t) => [t.file, t.reason, t.bytes])).toEqual([
      ['clip-0.wav', 'size', 1000],
      ['clip-1.wav', 'size', 1000],
      ['clip-2.wav', 'size', 1000],
    ]);
    expect(told[0]).toEqual({ label: 'clips', file: 'clip-0.wav', files: ['clip-0.wav'], bytes: 1000, mtimeUtc: new Date(NOW_MS - 5 * DAY_MS).toISOString(), reason: 'size' });
    // Exactly at the cap: nothing more goes.
    const again = await enforceRetention({ groups: [{ dir, label: 'clips', match: /^clip-\d\.wav$/ }], maxAgeDays: null, maxBytes: 2000, nowMs: NOW_MS });
    expect(again.deletedFiles).toBe(0);
  });

  it('the size cap counts every group together, oldest first across them', async () => {
    const rec = tempDir();
    const clips = tempDir();
    put(rec, 'a.wav', 100, 3);
    put(clips, 'b.wav', 100, 4);
    put(rec, 'c.wav', 100, 2);
    put(clips, 'd.wav', 100, 1);
    const told: string[] = [];
    const r = await enforceRetention({
      groups: [
        { dir: rec, label: 'recordings', match: /\.wav$/ },
        { dir: clips, label: 'clips', match: /\.wav$/ },
      ],
      maxAgeDays: null,
      maxBytes: 200,
      nowMs: NOW_MS,
      onDelete: (i) => told.push(`${i.label}/${i.file}`),
    });
    expect(told).toEqual(['clips/b.wav', 'recordings/a.wav']);
    expect([r.keptFiles, r.keptBytes]).toEqual([2, 200]);
  });

  it('the age limit deletes every set older than maxAgeDays and nothing younger', async () => {
    const dir = tempDir();
    put(dir, 'old.jsonl', 10, 31);
    put(dir, 'edge.jsonl', 10, 29.99);
    put(dir, 'new.jsonl', 10, 0);
    const told: RetentionDeletion[] = [];
    const r = await enforceRetention({ groups: [{ dir, label: 'events', match: /\.jsonl$/ }], maxAgeDays: 30, maxBytes: null, nowMs: NOW_MS, onDelete: (i) => told.push(i) });
    expect(ls(dir)).toEqual(['edge.jsonl', 'new.jsonl']);
    expect(told.map((t) => [t.label, t.file, t.reason])).toEqual([['events', 'old.jsonl', 'age']]);
    expect([r.deletedFiles, r.freedBytes, r.keptFiles, r.keptBytes]).toEqual([1, 10, 2, 20]);
  });

  it('age first, then size: reasons say which limit took each set', async () => {
    const dir = tempDir();
    put(dir, 'a.csv', 100, 10);
    put(dir, 'b.csv', 100, 3);
    put(dir, 'c.csv', 100, 2);
    put(dir, 'd.csv', 100, 1);
    const told: string[] = [];
    await enforceRetention({ groups: [{ dir, label: 'levels', match: /\.csv$/ }], maxAgeDays: 7, maxBytes: 150, nowMs: NOW_MS, onDelete: (i) => told.push(`${i.file}:${i.reason}`) });
    expect(told).toEqual(['a.csv:age', 'b.csv:size', 'c.csv:size']);
    expect(ls(dir)).toEqual(['d.csv']);
  });

  it('a WAV and its sidecar are deleted together, counted as one set, aged by the newer of the two', async () => {
    const dir = tempDir();
    // Part 1: WAV 5 days old, sidecar rewritten at close 4 days old → the set is 4 days old.
    put(dir, part(1, 'wav'), 4000, 5);
    put(dir, part(1, 'json'), 500, 4);
    // Part 2: WAV 4.5 days old, sidecar 4.5 days old → older than part 1's set; goes first.
    put(dir, part(2, 'wav'), 4000, 4.5);
    put(dir, part(2, 'json'), 500, 4.5);
    put(dir, part(3, 'wav'), 4000, 1);
    put(dir, part(3, 'json'), 500, 1);
    const told: RetentionDeletion[] = [];
    // Total 13 500; cap 9000 → one set (4500) goes: part 2's.
    const r = await enforceRetention({ groups: [{ dir, label: 'recordings', match: RETENTION_PATTERNS.recordings }], maxAgeDays: null, maxBytes: 9000, nowMs: NOW_MS, onDelete: (i) => told.push(i) });
    expect(told).toEqual([{ label: 'recordings', file: part(2, 'wav'), files: [part(2, 'wav'), part(2, 'json')], bytes: 4500, mtimeUtc: new Date(NOW_MS - 4.5 * DAY_MS).toISOString(), reason: 'size' }]);
    expect(r).toMatchObject({ deletedFiles: 2, deletedSets: 1, freedBytes: 4500, keptFiles: 4, keptBytes: 9000 });
    expect(ls(dir)).toEqual([part(1, 'json'), part(1, 'wav'), part(3, 'json'), part(3, 'wav')]);
  });

  it('the recordings pattern takes the recorder\'s names and leaves temporary sidecars and other files', () => {
    const m = RETENTION_PATTERNS.recordings;
    expect(m.test('nullsteer-20250102T030405Z-raw-0001.wav')).toBe(true);
    expect(m.test('nullsteer-20250102T030405Z-2-beams-0012.json')).toBe(true);
    expect(m.test('nullsteer-20250102T030405Z-raw-0001.json.tmp')).toBe(false);
    expect(m.test('notes.txt')).toBe(false);
    expect(m.test('nullsteer-20250102T030405Z-raw-0001.wav/x')).toBe(false);
  });

  it('leaves unmatched files, subfolders (and what they hold) and symbolic links alone, and never follows a link', async () => {
    const dir = tempDir();
    const outside = tempDir();
    put(dir, 'a.wav', 1000, 9);
    put(dir, 'notes.txt', 1000, 9); // not matched
    mkdirSync(join(dir, 'old.wav')); // a folder with a matching name
    put(join(dir, 'old.wav'), 'inner.wav', 1000, 9);
    mkdirSync(join(dir, 'sub'));
    put(join(dir, 'sub'), 'deep.wav', 1000, 9);
    put(outside, 'target.wav', 1000, 9);
    symlinkSync(join(outside, 'target.wav'), join(dir, 'link.wav')); // a link with a matching name
    symlinkSync(outside, join(dir, 'linkdir.wav'));
    const r = await enforceRetention({ groups: [{ dir, label: 'clips', match: /\.wav$/ }], maxAgeDays: 1, maxBytes: 0, nowMs: NOW_MS });
    expect(r).toMatchObject({ deletedFiles: 1, keptFiles: 0, keptBytes: 0, failedFiles: 0 });
    expect(ls(dir)).toEqual(['link.wav', 'linkdir.wav', 'notes.txt', 'old.wav', 'sub']);
    expect(ls(join(dir, 'old.wav'))).toEqual(['inner.wav']);
    expect(ls(join(dir, 'sub'))).toEqual(['deep.wav']);
    expect(ls(outside)).toEqual(['target.wav']);
  });

  it('a missing folder is empty, not an error', async () => {
    const r = await enforceRetention({ groups: [{ dir: join(tempDir(), 'not-yet'), label: 'levels', match: /./ }], maxAgeDays: 1, maxBytes: 0, nowMs: NOW_MS });
    expect(r).toEqual({ deletedFiles: 0, deletedSets: 0, freedBytes: 0, keptFiles: 0, keptBytes: 0, failedFiles: 0, failures: [], truncated: false });
  });

  it('a file that cannot be deleted is counted and told without its folder, and the pass goes on to the next oldest', async () => {
    const dir = tempDir();
    put(dir, 'a.wav', 100, 4);
    put(dir, 'b.wav', 100, 3);
    put(dir, 'c.wav', 100, 2);
    put(dir, 'd.wav', 100, 1);
    // The process runs as root in CI, so permissions cannot make unlink fail: inject the failure
    // with Node's own error shape (code EACCES, message "EACCES: permission denied, unlink '<path>'").
    const unlinkFile = async (p: string) => {
      if (basename(p) === 'a.wav') throw Object.assign(new Error(`EACCES: permission denied, unlink '${p}'`), { code: 'EACCES' });
      rmSync(p);
    };
    const errors: unknown[] = [];
    const r = await enforceRetention({ groups: [{ dir, label: 'clips', match: /\.wav$/ }], maxAgeDays: null, maxBytes: 200, nowMs: NOW_MS, unlinkFile, onError: (f) => errors.push(f) });
    // 400 bytes, cap 200: a fails (kept), b and c go → 200 left (a and d).
    expect(ls(dir)).toEqual(['a.wav', 'd.wav']);
    expect(r).toEqual({
      deletedFiles: 2,
      deletedSets: 2,
      freedBytes: 200,
      keptFiles: 2,
      keptBytes: 200,
      failedFiles: 1,
      failures: [{ label: 'clips', file: 'a.wav', message: 'permission denied (EACCES)' }],
      truncated: false,
    });
    expect(errors).toEqual(r.failures);
    expect(JSON.stringify(r)).not.toContain(dir);
  });

  it('a set whose main file cannot be deleted keeps its sidecar too', async () => {
    const dir = tempDir();
    put(dir, part(1, 'wav'), 1000, 2);
    put(dir, part(1, 'json'), 100, 2);
    const unlinkFile = async (p: string) => {
      if (p.endsWith('.wav')) throw Object.assign(new Error(`EPERM: operation not permitted, unlink '${p}'`), { code: 'EPERM' });
      rmSync(p);
    };
    const r = await enforceRetention({ groups: [{ dir, label: 'recordings', match: RETENTION_PATTERNS.recordings }], maxAgeDays: 1, maxBytes: null, nowMs: NOW_MS, unlinkFile });
    expect(ls(dir)).toEqual([part(1, 'json'), part(1, 'wav')]);
    expect(r).toMatchObject({ deletedFiles: 0, deletedSets: 0, keptFiles: 2, keptBytes: 1100, failedFiles: 1, failures: [{ label: 'recordings', file: part(1, 'wav'), message: 'operation not permitted (EPERM)' }] });
  });

  it('files in use (the open recording part) are never deleted, and count as kept', async () => {
    const dir = tempDir();
    put(dir, part(1, 'wav'), 1000, 40);
    put(dir, part(1, 'json'), 100, 40);
    put(dir, part(2, 'wav'), 1000, 0);
    const r = await enforceRetention({
      groups: [{ dir, label: 'recordings', match: RETENTION_PATTERNS.recordings }],
      maxAgeDays: 30,
      maxBytes: 0,
      nowMs: NOW_MS,
      inUse: (label, file) => label === 'recordings' && file === part(1, 'json'),
    });
    // Part 1 is in use through its sidecar (both stay); part 2 goes for size.
    expect(ls(dir)).toEqual([part(1, 'json'), part(1, 'wav')]);
    expect(r).toMatchObject({ deletedSets: 1, keptFiles: 2, keptBytes: 1100 });
  });

  it('keepNewest keeps a group\'s newest set (the day still being appended), even over the cap', async () => {
    const dir = tempDir();
    put(dir, '2026-01-29.csv', 100, 2);
    put(dir, '2026-01-29.jsonl', 100, 2);
    put(dir, '2026-01-30.csv', 100, 1);
    put(dir, '2026-01-31.csv', 100, 0);
    put(dir, '2026-01-31.jsonl', 100, 0);
    const told: string[] = [];
    const r = await enforceRetention({ groups: [{ dir, label: 'levels', match: DAY_FILE_PATTERN, keepNewest: true }], maxAgeDays: null, maxBytes: 0, nowMs: NOW_MS, onDelete: (i) => told.push(i.files.join('+')) });
    expect(told).toEqual(['2026-01-29.csv+2026-01-29.jsonl', '2026-01-30.csv']);
    expect(ls(dir)).toEqual(['2026-01-31.csv', '2026-01-31.jsonl']);
    expect(r).toMatchObject({ deletedFiles: 3, deletedSets: 2, keptFiles: 2, keptBytes: 200 });
  });

  it('beyond maxEntries the pass is truncated: age applies, size does not, an error is counted', async () => {
    const dir = tempDir();
    for (let i = 0; i < 5; i++) put(dir, `f${i}.csv`, 100, i === 0 ? 50 : 1);
    const r = await enforceRetention({ groups: [{ dir, label: 'levels', match: /\.csv$/ }], maxAgeDays: 30, maxBytes: 0, nowMs: NOW_MS, maxEntries: 3 });
    expect(r.truncated).toBe(true);
    expect(r.failedFiles).toBe(1);
    expect(r.failures[0]).toEqual({ label: 'retention', file: null, message: 'more than 3 matching files; the size limit was not applied in this pass' });
    // At most the one 50-day-old file went (if it was among the three listed); no 1-day-old file did.
    expect(ls(dir).length).toBeGreaterThanOrEqual(4);
    expect(ls(dir).filter((f) => f !== 'f0.csv')).toEqual(['f1.csv', 'f2.csv', 'f3.csv', 'f4.csv']);
  });

  it('refuses invalid limits with RangeError (rejected, not thrown)', async () => {
    const base: RetentionOptions = { groups: [], maxAgeDays: null, maxBytes: null, nowMs: NOW_MS };
    const p = enforceRetention({ ...base, maxAgeDays: 0 });
    await expect(p).rejects.toThrow(RangeError);
    await expect(enforceRetention({ ...base, maxBytes: -1 })).rejects.toThrow('retention: maxBytes -1, allowed an integer ≥ 0 or null');
    await expect(enforceRetention({ ...base, maxBytes: 1.5 })).rejects.toThrow(RangeError);
  });
});

describe('retentionPolicies', () => {
  it('covers recordings and clips under outputs, levels and events under data, and nothing else of those folders', async () => {
    const root = tempDir();
    const rec = join(root, 'rec');
    const data = join(root, 'data');
    for (const d of [rec, join(rec, 'clips'), join(data, 'levels'), join(data, 'events'), join(data, 'presets')]) mkdirSync(d, { recursive: true });
    put(rec, part(1, 'wav'), 100, 9);
    put(rec, part(1, 'json'), 10, 9);
    put(rec, `${part(2, 'json')}.tmp`, 10, 9); // a sidecar rewrite left by a kill: the recorder clears it
    put(rec, 'my-notes.wav', 100, 9); // the user's, not the recorder's name
    put(join(rec, 'clips'), 'event-42-beam.wav', 100, 9);
    put(join(rec, 'clips'), 'event-42-beam.json', 10, 9);
    put(join(data, 'levels'), '2026-01-01.csv', 100, 30);
    put(join(data, 'levels'), '2026-01-31.csv', 100, 0);
    put(join(data, 'events'), '2026-01-01.jsonl', 100, 30);
    put(join(data, 'events'), '2026-01-31.jsonl', 100, 0);
    put(data, 'journal.jsonl', 100, 30);
    put(data, 'journal.1.jsonl', 100, 30);
    put(join(data, 'presets'), 'quiet.json', 100, 30);
    const limits = { maxAgeDays: null, maxBytes: 0 };
    const policies = retentionPolicies({ outputs: { dir: 'rec', retention: limits }, data: { dir: 'data', retention: limits } }, root);
    expect(policies.map((p) => [p.name, p.groups.map((g) => g.label)])).toEqual([
      ['outputs', ['rec', 'rec/clips']],
      ['data', ['data/levels', 'data/events']],
    ]);
    const told: string[] = [];
    for (const p of policies) await enforceRetention({ ...p, nowMs: NOW_MS, onDelete: (i) => told.push(`${i.label}/${i.files.join('+')}`) });
    expect(told).toEqual([
      `rec/${part(1, 'wav')}+${part(1, 'json')}`,
      'rec/clips/event-42-beam.wav+event-42-beam.json',
      'data/levels/2026-01-01.csv',
      'data/events/2026-01-01.jsonl',
    ]);
    expect(ls(rec)).toEqual(['clips', 'my-notes.wav', `${part(2, 'json')}.tmp`]);
    expect(ls(join(data, 'levels'))).toEqual(['2026-01-31.csv']);
    expect(ls(data)).toEqual(['events', 'journal.1.jsonl', 'journal.jsonl', 'levels', 'presets']);
    expect(ls(join(data, 'presets'))).toEqual(['quiet.json']);
    expect(CLIP_PATTERN.test('x.json.tmp')).toBe(false);
  });

  it('with a real recording under way: closed parts go, the open part (WAV and sidecar) stays and the recording goes on', async () => {
    const dir = tempDir();
    const rec = new Recorder();
    const meta = { array: null, params: {}, source: { kind: 'test' } };
    await rec.start({ dir, dirLabel: 'rec', prefix: 'nullsteer', encoding: 'int16', rotateSeconds: 0.1, meta }); // 800 frames a part at 8 kHz
    const push = (i: number) => rec.push({ streamId: 1, sampleIndex: i * 400, sampleRateHz: 8000, channels: 2, frames: 400, data: new Float32Array(800).fill(0.25), gap: false, discontinuity: false });
    for (let i = 0; i < 7; i++) push(i); // parts 1–3 full, part 4 open with 400 frames
    // Closing a part finishes in the background: wait (bounded) until the three full parts are closed.
    for (let k = 0; k < 3000 && rec.status().files.filter((f) => f.closed).length < 3; k++) await new Promise((r) => setTimeout(r, 5));
    const st = rec.status();
    expect(st.files.map((f) => f.closed)).toEqual([true, true, true, false]);
    const open = st.files[3];
    const r = await enforceRetention({ groups: [{ dir, label: 'rec', match: RETENTION_PATTERNS.recordings }], maxAgeDays: null, maxBytes: 0, nowMs: Date.now(), inUse: (label, file) => openRecordingFiles('rec', st.files).has(`${label}/${file}`) });
    expect(r).toMatchObject({ deletedFiles: 6, deletedSets: 3, failedFiles: 0, keptFiles: 2 });
    expect(ls(dir)).toEqual([open.sidecar, open.wav].sort());
    push(7);
    const end = await rec.stop();
    expect(end.error).toBeNull();
    expect(end.files.at(-1)).toMatchObject({ wav: open.wav, frames: 800, closed: true });
  });

  it('openRecordingFiles lists the WAV and sidecar of each part not yet closed', () => {
    const parts = [
      { wav: 'a-raw-0001.wav', sidecar: 'a-raw-0001.json', closed: true },
      { wav: 'a-raw-0002.wav', sidecar: 'a-raw-0002.json', closed: false },
    ];
    expect([...openRecordingFiles('rec', parts)]).toEqual(['rec/a-raw-0002.wav', 'rec/a-raw-0002.json']);
  });
});

/** A manual timer: tests fire the pending callback themselves. */
function manualTimers() {
  const pending = new Map<number, { fn: () => void; ms: number }>();
  let next = 1;
  return {
    pending,
    timers: {
      set: (fn: () => void, ms: number) => {
        pending.set(next, { fn, ms });
        return next++;
      },
      clear: (h: unknown) => void pending.delete(h as number),
    },
    fire() {
      const [[h, t]] = [...pending];
      pending.delete(h);
      t.fn();
    },
  };
}

const EMPTY: RetentionResult = { deletedFiles: 0, deletedSets: 0, freedBytes: 0, keptFiles: 0, keptBytes: 0, failedFiles: 0, failures: [], truncated: false };
const flush = () => new Promise<void>((r) => setImmediate(r));

describe('RetentionScheduler', () => {
  it('runs once at start and then per tick, never two passes at once; counters add up', async () => {
    const t = manualTimers();
    const calls: RetentionOptions[] = [];
    let release: (() => void) | null = null;
    const enforce = (o: RetentionOptions) => {
      calls.push(o);
      return new Promise<RetentionResult>((resolve) => {
        release = () => resolve({ ...EMPTY, deletedFiles: 2, deletedSets: 1, freedBytes: 300, keptFiles: 4, keptBytes: 700, failedFiles: 1 });
      });
    };
    let clock = NOW_MS;
    const s = new RetentionScheduler({
      policies: [{ name: 'outputs', groups: [{ dir: '/nonexistent-retention', label: 'recordings', match: /x/ }], maxAgeDays: 30, maxBytes: 1000 }],
      intervalS: 60,
      now: () => clock,
      timers: t.timers,
      enforce,
      freeBytes: async () => 12345,
    });
    s.start();
    expect(calls).toHaveLength(1); // the pass at start
    expect(t.pending.size).toBe(1);
    expect([...t.pending.values()][0].ms).toBe(60_000);
    expect(s.status()).toMatchObject({ running: true, runs: 0, skippedRuns: 0, lastRunUtc: null });

    // Two ticks while the first pass is still under way: no second pass, both counted as skipped.
    t.fire();
    t.fire();
    await flush();
    expect(calls).toHaveLength(1);
    expect(s.status()).toMatchObject({ running: true, runs: 0, skippedRuns: 2 });
    expect(t.pending.size).toBe(1); // the cadence goes on

    clock += 1000;
    release!();
    await flush();
    expect(s.status()).toEqual({
      intervalS: 60,
      running: false,
      runs: 1,
      skippedRuns: 2,
      deletedFiles: 2,
      deletedSets: 1,
      freedBytes: 300,
      errors: 1,
      lastRunUtc: new Date(NOW_MS + 1000).toISOString(),
      lastError: null,
      policies: [{ name: 'outputs', maxAgeDays: 30, maxBytes: 1000, keptFiles: 4, keptBytes: 700, freeBytes: 12345 }],
    });

    // The next tick starts the second pass; runNow() during it joins it instead of starting a third.
    t.fire();
    expect(calls).toHaveLength(2);
    expect(calls[1]).toMatchObject({ maxAgeDays: 30, maxBytes: 1000, nowMs: NOW_MS + 1000 });
    const joined = s.runNow();
    expect(calls).toHaveLength(2);
    release!();
    await joined;
    expect(s.status()).toMatchObject({ runs: 2, deletedFiles: 4, freedBytes: 600, errors: 2 });

    await s.stop();
    expect(t.pending.size).toBe(0);
  });

  it('a pass that throws is counted as an error and the next one still runs', async () => {
    const t = manualTimers();
    let n = 0;
    const s = new RetentionScheduler({
      policies: [{ name: 'data', groups: [], maxAgeDays: null, maxBytes: 10 }],
      timers: t.timers,
      enforce: async () => {
        if (n++ === 0) throw new RangeError('boom');
        return EMPTY;
      },
    });
    s.start();
    await flush();
    expect(s.status()).toMatchObject({ runs: 1, errors: 1, lastError: 'data: boom' });
    t.fire();
    await flush();
    expect(s.status()).toMatchObject({ runs: 2, errors: 1 });
    await s.stop();
  });

  it('with real files: tells each deletion with its policy, and keeps the files in use', async () => {
    const dir = tempDir();
    put(dir, part(1, 'wav'), 1000, 3);
    put(dir, part(1, 'json'), 10, 3);
    put(dir, part(2, 'wav'), 1000, 2);
    put(dir, part(3, 'wav'), 1000, 0);
    const t = manualTimers();
    const told: string[] = [];
    const s = new RetentionScheduler({
      policies: [{ name: 'outputs', groups: [{ dir, label: 'recordings', match: RETENTION_PATTERNS.recordings }], maxAgeDays: null, maxBytes: 0 }],
      now: () => NOW_MS,
      timers: t.timers,
      inUse: () => new Set([`recordings/${part(3, 'wav')}`]),
      onDelete: (policy, i) => told.push(`${policy}:${i.label}/${i.file}+${i.files.length - 1}:${i.reason}`),
    });
    await s.runNow();
    expect(told).toEqual([`outputs:recordings/${part(1, 'wav')}+1:size`, `outputs:recordings/${part(2, 'wav')}+0:size`]);
    expect(ls(dir)).toEqual([part(3, 'wav')]);
    expect(existsSync(join(dir, part(1, 'json')))).toBe(false);
    const st = s.status();
    expect(st).toMatchObject({ runs: 1, deletedFiles: 3, deletedSets: 2, freedBytes: 2010, errors: 0 });
    expect(st.policies[0]).toMatchObject({ keptFiles: 1, keptBytes: 1000 });
    expect(st.policies[0].freeBytes).toBeGreaterThan(0); // statfs of the temporary folder's disk
    await s.stop();
  });

  it('free space of a policy whose folder does not exist yet is its nearest parent\'s', async () => {
    const dir = join(tempDir(), 'levels', 'not-yet');
    const s = new RetentionScheduler({ policies: [{ name: 'data', groups: [{ dir, label: 'levels', match: /x/ }], maxAgeDays: 1, maxBytes: null }], timers: manualTimers().timers });
    await s.runNow();
    expect(s.status().policies[0]).toMatchObject({ keptFiles: 0, keptBytes: 0 });
    expect(s.status().policies[0].freeBytes).toBeGreaterThan(0);
    expect(s.status().errors).toBe(0);
  });

  it('refuses an interval outside 1–86400 s', () => {
    expect(() => new RetentionScheduler({ policies: [], intervalS: 0 })).toThrow(RangeError);
  });
});
