/**
 * Partial rows on the direction history (issue 17): a row whose spectra miss some bins because a
 * remote bin worker did not answer before the combiner's deadline (SpectrumRow.partial, flags bit 3)
 * gets a short mark in the margin beside the image, at the row's height, so the data itself stays
 * visible. The marks are found from the same time line as the rows (RowHistory.timeS / durationS),
 * written into a caller-owned Float64Array: nothing is allocated per row or per frame.
 */
import type { RowHistory } from './history.ts';
import { PALETTE } from './theme.ts';

/**
 * The mark's colour (PALETTE.partial, also the strip badge's): a pink that the colour scale
 * ("nightfield": violet-blue through teal and green to straw) never reaches, nor the palette's
 * beam, warning and error colours.
 */
export const PARTIAL_MARK_COLOUR: string = PALETTE.partial;
/** The same as 8-bit R, G, B (for reading canvas pixels back). */
export const PARTIAL_MARK_RGB: readonly [number, number, number] = [1, 3, 5].map((i) => parseInt(PALETTE.partial.slice(i, i + 2), 16)) as unknown as [number, number, number];
/** What a mark means (tooltip and legend). */
export const PARTIAL_ROW_TEXT = 'partial row: some bins missing — a remote worker did not answer in time (see the remote workers table in the Processing panel)';
/**
 * Issue 17: the "partial rows" badge stays lit while one of the last this many accepted rows was
 * partial (2 s at the default 20 rows/s); counted in rows, not time, so a paused tab does not matter.
 */
export const PARTIAL_RECENT_ROWS = 40;

/**
 * One of the last `windowRows` accepted rows was partial. `lastPartialRow`: the accepted-row count
 * just after the newest partial row was accepted (1 for the first row), −1 for none.
 */
export function partialIsRecent(rowsAccepted: number, lastPartialRow: number, windowRows = PARTIAL_RECENT_ROWS): boolean {
  return lastPartialRow >= 1 && rowsAccepted - lastPartialRow < windowRows;
}

/** Width of the mark strip beside the image, CSS px. */
export const PARTIAL_MARK_WIDTH_PX = 5;

/**
 * The spans to mark when row `topRow` is at the top of a view `spanS` seconds tall: each as a
 * pair (topFraction, bottomFraction) of the view's height from its top, the row's top edge at
 * (t_top − timeS) / spanS and its bottom edge `durationS / spanS` lower (as the history's runs
 * place them; see history-painter.ts visibleRuns). Consecutive partial rows that touch on the time
 * line are merged into one span, and so are spans less than `mergeGapFraction` apart (the painter
 * passes one device pixel, which no eye could tell apart anyway). Newest first.
 * @param out pairs are written here; at most `out.length / 2` spans (the rest are left out)
 * @returns the number of spans written
 */
export function partialMarkSpans(h: RowHistory, topRow: number, spanS: number, out: Float64Array, mergeGapFraction = 0): number {
  if (h.count === 0 || h.partialHeld === 0 || !(spanS > 0)) return 0;
  const maxSpans = out.length >> 1;
  const top = Math.min(h.count - 1, Math.max(h.oldest, topRow));
  const tTop = h.timeS[h.slot(top)];
  let spans = 0;
  for (let n = top; n >= h.oldest; n--) {
    const s = h.slot(n);
    const age = tTop - h.timeS[s];
    // Same rule as visibleRuns: a row whose top edge reaches the bottom edge shows nothing.
    if (age >= spanS - 1e-9) break;
    if (h.partial[s] === 0) continue;
    const topF = age / spanS;
    const bottomF = (age + h.durationS[s]) / spanS;
    // Touches the span above (the previous, newer partial row)? Then extend it downwards.
    if (spans > 0 && topF <= out[2 * spans - 1] + mergeGapFraction + 1e-9) {
      if (bottomF > out[2 * spans - 1]) out[2 * spans - 1] = bottomF;
      continue;
    }
    if (spans === maxSpans) break;
    out[2 * spans] = topF;
    out[2 * spans + 1] = bottomF;
    spans++;
  }
  return spans;
}

/** Most separate spans drawn in one frame (more than a view's height in pixels could tell apart). */
export const MAX_MARK_SPANS = 1024;
/** A mark is at least this tall, device px, so a lone row at any span shows. */
const MIN_MARK_PX = 2;

/**
 * Draws the partial-row marks onto the narrow margin canvas beside the history image. Plans its
 * span buffer once; a frame with nothing to mark, after a frame with nothing either, draws nothing.
 */
export class PartialMarkPainter {
  readonly #spans = new Float64Array(2 * MAX_MARK_SPANS);
  /** Spans drawn last frame (−1: never drawn). */
  #drawn = -1;

  /**
   * Clear the margin canvas (`widthPx × heightPx` device px) and mark the partial rows of the view
   * whose top row is `topRow` and span `spanS` seconds. `h` null clears. `force` redraws even when
   * nothing changed from empty (after a resize, which clears the canvas anyway).
   * @returns the number of spans drawn
   */
  draw(ctx: CanvasRenderingContext2D, widthPx: number, heightPx: number, h: RowHistory | null, topRow: number, spanS: number, force = false): number {
    const n = h && heightPx > 0 ? partialMarkSpans(h, topRow, spanS, this.#spans, 1 / heightPx) : 0;
    if (n === 0 && this.#drawn === 0 && !force) return 0;
    ctx.setTransform(1, 0, 0, 1, 0, 0);
    ctx.clearRect(0, 0, widthPx, heightPx);
    ctx.fillStyle = PARTIAL_MARK_COLOUR;
    const sp = this.#spans;
    for (let i = 0; i < n; i++) {
      const y0 = sp[2 * i] * heightPx;
      const y1 = Math.max(sp[2 * i + 1] * heightPx, y0 + MIN_MARK_PX);
      if (y0 >= heightPx) break;
      ctx.fillRect(0, y0, widthPx, Math.min(heightPx, y1) - y0);
    }
    this.#drawn = n;
    return n;
  }
}
