/**
 * The direction-history image for a report: the history raster (one pixel row per spectrum row,
 * time downward; one column per azimuth) copied unchanged into a white page with an azimuth axis
 * below it (degrees), a time axis on its left (seconds from the start), a colour bar in dB on its
 * right (the dashboard's colour scale, shared/colormap.ts) and a caption underneath
 * (shared/report-caption.ts). Pure: byte buffers in, a byte buffer out, no DOM and no canvas, so
 * `nullsteer analyze --timeline` (server/tools/timeline.ts) and the dashboard's PNG export
 * (client/src/lib/export.ts) make the same picture.
 *
 * Ticks fall on round values (1–2–5 steps; for angles also 15, 30, 45, 90); the step is the finest
 * whose labels keep a gap between them (4 font pixels across, one label height up and down), so
 * labels never overlap. Text uses the bitmap font of
 * shared/bitmap-font.ts at an integer scale.
 */
import { CELL_HEIGHT, GLYPH_HEIGHT, drawText, textWidth } from './bitmap-font.ts';
import { COLORMAP_RGB, COLORMAP_SIZE } from './colormap.ts';
import { plainNumber, tidy } from './numbers.ts';
import { CAPTION_SEPARATOR } from './report-caption.ts';

/** A coloured history: width (azimuths) × height (rows, oldest on top) pixels. */
export interface HistoryRaster {
  width: number;
  height: number;
  channels: 3 | 4;
  /** width × height × channels bytes, rows top to bottom. */
  data: Uint8Array;
}

export interface ReportImageMeta {
  /** Azimuth of each raster column's centre, degrees, evenly spaced (length raster.width). */
  azimuthDeg: ArrayLike<number>;
  /** Time of each raster row from the start, seconds, non-decreasing downward (length raster.height). */
  timeS: ArrayLike<number>;
  /** Levels at the colour scale's bottom (first entry) and top (last entry), dB. */
  lowDb: number;
  highDb: number;
  /** Title over the colour bar; default "dB". */
  dbTitle?: string;
  /** One line of fields joined by " · " (report-caption.ts); wrapped between fields to the image width. */
  caption: string;
}

export interface ReportImageOptions {
  /** Font pixel size, an integer 1–4 (default 2: 10 × 14 pixel capitals). */
  textScale?: number;
  /** Bytes per output pixel: 4 (RGBA, for ImageData; default) or 3 (RGB, for server/io/png.ts). */
  channels?: 3 | 4;
}

export interface Rect {
  x: number;
  y: number;
  w: number;
  h: number;
}

export interface Tick {
  value: number;
  /** Pixel column (azimuth axis) or row (time axis, colour bar) of the tick mark. */
  at: number;
  label: string;
  /** Where the label's ink may fall (cap height; descenders are not used by numbers). */
  box: Rect;
}

export interface ReportLayout {
  width: number;
  height: number;
  textScale: number;
  /** Where the raster sits, pixel for pixel. */
  raster: Rect;
  colourBar: Rect;
  azimuthTicks: Tick[];
  timeTicks: Tick[];
  dbTicks: Tick[];
  /** Axis titles: "azimuth (°)", "time (s)", the dB title. */
  titles: { text: string; box: Rect }[];
  captionLines: string[];
  /** The caption's text area. */
  caption: Rect;
}

export interface ReportImage {
  width: number;
  height: number;
  channels: 3 | 4;
  data: Uint8Array;
  layout: ReportLayout;
}

export const PAPER_RGB: readonly [number, number, number] = [255, 255, 255];
export const INK_RGB: readonly [number, number, number] = [28, 28, 32];
const FRAME_RGB: readonly [number, number, number] = [110, 110, 118];

const ANGLE_STEPS_DEG = [0.1, 0.2, 0.5, 1, 2, 5, 10, 15, 30, 45, 90, 180, 360];

/** 1–2–5 steps from 1e-3 to 1e7. */
function decadeSteps(): number[] {
  const out: number[] = [];
  for (let e = -3; e <= 7; e++) for (const m of [1, 2, 5]) out.push(tidy(m * 10 ** e));
  return out;
}
const DECADE_STEPS = decadeSteps();

/** A label for a number: tidy, with a true minus sign. */
export function axisNumber(v: number): string {
  return plainNumber(tidy(v === 0 ? 0 : v), 6).replace(/^-/, '−');
}

/** Multiples of `step` within [lo, hi] (ends may be widened by `slack`), ascending. */
function multiples(lo: number, hi: number, step: number, slack = 0): number[] {
  const out: number[] = [];
  const k0 = Math.ceil((lo - slack) / step - 1e-9);
  const k1 = Math.floor((hi + slack) / step + 1e-9);
  for (let k = k0; k <= k1 && out.length <= 10_000; k++) out.push(tidy(k * step) + 0); // + 0: no −0
  return out;
}

