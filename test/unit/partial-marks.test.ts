/**
 * Partial rows on the direction history (issue 17; client/src/lib/history.ts, partial-marks.ts):
 * which rows the history holds as partial, where their marks go, and when the strip's badge is lit.
 * Expected heights are worked out by hand from the placement rule the history documents (a row's
 * time is its sample index over the sample rate, DESIGN.md §3; its top edge at (t_top − t)/span of
 * the view's height, its bottom edge its duration lower) and cross-checked against the runs the
 * image is drawn with (history-painter.ts visibleRuns, separate code).
 */
import { describe, expect, it } from 'vitest';
import type { SpectrumRow } from '../../shared/messages.ts';
import { RowHistory } from '../../client/src/lib/history.ts';
import { visibleRuns } from '../../client/src/lib/history-painter.ts';
import { MAX_MARK_SPANS, PARTIAL_MARK_COLOUR, PARTIAL_MARK_RGB, PARTIAL_RECENT_ROWS, partialIsRecent, partialMarkSpans } from '../../client/src/lib/partial-marks.ts';
import { COLORMAP_RGB, COLORMAP_SIZE, NO_DATA_RGB } from '../../shared/colormap.ts';
import { PALETTE } from '../../client/src/lib/theme.ts';

const FS = 48_000;
/** 2400 samples at 48 kHz: 20 rows/s, 0.05 s apart. */
const ROW = 2400;

function row(sampleIndex: number, partial?: boolean): SpectrumRow {
  const db = new Float32Array(4).fill(-20);
  return { seq: 0, sampleIndex, emittedAtMs: 0, shedStep: 0, normalised: false, nAz: 4, nEl: 1, conventionalDb: db, mvdrDb: db, peaks: { conventional: [], mvdr: [] }, ...(partial === undefined ? {} : { partial }) };
}

function spans(h: RowHistory, top: number, spanS: number, room = MAX_MARK_SPANS): number[][] {
  const out = new Float64Array(2 * room);
  const n = partialMarkSpans(h, top, spanS, out);
  const r: number[][] = [];
  for (let i = 0; i < n; i++) r.push([out[2 * i], out[2 * i + 1]]);
  return r;
}

describe('partial rows in the history ring', () => {
  it('keeps a flag per stored row and counts the partial rows held as the ring overwrites', () => {
    const h = new RowHistory([0, 90, 180, 270], 64);
    // Rows 0–63; every tenth partial (0, 10, …, 60: 7 rows); partial absent = not partial.
    for (let i = 0; i < 64; i++) h.push(row(i * ROW, i % 10 === 0 ? true : i % 2 === 0 ? false : undefined), 0, FS);
    expect(h.partialHeld).toBe(7);
    for (let i = 0; i < 64; i++) expect(h.partial[h.slot(i)]).toBe(i % 10 === 0 ? 1 : 0);
    // 16 more rows, none partial: rows 0–15 leave (0 and 10 were partial).
    for (let i = 64; i < 80; i++) h.push(row(i * ROW), 0, FS);
    expect(h.oldest).toBe(16);
    expect(h.partialHeld).toBe(5);
    // Row 80, partial, takes the slot of row 16 (whole): one more held.
    h.push(row(80 * ROW, true), 0, FS);
    expect(h.partialHeld).toBe(6);
    // Rows 81–83 whole, then row 84, partial, takes the slot of row 20 (partial): one leaves, one comes.
    for (let i = 81; i < 84; i++) h.push(row(i * ROW), 0, FS);
    h.push(row(84 * ROW, true), 0, FS);
    expect(h.partialHeld).toBe(6);
    expect(h.partial[h.slot(84)]).toBe(1);
    // Resampled to another azimuth axis (a grid change): the flags and the count go along.
    const r = h.resampled([0, 45, 90, 135, 180, 225, 270, 315]);
    expect(r.partialHeld).toBe(6);
    for (let n = r.oldest; n < r.count; n++) expect(r.partial[r.slot(n)]).toBe(h.partial[h.slot(n - r.oldest + h.oldest)]);
  });
});

