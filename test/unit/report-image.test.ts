/**
 * The report image (shared/report-image.ts) and its font (shared/bitmap-font.ts): ticks sit on the
 * pixel the degree-to-column and time-to-row mappings give (computed here independently from the
 * raster's own azimuths and times), no two labels overlap over a spread of sizes, the colour bar
 * runs from the scale's last entry at the top to its first at the bottom, the raster is copied
 * pixel for pixel, and the caption is drawn in full.
 */
import { describe, expect, it } from 'vitest';
import { ADVANCE, CELL_HEIGHT, glyphRows, hasGlyph, textWidth, drawText } from '../../shared/bitmap-font.ts';
import { COLORMAP_RGB, COLORMAP_SIZE } from '../../shared/colormap.ts';
import { axisNumber, composeReportImage, INK_RGB, PAPER_RGB, rowOfTime, wrapCaption, type HistoryRaster, type Rect, type ReportImage } from '../../shared/report-image.ts';

const CAPTION = 'array ring 8 · MVDR · band 300–6000 Hz · τ 2 s (λ 0.99733) · loading 0.01·tr(R)/M · 2026-12-03 14:30:00–14:30:20 UTC';

/** A raster whose every pixel is distinct enough to catch a shifted copy. */
function raster(w: number, h: number, channels: 3 | 4 = 3): HistoryRaster {
  const data = new Uint8Array(w * h * channels);
  for (let y = 0; y < h; y++)
    for (let x = 0; x < w; x++) {
      const o = (y * w + x) * channels;
      data[o] = (x * 7 + y) & 255;
      data[o + 1] = (y * 13) & 255;
      data[o + 2] = (x + 3 * y) & 255;
      if (channels === 4) data[o + 3] = 255;
    }
  return { width: w, height: h, channels, data };
}

const range = (n: number, a: number, step: number) => Array.from({ length: n }, (_, i) => a + i * step);

function pixel(img: ReportImage, x: number, y: number): number[] {
  const o = (y * img.width + x) * img.channels;
  return [img.data[o], img.data[o + 1], img.data[o + 2]];
}
const isInk = (p: number[]) => p[0] === INK_RGB[0] && p[1] === INK_RGB[1] && p[2] === INK_RGB[2];

const overlap = (a: Rect, b: Rect) => a.x < b.x + b.w && b.x < a.x + a.w && a.y < b.y + b.h && b.y < a.y + a.h;

function allLabelBoxes(img: ReportImage): { what: string; box: Rect }[] {
  const L = img.layout;
  return [
    ...L.azimuthTicks.map((t) => ({ what: `az ${t.label}`, box: t.box })),
    ...L.timeTicks.map((t) => ({ what: `t ${t.label}`, box: t.box })),
    ...L.dbTicks.map((t) => ({ what: `dB ${t.label}`, box: t.box })),
    ...L.titles.map((t) => ({ what: `title ${t.text}`, box: t.box })),
    { what: 'caption', box: L.caption },
    { what: 'plot', box: { x: L.raster.x - 1, y: L.raster.y - 1, w: L.raster.w + 2, h: L.colourBar.h + 2 } },
    { what: 'bar', box: L.colourBar },
  ];
}

describe('bitmap font', () => {
  it('has a glyph for every character the captions and axes use', () => {
    const needed = '0123456789abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ°·–−:.-τλ()/,+%µδ×± ';
    expect([...needed].filter((c) => !hasGlyph(c))).toEqual([]);
    expect(textWidth('dB Hz', 1)).toBe(5 * ADVANCE - 1);
    expect(textWidth('', 2)).toBe(0);
  });

  it('draws exactly the glyph bits, scaled, and "?" for a character it lacks', () => {
    const w = 20;
    const h = 20;
    const buf = new Uint8Array(w * h * 3);
    drawText(buf, w, h, 3, '7', 1, 2, [9, 9, 9], 2);
    const rows = glyphRows('7');
    for (let y = 0; y < h; y++)
      for (let x = 0; x < w; x++) {
        const gx = Math.floor((x - 1) / 2);
        const gy = Math.floor((y - 2) / 2);
        const on = gx >= 0 && gx < 5 && gy >= 0 && gy < CELL_HEIGHT && (rows[gy] & (1 << (4 - gx))) !== 0;
        expect(buf[(y * w + x) * 3], `${x},${y}`).toBe(on ? 9 : 0);
      }
    expect(glyphRows('☃')).toBe(glyphRows('?'));
  });
});

