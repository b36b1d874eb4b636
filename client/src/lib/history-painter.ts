/**
 * Paints the direction history incrementally. Each stored row is coloured once, into one row of
 * an off-screen "strip" canvas (nAz × capacity pixels, in ring order), with a single 1-pixel-high
 * putImageData; a frame then copies the visible part of the strip onto the display canvas with
 * one or two scaled, vertically flipped drawImage calls (newest row at the top). Only a change of
 * method or colour range, a new history, or a long backlog (tab in the background) recolours the
 * whole strip.
 */
import { colorize, NO_DATA_RGB } from './colormap.ts';
import type { HistoryMethod, RowHistory } from './history.ts';

/** Colour range: `auto` spans each row's maximum down `spanDb`; `manual` is fixed. */
export type ColourRange = { mode: 'auto'; spanDb: number } | { mode: 'manual'; lowDb: number; highDb: number };

/** Above this many rows to colour at once, one full recolour is cheaper than row uploads. */
const FULL_RECOLOUR_ROWS = 192;

const BACKGROUND = `rgb(${NO_DATA_RGB[0]}, ${NO_DATA_RGB[1]}, ${NO_DATA_RGB[2]})`;

/** The dB range row `n` is coloured with. */
export function rowRange(h: RowHistory, n: number, method: HistoryMethod, range: ColourRange): [number, number] {
  if (range.mode === 'manual') return [range.lowDb, range.highDb];
  const top = h.rowMaxDb[method][h.slot(n)];
  return [top - range.spanDb, top];
}

export class HistoryPainter {
  #history: RowHistory | null = null;
  #strip: HTMLCanvasElement | null = null;
  #stripCtx: CanvasRenderingContext2D | null = null;
  #rowImage: ImageData | null = null;
  #rowPixels: Uint32Array | null = null;
  #fullImage: ImageData | null = null;
  /** Rows numbered below this are coloured in the strip (for the current key). */
  #colouredTo = 0;
  #key = '';