describe('partial-row marks', () => {
  it('marks each partial row at its place on the time line, merging neighbours, newest first', () => {
    const h = new RowHistory([0, 90, 180, 270], 64);
    // Rows 0–29, 0.05 s apart; 10, 25 and 26 partial. View: 1 s, top row 29.
    for (let i = 0; i < 30; i++) h.push(row(i * ROW, i === 10 || i === 25 || i === 26), 0, FS);
    const s = spans(h, 29, 1);
    expect(s.length).toBe(2);
    // Row 26 is 3 rows below the top: 0.15 s → 0.15 of the height; row 25 below it ends at 0.25.
    expect(s[0][0]).toBeCloseTo(0.15, 12);
    expect(s[0][1]).toBeCloseTo(0.25, 12);
    // Row 10: 19 rows (0.95 s) below the top, one row tall (reaching the bottom edge, 1.0).
    expect(s[1][0]).toBeCloseTo(0.95, 12);
    expect(s[1][1]).toBeCloseTo(1.0, 12);
    // The same heights as the image's own runs: the run holding rows 0–29 spans 0 to 1.45 (row 0 has no duration).
    const runs = visibleRuns(h, 29, 1);
    expect(runs.length).toBe(1);
    expect(runs[0].topFraction).toBeCloseTo(0, 12);
    expect(runs[0].bottomFraction).toBeCloseTo(1, 12); // rows 29…10 shown (row 9's top edge is at the bottom)
    // Scrolled back (paused on row 20): row 10 is 0.5 s below the top; 25 and 26 are above the view.
    const back = spans(h, 20, 1);
    expect(back.length).toBe(1);
    expect(back[0][0]).toBeCloseTo(0.5, 12);
    expect(back[0][1]).toBeCloseTo(0.55, 12);
    // A 15 s view: the same rows, 15 times closer together.
    const wide = spans(h, 29, 15);
    expect(wide.map(([a, b]) => [a * 15, b * 15])).toEqual([
      [expect.closeTo(0.15, 12), expect.closeTo(0.25, 12)],
      [expect.closeTo(0.95, 12), expect.closeTo(1.0, 12)],
    ]);
  });

  it('keeps a gap between partial rows that a skipped row separates, and stops at the buffer size', () => {
    const h = new RowHistory([0, 90], 64);
    // Rows at 0…4 and 7…9 (rows 5, 6 never came); 4 and 7 partial: not neighbours on the time line.
    for (const i of [0, 1, 2, 3, 4, 7, 8, 9]) h.push(row(i * ROW, i === 4 || i === 7), 0, FS);
    const s = spans(h, 7, 1);
    // Row 7 (number 5): 2 rows (0.10 s) below the top row 9; row 4: 5 rows (0.25 s) below.
    expect(s.map(([a, b]) => [a, b])).toEqual([
      [expect.closeTo(0.1, 12), expect.closeTo(0.15, 12)],
      [expect.closeTo(0.25, 12), expect.closeTo(0.3, 12)],
    ]);
    // Room for one span only: the newest is written, the count says one.
    expect(spans(h, 7, 1, 1).length).toBe(1);
    // Spans closer than the merge gap (the painter's one device pixel) become one: here the gap
    // between them is 0.10 of the height; a merge gap of 0.1 joins them, 0.09 does not.
    const out = new Float64Array(8);
    expect(partialMarkSpans(h, 7, 1, out, 0.09)).toBe(2);
    expect(partialMarkSpans(h, 7, 1, out, 0.1)).toBe(1);
    expect(out[0]).toBeCloseTo(0.1, 12);
    expect(out[1]).toBeCloseTo(0.3, 12);
  });

  it('merges every-other-row partials at a wide span into spans no denser than the merge gap', () => {
    // 9000 rows (7.5 min at 20 rows/s), every other one partial, a 450 s view 500 px tall: each
    // row is 0.056 px, so with a one-pixel merge gap the whole view is one mark.
    const h = new RowHistory([0, 90], 9000);
    for (let i = 0; i < 9000; i++) h.push(row(i * ROW, i % 2 === 0), 0, FS);
    const out = new Float64Array(2 * MAX_MARK_SPANS);
    expect(partialMarkSpans(h, 8999, 450, out)).toBe(MAX_MARK_SPANS); // no merge gap: the buffer fills
    expect(partialMarkSpans(h, 8999, 450, out, 1 / 500)).toBe(1);
    expect(out[0]).toBeCloseTo(0.05 / 450, 12); // row 8998, one row below the top
    expect(out[1]).toBeCloseTo(449.95 / 450, 9); // down to row 0 (partial, 449.95 s old, no duration: the first row)
  });

  it('marks nothing in a history without partial rows or with no rows', () => {
    const h = new RowHistory([0, 90], 64);
    expect(spans(h, 0, 30)).toEqual([]);
    for (let i = 0; i < 10; i++) h.push(row(i * ROW), 0, FS);
    expect(spans(h, 9, 30)).toEqual([]);
    expect(spans(h, 9, 0)).toEqual([]);
  });

  it('draws in a colour the level scale and the no-data grey never take', () => {
    expect(PARTIAL_MARK_COLOUR).toBe(PALETTE.partial);
    expect(PARTIAL_MARK_RGB).toEqual([0xff, 0x48, 0x96]);
    const lut = COLORMAP_RGB;
    let nearest = Infinity;
    for (let i = 0; i < COLORMAP_SIZE; i++) {
      const d = Math.hypot(lut[3 * i] - PARTIAL_MARK_RGB[0], lut[3 * i + 1] - PARTIAL_MARK_RGB[1], lut[3 * i + 2] - PARTIAL_MARK_RGB[2]);
      nearest = Math.min(nearest, d);
    }
    // Far from every entry of the scale (in 8-bit RGB units), so a mark is never read as a level.
    expect(nearest).toBeGreaterThan(100);
    expect(Math.hypot(NO_DATA_RGB[0] - 255, NO_DATA_RGB[1] - 72, NO_DATA_RGB[2] - 150)).toBeGreaterThan(100);
  });
});

describe('the strip badge for recent partial rows', () => {
  it('is lit while one of the last PARTIAL_RECENT_ROWS accepted rows was partial', () => {
    expect(PARTIAL_RECENT_ROWS).toBe(40);
    expect(partialIsRecent(0, -1)).toBe(false);
    expect(partialIsRecent(500, -1)).toBe(false);
    // The partial row was row 100 (count 100 just after it): lit for it and the next 39 rows.
    expect(partialIsRecent(100, 100)).toBe(true);
    expect(partialIsRecent(139, 100)).toBe(true);
    expect(partialIsRecent(140, 100)).toBe(false);
    expect(partialIsRecent(10, 5, 5)).toBe(false);
    expect(partialIsRecent(9, 5, 5)).toBe(true);
  });
});
