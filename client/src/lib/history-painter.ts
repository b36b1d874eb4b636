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
   * Draw rows `topRow` (at the top) down to `topRow − visibleRows + 1` onto `ctx`, filling the
   * whole `widthPx × heightPx` device-pixel area. Returns the number of rows drawn.
   */
  composite(ctx: CanvasRenderingContext2D, widthPx: number, heightPx: number, h: RowHistory, topRow: number, visibleRows: number): number {
    ctx.setTransform(1, 0, 0, 1, 0, 0);
    ctx.fillStyle = BACKGROUND;
    ctx.fillRect(0, 0, widthPx, heightPx);
    const strip = this.#strip;
    if (!strip || h !== this.#history || h.count === 0 || visibleRows < 1) return 0;
    const top = Math.min(h.count - 1, Math.max(h.oldest, topRow));
    const bottom = Math.max(h.oldest, top - visibleRows + 1);
    const rowH = heightPx / visibleRows;
    ctx.imageSmoothingEnabled = true;
    ctx.imageSmoothingQuality = 'low';
    // Flip vertically: the strip holds rows oldest-first, the display shows newest at the top.
    ctx.setTransform(1, 0, 0, -1, 0, heightPx);
    let n = bottom;
    while (n <= top) {
      const s = h.slot(n);
      const len = Math.min(top - n + 1, h.capacity - s);
      const ageOld = top - n;
      ctx.drawImage(strip, 0, s, h.nAz, len, 0, heightPx - (ageOld + 1) * rowH, widthPx, len * rowH);
      n += len;
    }
    ctx.setTransform(1, 0, 0, 1, 0, 0);
    return top - bottom + 1;
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

/** Tick step for a time axis spanning `spanS` seconds. */
export function timeStepS(spanS: number): number {
  for (const s of [1, 2, 5, 10, 15, 30, 60, 120, 300]) if (spanS / s <= 7) return s;
  return 600;
}

export interface TimeTick {
  /** Position from the top, as a fraction of the height. */
  y: number;
  /** Seconds before the newest row. */
  ageS: number;
}

/**
 * Time ticks of the displayed rows: where the age (seconds before the newest stored row, from
 * arrival times) crosses a multiple of `stepS`. O(visible rows).
 */
export function timeTicks(h: RowHistory, topRow: number, visibleRows: number, stepS: number): TimeTick[] {
  const out: TimeTick[] = [];
  if (h.count === 0) return out;
  const top = Math.min(h.count - 1, Math.max(h.oldest, topRow));
  const bottom = Math.max(h.oldest, top - visibleRows + 1);
  const newestMs = h.arrivalMs[h.slot(h.count - 1)];
  let prev = Math.floor((newestMs - h.arrivalMs[h.slot(top)]) / 1000 / stepS);
  if (top === h.count - 1) out.push({ y: 0, ageS: 0 });
  for (let n = top - 1; n >= bottom; n--) {
    const age = (newestMs - h.arrivalMs[h.slot(n)]) / 1000;
    const k = Math.floor(age / stepS);
    if (k > prev) {
      out.push({ y: (top - n) / visibleRows, ageS: k * stepS });
      prev = k;
    }
  }
  return out;
}