describe('report image', () => {
  it('puts each azimuth tick on the column of its degree (0–359°, 1° grid)', () => {
    const img = composeReportImage(raster(360, 300), { azimuthDeg: range(360, 0, 1), timeS: range(300, 0, 0.05), lowDb: -30, highDb: 0, caption: CAPTION });
    const L = img.layout;
    expect(L.azimuthTicks.length).toBeGreaterThanOrEqual(3);
    const markRow = L.raster.y + L.colourBar.h + 1; // first row under the frame (the plot box is as tall as the bar)
    const inkCols: number[] = [];
    for (let x = L.raster.x; x < L.raster.x + L.raster.w; x++) if (isInk(pixel(img, x, markRow))) inkCols.push(x);
    // Column i of the raster is azimuth 0 + 1·i: a tick at d degrees belongs on column x0 + d.
    expect(inkCols).toEqual(L.azimuthTicks.map((t) => L.raster.x + t.value));
    for (const t of L.azimuthTicks) {
      expect(t.value % 1).toBe(0);
      expect(t.label).toBe(`${t.value}°`);
    }
  });

  it('puts each azimuth tick on the column of its degree (−90…+90°, 2° grid)', () => {
    const az = range(91, -90, 2);
    const img = composeReportImage(raster(91, 50), { azimuthDeg: az, timeS: range(50, 0, 0.1), lowDb: -40, highDb: -10, caption: CAPTION }, { textScale: 1 });
    const L = img.layout;
    const markRow = L.raster.y + L.colourBar.h + 1;
    const inkCols: number[] = [];
    for (let x = L.raster.x; x < L.raster.x + L.raster.w; x++) if (isInk(pixel(img, x, markRow))) inkCols.push(x);
    const expected = L.azimuthTicks.map((t) => {
      const i = az.indexOf(t.value); // the tick's degree is one of the grid's own azimuths
      expect(i, `${t.value}° on the grid`).toBeGreaterThanOrEqual(0);
      return L.raster.x + i;
    });
    expect(inkCols).toEqual(expected);
    expect(L.azimuthTicks.map((t) => t.value)).toContain(0);
    expect(L.azimuthTicks.find((t) => t.value < 0)?.label).toMatch(/^−\d+°$/);
  });

  it('puts each time tick on the row of its time', () => {
    const dt = 0.05;
    const times = range(400, 0, dt);
    const img = composeReportImage(raster(180, 400), { azimuthDeg: range(180, 0, 2), timeS: times, lowDb: -30, highDb: 0, caption: CAPTION });
    const L = img.layout;
    expect(L.timeTicks.length).toBeGreaterThanOrEqual(4);
    const markCol = L.raster.x - 2; // left of the frame column
    const inkRows: number[] = [];
    for (let y = L.raster.y; y < L.raster.y + L.raster.h; y++) if (isInk(pixel(img, markCol, y))) inkRows.push(y);
    // Row i holds time i·dt: a tick at t seconds belongs on row y0 + t/dt.
    expect(inkRows).toEqual(L.timeTicks.map((t) => L.raster.y + Math.round(t.value / dt)));
    for (const t of L.timeTicks) expect(Number(t.label)).toBe(t.value);
  });

  it('places times of unevenly spaced rows between the rows around them', () => {
    const times = [0, 0.05, 0.1, 0.3, 0.35, 1];
    expect(rowOfTime(0.2, times)).toBeCloseTo(2.5, 12);
    expect(rowOfTime(-1, times)).toBe(0);
    expect(rowOfTime(5, times)).toBe(5);
    expect(rowOfTime(0.675, times)).toBeCloseTo(4.5, 12);
  });

  it('copies the raster pixel for pixel to the stated offset, RGB or RGBA in and out', () => {
    for (const [cin, cout] of [
      [3, 3],
      [4, 4],
      [3, 4],
      [4, 3],
    ] as const) {
      const r = raster(37, 23, cin);
      const img = composeReportImage(r, { azimuthDeg: range(37, 0, 10), timeS: range(23, 0, 0.5), lowDb: -20, highDb: 0, caption: CAPTION }, { channels: cout });
      const { x: x0, y: y0 } = img.layout.raster;
      let differ = 0;
      for (let y = 0; y < r.height; y++)
        for (let x = 0; x < r.width; x++) {
          const i = (y * r.width + x) * cin;
          const p = pixel(img, x0 + x, y0 + y);
          if (p[0] !== r.data[i] || p[1] !== r.data[i + 1] || p[2] !== r.data[i + 2]) differ++;
        }
      expect(differ, `${cin} → ${cout} channels`).toBe(0);
      if (cout === 4) expect(img.data.filter((_, i) => i % 4 === 3 && img.data[i] !== 255).length).toBe(0);
    }
  });

  it('colours the bar from the scale’s last entry at the top to its first at the bottom, with its dB ticks', () => {
    const img = composeReportImage(raster(60, 200), { azimuthDeg: range(60, 0, 6), timeS: range(200, 0, 0.05), lowDb: -30, highDb: 0, caption: CAPTION });
    const b = img.layout.colourBar;
    const top = COLORMAP_SIZE - 1;
    expect(pixel(img, b.x, b.y)).toEqual([COLORMAP_RGB[3 * top], COLORMAP_RGB[3 * top + 1], COLORMAP_RGB[3 * top + 2]]);
    expect(pixel(img, b.x + b.w - 1, b.y + b.h - 1)).toEqual([COLORMAP_RGB[0], COLORMAP_RGB[1], COLORMAP_RGB[2]]);
    const d = img.layout.dbTicks;
    expect(d[0].label).toBe('−30');
    expect(d[0].at).toBe(b.y + b.h - 1);
    expect(d[d.length - 1].label).toBe('0');
    expect(d[d.length - 1].at).toBe(b.y);
    // Between the ends, linear: −15 dB halfway down (when it is a tick).
    for (const t of d) expect(t.at).toBe(b.y + Math.round((-t.value / 30) * (b.h - 1)));
  });

  it('never lets labels, titles, caption, frame and bar overlap, over a spread of sizes and scales', () => {
    const cases: [number, number, number, number, number][] = [
      // columns, rows, azimuth step, row spacing s, text scale
      [360, 1200, 1, 0.05, 2],
      [360, 1, 1, 0.05, 2],
      [1, 1, 1, 0.05, 1],
      [72, 9000, 5, 0.02, 2],
      [181, 3, 1, 0.05, 3],
      [36, 600, 10, 0.1, 4],
      [720, 40, 0.5, 0.05, 1],
      [19, 2000, 10, 1.5, 2],
    ];
    for (const [w, h, step, dt, s] of cases) {
      const img = composeReportImage(raster(w, h), { azimuthDeg: range(w, 0, step), timeS: range(h, 0, dt), lowDb: -57.5, highDb: -2.5, caption: CAPTION }, { textScale: s, channels: 3 });
      const boxes = allLabelBoxes(img);
      for (let i = 0; i < boxes.length; i++) {
        const a = boxes[i].box;
        expect(a.x >= 0 && a.y >= 0 && a.x + a.w <= img.width && a.y + a.h <= img.height, `${boxes[i].what} inside ${w}×${h}`).toBe(true);
        for (let j = i + 1; j < boxes.length; j++) expect(overlap(a, boxes[j].box), `${boxes[i].what} / ${boxes[j].what} at ${w}×${h}×${s}`).toBe(false);
      }
      expect(img.layout.timeTicks.length, `${w}×${h}`).toBeGreaterThanOrEqual(1);
      expect(img.layout.dbTicks.length, `${w}×${h}`).toBeGreaterThanOrEqual(2);
    }
  });

  it('draws the whole caption, wrapped between fields, inside its area', () => {
    const img = composeReportImage(raster(90, 100), { azimuthDeg: range(90, 0, 4), timeS: range(100, 0, 0.05), lowDb: -30, highDb: 0, caption: CAPTION }, { textScale: 2, channels: 3 });
    const L = img.layout;
    expect(L.captionLines.length).toBeGreaterThan(1);
    expect(L.captionLines.join(' · ')).toBe(CAPTION);
    for (const l of L.captionLines) expect(textWidth(l, 2)).toBeLessThanOrEqual(L.caption.w);
    let ink = 0;
    for (let y = L.caption.y; y < L.caption.y + L.caption.h; y++) for (let x = L.caption.x; x < L.caption.x + L.caption.w; x++) if (isInk(pixel(img, x, y))) ink++;
    expect(ink).toBeGreaterThan(200);
    // Paper around everything else: the image's corner pixel.
    expect(pixel(img, 0, 0)).toEqual([...PAPER_RGB]);
    expect(wrapCaption('a · b · c', 10_000, 1)).toEqual(['a · b · c']);
    expect(wrapCaption('a · b · c', textWidth('a · b', 1), 1)).toEqual(['a · b', 'c']);
  });

  it('labels numbers tidily with a true minus sign', () => {
    expect(axisNumber(0.1 + 0.2)).toBe('0.3');
    expect(axisNumber(-15)).toBe('−15');
    expect(axisNumber(-0)).toBe('0');
  });

  it('refuses sizes that do not match', () => {
    const r = raster(10, 5);
    const meta = { azimuthDeg: range(10, 0, 1), timeS: range(5, 0, 1), lowDb: -1, highDb: 0, caption: '' };
    expect(() => composeReportImage({ ...r, data: r.data.subarray(1) }, meta)).toThrow(RangeError);
    expect(() => composeReportImage(r, { ...meta, timeS: [0] })).toThrow(RangeError);
    expect(() => composeReportImage(r, { ...meta, azimuthDeg: [0] })).toThrow(RangeError);
    expect(() => composeReportImage(r, meta, { textScale: 0 })).toThrow(RangeError);
    expect(() => composeReportImage(r, { ...meta, lowDb: -Infinity })).toThrow(RangeError);
    expect(() => composeReportImage(r, { ...meta, lowDb: 0 })).toThrow(RangeError);
    expect(() => composeReportImage(r, { ...meta, timeS: [0, 1, Number.NaN, 3, 4] })).toThrow(RangeError);
  });
});
