/**
 * The direction history's axes (client/src/lib/history.ts, history-painter.ts visibleRuns,
 * time-axis.ts, history-title.ts). The expected times are worked out by hand from the rule the
 * code documents: a row's time is its sample index over the sample rate (DESIGN.md §3: "wall-clock
 * time is derived, never the other way round"), whatever its arrival time.
 */
import { describe, expect, it } from 'vitest';
import type { SpectrumRow } from '../../shared/messages.ts';
import { GAP_FACTOR, MAX_ROW_GAP_S, RowHistory, rowDurationS, rowSpacingS } from '../../client/src/lib/history.ts';
import { visibleRuns } from '../../client/src/lib/history-painter.ts';
import { placeTimeLabels, TIME_STEPS_S, timeLabelStepS, timeLabelText } from '../../client/src/lib/time-axis.ts';
import { historyTitle } from '../../client/src/lib/history-title.ts';

const FS = 48_000;
/** 2400 samples at 48 kHz: 20 rows/s. */
const ROW = 2400;

function row(sampleIndex: number, nAz = 4): SpectrumRow {
  const db = new Float32Array(nAz).fill(-20);
  return { seq: 0, sampleIndex, emittedAtMs: 0, shedStep: 0, normalised: false, nAz, nEl: 1, conventionalDb: db, mvdrDb: db, peaks: { conventional: [], mvdr: [] } };
}

describe('row time line from sample indices', () => {
  it('places rows by sample index whatever their arrival (late rows, bursts)', () => {
    const h = new RowHistory([0, 90, 180, 270], 64);
    // Ten rows 50 ms apart on the stream clock, arriving in two bursts (five at once, 1 s late).
    for (let i = 0; i < 10; i++) h.push(row(1000 + i * ROW), i < 5 ? 100 : 1100, FS);
    for (let i = 0; i < 10; i++) expect(h.timeS[h.slot(i)]).toBeCloseTo(i * 0.05, 12);
    // Arrival times are kept but no longer place anything.
    expect(h.arrivalMs[h.slot(9)]).toBe(1100);
  });

  it('leaves a skipped row as a gap of its true length', () => {
    const h = new RowHistory([0, 90], 64);
    // Rows 0–4, then 7–9: rows 5 and 6 never came (150 ms missing between 4 and 7).
    for (const i of [0, 1, 2, 3, 4, 7, 8, 9]) h.push(row(i * ROW), 0, FS);
    const t = (n: number) => h.timeS[h.slot(n)];
    const d = (n: number) => h.durationS[h.slot(n)];
    expect(t(5)).toBeCloseTo(0.35, 12); // the row of sample index 7·2400
    expect(d(5)).toBeCloseTo(0.05, 12); // keeps one row's duration: 0.1 s of the gap stays empty
    expect(d(6)).toBeCloseTo(0.05, 12);
    // What a pointer finds: row 5 (sample 7·2400) covers 0.30–0.35 s; 0.2–0.3 s is the gap.
    expect(h.rowCovering(0.33)).toBe(5);
    expect(h.rowCovering(0.35)).toBe(5);
    expect(h.rowCovering(0.25)).toBe(-1);
    expect(h.rowCovering(0.19)).toBe(4);
    expect(h.rowCovering(0.5)).toBe(-1);
    // The runs drawn: rows 7–9 (slots 5–7) above the gap, rows 0–4 (slots 0–4) below it.
    const runs = visibleRuns(h, 7, 1);
    expect(runs.map((r) => [r.firstSlot, r.rows])).toEqual([
      [5, 3],
      [0, 5],
    ]);
    // Newest row's top edge at 0; the gap's upper edge at 0.15 s (3 rows), lower at 0.25 s.
    expect(runs[0].topFraction).toBeCloseTo(0, 12);
    expect(runs[0].bottomFraction).toBeCloseTo(0.15, 12);
    expect(runs[1].topFraction).toBeCloseTo(0.25, 12);
    expect(runs[1].bottomFraction).toBeCloseTo(0.45, 12); // row 0 has no duration (no row before it)
  });

  it('takes a lasting change of rate from its second row on', () => {
    // spacing 0.05 → 0.1 s (the engine halves the rate while it sheds load)
    expect(rowDurationS(0.1, 0.05, 0.05)).toBe(0.05);
    expect(rowDurationS(0.1, 0.1, 0.05)).toBe(0.1);
    // hop-quantised spacing (9 or 10 hops of 256 samples) is no gap: 10/9 < GAP_FACTOR
    expect(rowDurationS((10 * 256) / FS, (9 * 256) / FS, (9 * 256) / FS)).toBe((10 * 256) / FS);
    expect(GAP_FACTOR).toBeGreaterThan(10 / 9);
  });

  it('treats a step backwards or beyond MAX_ROW_GAP_S as a discontinuity', () => {
    expect(rowSpacingS(48_000, 96_000, FS, 0.05)).toBe(1);
    expect(rowSpacingS(96_000, 48_000, FS, 0.05)).toBe(0.05);
    expect(rowSpacingS(0, (MAX_ROW_GAP_S + 1) * FS, FS, 0.05)).toBe(0.05);
    const h = new RowHistory([0], 64);
    h.push(row(10 * ROW, 1), 0, FS);
    h.push(row(11 * ROW, 1), 0, FS);
    h.push(row(3 * ROW, 1), 0, FS); // a new stream starting lower
    expect(h.timeS[2]).toBeCloseTo(0.1, 12);
  });

  it('falls back to arrival times without a sample rate', () => {
    const h = new RowHistory([0], 64);
    h.push(row(0, 1), 1000);
    h.push(row(ROW, 1), 1250);
    expect(h.timeS[1]).toBeCloseTo(0.25, 12);
  });

  it('finds the row at a time (binary search) and keeps times through a grid change and the ring wrap', () => {
    const h = new RowHistory([0, 90, 180, 270], 64);
    for (let i = 0; i < 100; i++) h.push(row(i * ROW), 0, FS);
    expect(h.oldest).toBe(36);
    expect(h.rowAtOrBefore(99 * 0.05)).toBe(99);
    expect(h.rowAtOrBefore(50 * 0.05 + 0.01)).toBe(50);
    expect(h.rowAtOrBefore(1)).toBe(-1); // older than the oldest held (row 36 at 1.8 s)
    const r = h.resampled([0, 180]);
    expect(r.timeS[r.slot(r.count - 1)]).toBeCloseTo(99 * 0.05, 12);
    expect(r.sampleIndex[r.slot(r.count - 1)]).toBe(99 * ROW);
    // Across the wrap (slot 63 → 0) the runs split but cover the span without a hole.
    const runs = visibleRuns(h, 99, 2);
    expect(runs.reduce((a, x) => a + x.rows, 0)).toBe(40);
    for (let i = 1; i < runs.length; i++) expect(runs[i].topFraction).toBeCloseTo(runs[i - 1].bottomFraction, 12);
  });
});