  /** Colour what is new in `h` (everything, when the method, range or history changed). */
  update(h: RowHistory, method: HistoryMethod, range: ColourRange): void {
    if (h !== this.#history || !this.#strip) this.#adopt(h);
    const key = `${method}|${range.mode}|${range.mode === 'auto' ? range.spanDb : `${range.lowDb}:${range.highDb}`}`;
    const pending = h.count - Math.max(this.#colouredTo, h.oldest);
    if (key !== this.#key || pending > FULL_RECOLOUR_ROWS) {
      this.#key = key;
      this.#recolourAll(h, method, range);
      return;
    }
    const ctx = this.#stripCtx!;
    const px = this.#rowPixels!;
    const levels = h.levels[method];
    for (let n = Math.max(this.#colouredTo, h.oldest); n < h.count; n++) {
      const s = h.slot(n);
      const [lo, hi] = rowRange(h, n, method, range);
      colorize(px, 0, levels, s * h.nAz, h.nAz, lo, hi);
      ctx.putImageData(this.#rowImage!, 0, s);
    }
    this.#colouredTo = h.count;
  }

  /**
   * Draw the rows of the `spanS` seconds up to row `topRow` (at the top) onto `ctx`, filling the
   * whole `widthPx × heightPx` device-pixel area: each row at its place on the history's time line
   * (from sample indices, see {@link visibleRuns}), so gaps stay empty. Returns the number of rows drawn.
   */
  composite(ctx: CanvasRenderingContext2D, widthPx: number, heightPx: number, h: RowHistory, topRow: number, spanS: number): number {
    ctx.setTransform(1, 0, 0, 1, 0, 0);
    ctx.fillStyle = BACKGROUND;
    ctx.fillRect(0, 0, widthPx, heightPx);
    const strip = this.#strip;
    if (!strip || h !== this.#history || h.count === 0 || !(spanS > 0)) return 0;
    ctx.imageSmoothingEnabled = true;
    ctx.imageSmoothingQuality = 'low';
    // Flip vertically: the strip holds rows oldest-first, the display shows newest at the top.
    ctx.setTransform(1, 0, 0, -1, 0, heightPx);
    let rows = 0;
    for (const r of visibleRuns(h, topRow, spanS)) {
      const yTop = r.topFraction * heightPx;
      // At least one device pixel, so a lone row (or the very first, of no duration) shows.
      const yBottom = Math.max(r.bottomFraction * heightPx, yTop + 1);
      ctx.drawImage(strip, 0, r.firstSlot, h.nAz, r.rows, 0, heightPx - yBottom, widthPx, yBottom - yTop);
      rows += r.rows;
    }
    ctx.setTransform(1, 0, 0, 1, 0, 0);
    return rows;
  }

  #adopt(h: RowHistory): void {
    const strip = document.createElement('canvas');
    strip.width = h.nAz;
    strip.height = h.capacity;
    const ctx = strip.getContext('2d', { willReadFrequently: false });
    if (!ctx) throw new Error('2-D canvas context unavailable');
    this.#strip = strip;
    this.#stripCtx = ctx;
    this.#rowImage = new ImageData(h.nAz, 1);
    this.#rowPixels = new Uint32Array(this.#rowImage.data.buffer);
    this.#fullImage = null;
    this.#history = h;
    this.#colouredTo = 0;
    this.#key = '';
  }

  #recolourAll(h: RowHistory, method: HistoryMethod, range: ColourRange): void {
    if (!this.#fullImage) this.#fullImage = new ImageData(h.nAz, h.capacity);
    const px = new Uint32Array(this.#fullImage.data.buffer);
    const levels = h.levels[method];
    for (let n = h.oldest; n < h.count; n++) {
      const s = h.slot(n);
      const [lo, hi] = rowRange(h, n, method, range);
      colorize(px, s * h.nAz, levels, s * h.nAz, h.nAz, lo, hi);
    }
    this.#stripCtx!.putImageData(this.#fullImage, 0, 0);
    this.#colouredTo = h.count;
  }
}

/**
 * A run of rows drawn with one scaled copy: consecutive ring slots `firstSlot … firstSlot + rows − 1`
 * (oldest first) with no gap between them, covering the view from `topFraction` (the newest row's
 * top edge) to `bottomFraction` (the oldest row's bottom edge), as fractions of the view's height
 * from the top (they may pass 1 at the bottom). Inside a run rows share the height evenly; its ends
 * are exact, and the rows inside are off by at most the jitter of their spacing (one hop).
 */
export interface HistoryRun {
  firstSlot: number;
  rows: number;
  topFraction: number;
  bottomFraction: number;
}

/**
 * The runs of rows shown when row `topRow` is at the top of a view `spanS` seconds tall: every row
 * whose time (RowHistory.timeS, from sample indices) lies within the span, split where a gap
 * leaves empty time (a row covering less than its spacing) and where the ring wraps. Newest first.
 */
export function visibleRuns(h: RowHistory, topRow: number, spanS: number): HistoryRun[] {
  const out: HistoryRun[] = [];
  if (h.count === 0 || !(spanS > 0)) return out;
  const top = Math.min(h.count - 1, Math.max(h.oldest, topRow));
  const tTop = h.timeS[h.slot(top)];
  let runTop = top;
  let n = top;
  while (n >= h.oldest) {
    const s = h.slot(n);
    const age = tTop - h.timeS[s];
    // A row whose top edge is at the bottom edge shows nothing (1e-9 s: the sums' rounding).
    if (age >= spanS - 1e-9) break;
    // The run ends at n when n is the oldest shown row, sits at the ring's start, or has a gap below it.
    const prev = n - 1;
    const prevShown = prev >= h.oldest && tTop - h.timeS[h.slot(prev)] < spanS - 1e-9;
    const contiguous = prevShown && s > 0 && h.durationS[s] >= h.timeS[s] - h.timeS[h.slot(prev)] - 1e-9;
    if (!contiguous) {
      out.push({
        firstSlot: s,
        rows: runTop - n + 1,
        topFraction: (tTop - h.timeS[h.slot(runTop)]) / spanS,
        bottomFraction: (age + h.durationS[s]) / spanS,
      });
      runTop = prev;
    }
    n = prev;
  }
  return out;
}