/**
 * The column of azimuth `deg` on a raster whose column i is centred on az0 + i·step:
 * x0 + round((deg − az0)/step). The tick marks are drawn exactly there.
 */
export function azimuthColumn(deg: number, az0: number, stepDeg: number, x0: number): number {
  return x0 + Math.round((deg - az0) / stepDeg);
}

/** Fractional row of time `t` in non-decreasing `times` (linear between rows, clamped to the ends). */
export function rowOfTime(t: number, times: ArrayLike<number>): number {
  const n = times.length;
  if (n <= 1 || t <= times[0]) return 0;
  if (t >= times[n - 1]) return n - 1;
  let lo = 0;
  let hi = n - 1;
  while (hi - lo > 1) {
    const mid = (lo + hi) >> 1;
    if (times[mid] <= t) lo = mid;
    else hi = mid;
  }
  const span = times[hi] - times[lo];
  return span > 0 ? lo + (t - times[lo]) / span : lo;
}

/** Wrap caption fields (split at " · ") into lines no wider than `maxW` pixels (a field never splits). */
export function wrapCaption(caption: string, maxW: number, scale: number): string[] {
  const fields = caption.split(CAPTION_SEPARATOR);
  const lines: string[] = [];
  let cur = '';
  for (const f of fields) {
    const next = cur === '' ? f : `${cur}${CAPTION_SEPARATOR}${f}`;
    if (cur !== '' && textWidth(next, scale) > maxW) {
      lines.push(cur);
      cur = f;
    } else cur = next;
  }
  if (cur !== '') lines.push(cur);
  return lines;
}

interface AxisPick {
  values: number[];
  at: number[];
  labels: string[];
}

/**
 * The finest step of `steps` whose labels keep at least `gapPx` between them along the axis.
 * `pos` maps a value to its pixel, `extent` gives a label's length along the axis.
 */
function pickTicks(lo: number, hi: number, steps: number[], slack: (step: number) => number, pos: (v: number) => number, label: (v: number) => string, extent: (l: string) => number, gapPx: number): AxisPick {
  let last: AxisPick = { values: [], at: [], labels: [] };
  for (const step of steps) {
    const values = multiples(lo, hi, step, slack(step));
    if (values.length > 400) continue;
    const at = values.map(pos);
    const labels = values.map(label);
    let ok = true;
    for (let i = 1; i < values.length && ok; i++) {
      const need = (extent(labels[i - 1]) + extent(labels[i])) / 2 + gapPx;
      if (Math.abs(at[i] - at[i - 1]) < need) ok = false;
    }
    last = { values, at, labels };
    if (ok && values.length > 0) return last;
  }
  // Nothing fits (a one-pixel axis): keep the first tick only.
  return { values: last.values.slice(0, 1), at: last.at.slice(0, 1), labels: last.labels.slice(0, 1) };
}

/**
 * Draw the report image. The raster is copied pixel for pixel to `layout.raster`.
 * @throws RangeError when the raster's bytes or the meta lengths do not match its size
 */
