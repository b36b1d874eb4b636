/** The parameter journal: records, queries, persistence across instances, corrupt lines. */
import { appendFileSync, closeSync, existsSync, ftruncateSync, mkdirSync, mkdtempSync, openSync, readFileSync, readdirSync, rmSync, statSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { diffSummary, JOURNAL_FILE, JOURNAL_OLD_FILE, ParameterJournal } from '../../server/session/journal.ts';

const who = { remote: '127.0.0.1', agent: 'test' };

describe('ParameterJournal', () => {
  it('summarises what changed, field by field', () => {
    expect(diffSummary({ lambda: 0.99, fftSize: 512, bandHz: [300, 6000] }, { lambda: 0.995, fftSize: 512, bandHz: [500, 6000] })).toBe('lambda 0.99 → 0.995; bandHz [300,6000] → [500,6000]');
    expect(diffSummary({ a: 1 }, { a: 1 })).toBe('no change');
    expect(diffSummary(null, { id: 2 })).toBe('null → {"id":2}');
    // With the STFT clock, λ reads as the time constant τ = hop / (fs (1 − λ)) the panel shows.
    expect(diffSummary({ lambda: 1 - 256 / (48000 * 2) }, { lambda: 1 - 256 / (48000 * 4) }, { hopSamples: 256, sampleRateHz: 48000 })).toBe('time constant τ 2 s → 4 s (λ 0.997333 → 0.998667)');
    // Floating-point noise never reaches a summary (τ from λ: 1.9999999999999707).
    expect(diffSummary({ tauS: 1.9999999999999707 }, { tauS: 0.30000000000000004 })).toBe('tauS 2 → 0.3');
    expect(diffSummary({ loading: { ratio: 0.1 + 0.2 } }, { loading: { ratio: 0.5 } })).toBe('loading {"ratio":0.3} → {"ratio":0.5}');
  });

  it('keeps entries in order, answers queries, and reads them back in a new session', () => {
    const dir = mkdtempSync(join(tmpdir(), 'nullsteer-journal-'));
    const a = new ParameterJournal(dir, { now: () => new Date('2026-12-02T10:00:00Z') });
    a.record('processing', who, 48000, { lambda: 0.99 }, { lambda: 0.995 });
    a.record('reset', who, 96000, null, null, 'covariance emptied');
    a.record('mask', { remote: '10.0.0.7', agent: null }, null, { masked: [] }, { masked: [3] });
    expect(a.total).toBe(3);
    expect(a.query().map((e) => [e.seq, e.kind, e.sampleIndex, e.summary])).toEqual([
      [1, 'processing', 48000, 'lambda 0.99 → 0.995'],
      [2, 'reset', 96000, 'covariance emptied'],
      [3, 'mask', null, 'masked [] → [3]'],
    ]);
    expect(a.query({ afterSeq: 1, limit: 1 }).map((e) => e.seq)).toEqual([3]);
    expect(readFileSync(join(dir, JOURNAL_FILE), 'utf8').trim().split('\n')).toHaveLength(3);

    // A restart: a new session that sees the old entries and continues the numbering.
    appendFileSync(join(dir, JOURNAL_FILE), '{"seq": 99, "half a line\nnot json at all\n{"seq":"x"}\n');
    const b = new ParameterJournal(dir, { now: () => new Date('2026-12-02T11:00:00Z') });
    expect(b.corruptLines).toBe(3);
    expect(b.total).toBe(3);
    const e = b.record('processing', who, 0, { lambda: 0.995 }, { lambda: 0.9 });
    expect(e.seq).toBe(4);
    expect(b.query().map((x) => x.session)).toEqual(['2026-12-02T10:00:00.000Z', '2026-12-02T10:00:00.000Z', '2026-12-02T10:00:00.000Z', '2026-12-02T11:00:00.000Z']);
    expect(b.query({ session: b.session }).map((x) => x.seq)).toEqual([4]);
    expect(b.query()[2].actor).toEqual({ remote: '10.0.0.7', agent: null });
  });

  it('bounds what it keeps in memory; a failing append is counted, the entry kept', () => {
    const j = new ParameterJournal(null, { keep: 5 });
    for (let i = 0; i < 12; i++) j.record('reset', who, i, null, null, `r${i}`);
    expect(j.query().map((e) => e.seq)).toEqual([8, 9, 10, 11, 12]);
    const dir = mkdtempSync(join(tmpdir(), 'nullsteer-journal-'));
    const k = new ParameterJournal(join(dir, 'sub'));
    // Make the file a directory's name: appends fail.
    rmSync(join(dir, 'sub'), { recursive: true });
    mkdirSync(join(dir, 'sub', JOURNAL_FILE), { recursive: true });
    k.record('reset', who, 0, null, null);
    expect(k.writeErrors).toBe(1);
    expect(k.lastWriteError).toMatch(/EISDIR/);
    expect(k.query()).toHaveLength(1);
  });

  it('rotates at maxBytes: at most two files of that size, read back in order after a restart', () => {
    const dir = mkdtempSync(join(tmpdir(), 'nullsteer-journal-'));
    const maxBytes = 64 * 1024;
    const j = new ParameterJournal(dir, { maxBytes });
    // About 1 KiB per entry: 300 entries are ~4.7 times the limit.
    const pad = 'x'.repeat(900);
    for (let i = 0; i < 300; i++) j.record('processing', who, i, { lambda: 0.99, pad }, { lambda: 0.98, pad });
    expect(readdirSync(dir).sort()).toEqual([JOURNAL_OLD_FILE, JOURNAL_FILE]);
    for (const f of [JOURNAL_FILE, JOURNAL_OLD_FILE]) expect(statSync(join(dir, f)).size).toBeLessThanOrEqual(maxBytes);
    expect(j.rotations).toBeGreaterThanOrEqual(4);
    expect(j.writeErrors).toBe(0);
    const b = new ParameterJournal(dir, { maxBytes });
    const seqs = b.query().map((e) => e.seq);
    // What the two files hold: the newest entries, contiguous, ending with the last one.
    expect(seqs[seqs.length - 1]).toBe(300);
    expect(seqs).toEqual(Array.from({ length: seqs.length }, (_, k) => 301 - seqs.length + k));
    // The older file was full when it rotated: at least 64 KiB of ~2.1 KiB entries.
    expect(seqs.length).toBeGreaterThan(25);
    expect(b.total).toBe(300);
    expect(b.corruptLines).toBe(0);
  });

  it('starts on a journal past any string size (600 MB) and a corrupt one, reading only its last maxBytes, and rotates it', () => {
    const dir = mkdtempSync(join(tmpdir(), 'nullsteer-journal-'));
    const file = join(dir, JOURNAL_FILE);
    // 600 MB of NUL bytes (a sparse file: no disk used), then one good entry. Read whole as a
    // string it exceeds V8's limit (2^29 − 24 characters, from memory): the old start-up failed.
    const fd = openSync(file, 'w');
    ftruncateSync(fd, 600 * 2 ** 20);
    closeSync(fd);
    const good = { seq: 41, session: '2026-12-01T08:00:00.000Z', at: '2026-12-01T08:00:01.000Z', sampleIndex: 0, actor: who, kind: 'reset', summary: 'covariance emptied', before: null, after: null };
    appendFileSync(file, `\n${'{"seq": 7, "cut'}\n${'y'.repeat(300 * 1024)}\n${JSON.stringify(good)}\n`);
    const j = new ParameterJournal(dir, { maxBytes: 1 << 20 });
    expect(j.readError).toBeNull();
    expect(j.query()).toEqual([good]);
    expect(j.total).toBe(41);
    // The cut JSON line and the 300 KiB line (longer than any entry) are counted, not fatal.
    expect(j.corruptLines).toBe(2);
    // Too large: rotated at once, so the next start reads a small file.
    expect(existsSync(file)).toBe(false);
    expect(statSync(join(dir, JOURNAL_OLD_FILE)).size).toBeGreaterThan(600 * 2 ** 20);
    expect(j.record('reset', who, 1, null, null).seq).toBe(42);
    expect(statSync(file).size).toBeLessThan(1024);
    // Unreadable (a folder where the file should be): noted, started empty, still writes.
    const dir2 = mkdtempSync(join(tmpdir(), 'nullsteer-journal-'));
    mkdirSync(join(dir2, JOURNAL_OLD_FILE));
    writeFileSync(join(dir2, JOURNAL_FILE), `${JSON.stringify(good)}\n`);
    const k = new ParameterJournal(dir2);
    expect(k.readError).toBe('illegal operation on a directory (EISDIR)');
    expect(k.readError).not.toContain(dir2);
    expect(k.query()).toEqual([good]);
  });
});