describe('time-axis labels', () => {
  it('picks the smallest nice step that keeps the minimum spacing', () => {
    // 30 s over 400 px: 13.3 px/s → 2 s steps are 26.7 px ≥ 22
    expect(timeLabelStepS(30, 400, 22)).toBe(2);
    // 30 s over 150 px (two histories on a short screen): 5 px/s → 5 s = 25 px
    expect(timeLabelStepS(30, 150, 22)).toBe(5);
    expect(timeLabelStepS(450, 150, 22)).toBe(120);
    expect(TIME_STEPS_S).toContain(timeLabelStepS(15, 1000, 22));
  });

  it('writes ages as seconds, minutes from 60 s on', () => {
    expect(timeLabelText(0)).toBe('0 s');
    expect(timeLabelText(30)).toBe('−30');
    expect(timeLabelText(90)).toBe('−1:30');
    expect(timeLabelText(300)).toBe('−5:00');
  });

  it('never places two labels nearer than the minimum spacing, for any height and offset', () => {
    const bad: string[] = [];
    for (const spanS of [15, 30, 60, 180, 450]) {
      for (let heightPx = 20; heightPx <= 900; heightPx += 7) {
        for (const offsetS of [0, 0.3, 1.7, 12.25, 100]) {
          const labels = placeTimeLabels(spanS, offsetS, heightPx, 22, 13);
          const at = `${spanS} s over ${heightPx} px from ${offsetS} s`;
          for (let i = 1; i < labels.length; i++) if (labels[i].yPx - labels[i - 1].yPx < 22) bad.push(`${at}: ${labels[i - 1].text} and ${labels[i].text} closer than 22 px`);
          for (const l of labels) if (l.yPx < 6.5 || l.yPx > heightPx - 6.5) bad.push(`${at}: ${l.text} at ${l.yPx} px sticks out`);
        }
      }
    }
    expect(bad).toEqual([]);
  });

  it('keeps the labels evenly spaced on a short view (two histories on a 720 px screen)', () => {
    // 30 s over 75 px: 10 s steps (25 px) would lose −10 and −30 to the clamped ends; 15 s steps (37.5 px) keep all
    expect(placeTimeLabels(30, 0, 75, 22, 13).map((l) => l.text)).toEqual(['0 s', '−15', '−30']);
  });

  it('puts labels where their age is on the view', () => {
    // 30 s over 300 px, live (offset 0): step 5 s (50 px); 0 s clamped to 6.5 px (half a label)
    const labels = placeTimeLabels(30, 0, 300, 22, 13);
    expect(labels.map((l) => l.text)).toEqual(['0 s', '−5', '−10', '−15', '−20', '−25', '−30']);
    expect(labels[1].yPx).toBeCloseTo(50, 12);
    expect(labels[0].yPx).toBe(6.5);
    expect(labels[6].yPx).toBe(293.5);
    // paused 12 s back: the first label is −15 at (15 − 12)/30 · 300 = 30 px
    const back = placeTimeLabels(30, 12, 300, 22, 13);
    expect(back[0]).toEqual({ yPx: 30, ageS: 15, text: '−15' });
  });
});

describe('history title', () => {
  it('names the chain and its τ without floating-point noise', () => {
    expect(historyTitle('main', 1.9999999999999707)).toBe('main · τ 2 s');
    expect(historyTitle('comparison', 0.15000000000000002)).toBe('comparison · τ 0.15 s');
    expect(historyTitle('main', 0.5333333333333333)).toBe('main · τ 0.5333 s');
    expect(historyTitle('main', null)).toBe('main');
  });
});