export function composeReportImage(raster: HistoryRaster, meta: ReportImageMeta, options: ReportImageOptions = {}): ReportImage {
  const S = options.textScale ?? 2;
  if (!Number.isInteger(S) || S < 1 || S > 4) throw new RangeError(`textScale ${S}: allowed an integer 1–4`);
  const channels = options.channels ?? 4;
  const { width: rw, height: rh } = raster;
  if (!Number.isInteger(rw) || !Number.isInteger(rh) || rw < 1 || rh < 1) throw new RangeError(`raster size ${rw}×${rh} not allowed`);
  if (raster.data.length !== rw * rh * raster.channels) throw new RangeError(`${raster.data.length} bytes for a ${rw}×${rh} raster of ${raster.channels} channels`);
  if (meta.azimuthDeg.length !== rw) throw new RangeError(`${meta.azimuthDeg.length} azimuths for ${rw} columns`);
  if (meta.timeS.length !== rh) throw new RangeError(`${meta.timeS.length} times for ${rh} rows`);
  if (!Number.isFinite(meta.lowDb) || !Number.isFinite(meta.highDb) || meta.lowDb >= meta.highDb) throw new RangeError(`colour scale ${meta.lowDb}…${meta.highDb} dB: need finite low < high`);
  for (const [name, v] of [
    ['azimuth', meta.azimuthDeg],
    ['time', meta.timeS],
  ] as const)
    for (let i = 0; i < v.length; i++) if (!Number.isFinite(v[i])) throw new RangeError(`${name} ${i} is ${v[i]}`);

  const capH = GLYPH_HEIGHT * S;
  const lineH = CELL_HEIGHT * S + 3 * S;
  const pad = 6 * S;
  const tickLen = 3 * S;
  const labelGap = 2 * S;
  const minBarH = 6 * lineH;

  // Time ticks depend only on rows: pick them first, their labels set the left margin.
  const times = meta.timeS;
  const t0 = times[0];
  const t1 = times[rh - 1];
  const rowDt = rh > 1 ? (t1 - t0) / (rh - 1) : 0;
  const tPick = pickTicks(t0, t1, DECADE_STEPS, () => rowDt / 2, (v) => Math.round(rowOfTime(v, times)), axisNumber, () => capH, capH);
  const tLabelW = Math.max(0, ...tPick.labels.map((l) => textWidth(l, S)));
  const timeTitle = 'time (s)';

  const rasterX = pad + tLabelW + labelGap + tickLen + 1;
  const rasterY = pad + lineH + 1;
  // The plot box: the raster at its top, at least tall enough for a readable colour bar (a short
  // history leaves paper below its rows); the frame goes one pixel outside the box.
  const plotH = Math.max(rh, minBarH);
  const frameRight = rasterX + rw; // frame column right of the raster
  const frameBottom = rasterY + plotH;

  // Azimuth ticks.
  const az = meta.azimuthDeg;
  const az0 = az[0];
  const azStep = rw > 1 ? (az[rw - 1] - az[0]) / (rw - 1) : 1;
  const azLo = Math.min(az0, az[rw - 1]);
  const azHi = Math.max(az0, az[rw - 1]);
  const azLabel = (v: number) => `${axisNumber(v)}°`;
  const aPick = pickTicks(azLo, azHi, ANGLE_STEPS_DEG, () => 0, (v) => azimuthColumn(v, az0, azStep === 0 ? 1 : azStep, rasterX), azLabel, (l) => textWidth(l, S), 4 * S);

  // Colour bar, right of the raster.
  const barGap = 14 * S;
  const barX = frameRight + 1 + barGap;
  const barW = 8 * S;
  const barY = rasterY;
  const barH = plotH;
  const lo = meta.lowDb;
  const hi = meta.highDb;
  const dbAt = (v: number) => barY + Math.round(hi > lo ? ((hi - v) / (hi - lo)) * (barH - 1) : 0);
  const dPick = pickTicks(Math.min(lo, hi), Math.max(lo, hi), DECADE_STEPS, () => 0, dbAt, axisNumber, () => capH, capH);
  const dLabelW = Math.max(0, ...dPick.labels.map((l) => textWidth(l, S)));
  const dbTitle = meta.dbTitle ?? 'dB';
  const contentRight = Math.max(barX + barW + tickLen + labelGap + dLabelW, Math.max(barX, pad + textWidth(timeTitle, S) + 4 * S) + textWidth(dbTitle, S));

  // Below: azimuth labels, the axis title, then the caption.
  const azLabelY = frameBottom + 1 + tickLen + labelGap;
  const azTitle = 'azimuth (°)';
  const azTitleY = azLabelY + lineH;
  const captionY = azTitleY + lineH + 3 * S;
  const fieldsW = Math.max(0, ...meta.caption.split(CAPTION_SEPARATOR).map((f) => textWidth(f, S)));
  const width = Math.max(contentRight, pad + fieldsW, rasterX + textWidth(azTitle, S)) + pad;
  const captionLines = meta.caption === '' ? [] : wrapCaption(meta.caption, width - 2 * pad, S);
  const height = captionY + captionLines.length * lineH + pad;

  const data = new Uint8Array(width * height * channels);
  const put = (x: number, y: number, rgb: readonly [number, number, number]) => {
    if (x < 0 || y < 0 || x >= width || y >= height) return;
    const o = (y * width + x) * channels;
    data[o] = rgb[0];
    data[o + 1] = rgb[1];
    data[o + 2] = rgb[2];
    if (channels === 4) data[o + 3] = 255;
  };
  const rect = (x: number, y: number, w: number, h: number, rgb: readonly [number, number, number]) => {
    for (let yy = y; yy < y + h; yy++) for (let xx = x; xx < x + w; xx++) put(xx, yy, rgb);
  };
  data.fill(255); // paper (PAPER_RGB is white), opaque

  // The raster, byte for byte (alpha dropped or set opaque).
  const src = raster.data;
  const sc = raster.channels;
  for (let y = 0; y < rh; y++) {
    for (let x = 0; x < rw; x++) {
      const i = (y * rw + x) * sc;
      const o = ((rasterY + y) * width + rasterX + x) * channels;
      data[o] = src[i];
      data[o + 1] = src[i + 1];
      data[o + 2] = src[i + 2];
      if (channels === 4) data[o + 3] = 255;
    }
  }
  // Frame one pixel outside the raster.
  rect(rasterX - 1, rasterY - 1, rw + 2, 1, FRAME_RGB);
  rect(rasterX - 1, frameBottom, rw + 2, 1, FRAME_RGB);
  rect(rasterX - 1, rasterY - 1, 1, plotH + 2, FRAME_RGB);
  rect(frameRight, rasterY - 1, 1, plotH + 2, FRAME_RGB);

  const titles: ReportLayout['titles'] = [];
  const title = (text: string, x: number, y: number) => {
    drawText(data, width, height, channels, text, x, y, INK_RGB, S);
    titles.push({ text, box: { x, y, w: textWidth(text, S), h: capH } });
  };

  // Time axis: marks left of the frame, labels right-aligned to them, centred on the mark.
  const timeTicks: Tick[] = [];
  for (let i = 0; i < tPick.values.length; i++) {
    const y = rasterY + tPick.at[i];
    rect(rasterX - 1 - tickLen, y, tickLen, 1, INK_RGB);
    const w = textWidth(tPick.labels[i], S);
    const ly = Math.max(0, Math.min(height - capH, y - Math.floor(capH / 2)));
    const lx = rasterX - 1 - tickLen - labelGap - w;
    drawText(data, width, height, channels, tPick.labels[i], lx, ly, INK_RGB, S);
    timeTicks.push({ value: tPick.values[i], at: y, label: tPick.labels[i], box: { x: lx, y: ly, w, h: capH } });
  }
  title(timeTitle, pad, pad);

  // Azimuth axis: marks under the frame, labels centred under them (kept off the colour bar).
  const azimuthTicks: Tick[] = [];
  for (let i = 0; i < aPick.values.length; i++) {
    const x = aPick.at[i];
    rect(x, frameBottom + 1, 1, tickLen, INK_RGB);
    const w = textWidth(aPick.labels[i], S);
    const lx = Math.max(0, Math.min(barX - S - w, x - Math.floor(w / 2)));
    drawText(data, width, height, channels, aPick.labels[i], lx, azLabelY, INK_RGB, S);
    azimuthTicks.push({ value: aPick.values[i], at: x, label: aPick.labels[i], box: { x: lx, y: azLabelY, w, h: capH } });
  }
  title(azTitle, rasterX + Math.max(0, Math.floor((rw - textWidth(azTitle, S)) / 2)), azTitleY);

  // Colour bar: the scale's last entry at the top, its first at the bottom.
  const top = COLORMAP_SIZE - 1;
  for (let y = 0; y < barH; y++) {
    const k = barH > 1 ? Math.round(((barH - 1 - y) / (barH - 1)) * top) : top;
    const rgb: [number, number, number] = [COLORMAP_RGB[3 * k], COLORMAP_RGB[3 * k + 1], COLORMAP_RGB[3 * k + 2]];
    rect(barX, barY + y, barW, 1, rgb);
  }
  const dbTicks: Tick[] = [];
  for (let i = 0; i < dPick.values.length; i++) {
    const y = dPick.at[i];
    rect(barX + barW, y, tickLen, 1, INK_RGB);
    const w = textWidth(dPick.labels[i], S);
    const lx = barX + barW + tickLen + labelGap;
    const ly = Math.max(0, Math.min(height - capH, y - Math.floor(capH / 2)));
    drawText(data, width, height, channels, dPick.labels[i], lx, ly, INK_RGB, S);
    dbTicks.push({ value: dPick.values[i], at: y, label: dPick.labels[i], box: { x: lx, y: ly, w, h: capH } });
  }
  title(dbTitle, Math.max(barX, pad + textWidth(timeTitle, S) + 4 * S), pad);

  // Caption, under a thin rule.
  rect(pad, captionY - 2 * S, width - 2 * pad, 1, FRAME_RGB);
  captionLines.forEach((l, i) => drawText(data, width, height, channels, l, pad, captionY + i * lineH, INK_RGB, S));

  return {
    width,
    height,
    channels,
    data,
    layout: {
      width,
      height,
      textScale: S,
      raster: { x: rasterX, y: rasterY, w: rw, h: rh },
      colourBar: { x: barX, y: barY, w: barW, h: barH },
      azimuthTicks,
      timeTicks,
      dbTicks,
      titles,
      captionLines,
      caption: { x: pad, y: captionY, w: width - 2 * pad, h: captionLines.length * lineH },
    },
  };
}
