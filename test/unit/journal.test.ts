/** The parameter journal: records, queries, persistence across instances, corrupt lines. */
import { appendFileSync, mkdirSync, mkdtempSync, readFileSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { diffSummary, JOURNAL_FILE, ParameterJournal } from '../../server/session/journal.ts';

const who = { remote: '127.0.0.1', agent: 'test' };

describe('ParameterJournal', () => {
  it('summarises what changed, field by field', () => {
    expect(diffSummary({ lambda: 0.99, fftSize: 512, bandHz: [300, 6000] }, { lambda: 0.995, fftSize: 512, bandHz: [500, 6000] })).toBe('lambda 0.99 → 0.995; bandHz [300,6000] → [500,6000]');
    expect(diffSummary({ a: 1 }, { a: 1 })).toBe('no change');
    expect(diffSummary(null, { id: 2 })).toBe('null → {"id":2}');
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
});
