/** Canvas plumbing shared by the plots: device-pixel sizing and axis ticks. */

export interface CanvasFit {
  ctx: CanvasRenderingContext2D;
  /** CSS pixels. */
  width: number;
  height: number;
  dpr: number;
  /** True when the backing store was resized (contents were cleared). */
  resized: boolean;
}

/**
 * Size `canvas`'s backing store to its CSS box × devicePixelRatio (only when that changed) and
 * return a context whose transform draws in CSS pixels. Null while the canvas has no layout box.
 */
export function fitCanvas(canvas: HTMLCanvasElement, opts: { alpha?: boolean } = {}): CanvasFit | null {
  const rect = canvas.getBoundingClientRect();
  const width = Math.round(rect.width);
  const height = Math.round(rect.height);
  if (width < 2 || height < 2) return null;
  const dpr = Math.max(1, Math.min(4, window.devicePixelRatio || 1));
  const w = Math.round(width * dpr);
  const h = Math.round(height * dpr);
  let resized = false;
  if (canvas.width !== w || canvas.height !== h) {
    canvas.width = w;
    canvas.height = h;
    resized = true;
  }
  const ctx = canvas.getContext('2d', { alpha: opts.alpha ?? true });
  if (!ctx) return null;
  ctx.setTransform(dpr, 0, 0, dpr, 0, 0);
  return { ctx, width, height, dpr, resized };
}

/** A "nice" step (1, 2, 2.5 or 5 × 10^k) giving about `target` intervals over `span`. */
export function niceStep(span: number, target = 6): number {
  if (!(span > 0)) return 1;
  const raw = span / target;
  const p = Math.pow(10, Math.floor(Math.log10(raw)));
  const m = raw / p;
  const f = m < 1.5 ? 1 : m < 2.25 ? 2 : m < 3.5 ? 2.5 : m < 7.5 ? 5 : 10;
  return f * p;
}

/** Multiples of `step` within [lo, hi]. */
export function ticks(lo: number, hi: number, step: number): number[] {
  const out: number[] = [];
  if (!(step > 0) || !(hi >= lo)) return out;
  const first = Math.ceil(lo / step - 1e-9) * step;
  for (let v = first; v <= hi + 1e-9 * step; v += step) out.push(Math.abs(v) < 1e-12 ? 0 : Number(v.toPrecision(12)));
  return out;
}

/** Angle tick step for a direction axis spanning `spanDeg` degrees. */
export function angleStep(spanDeg: number): number {
  const steps = [1, 2, 5, 10, 15, 30, 45, 60, 90];
  for (const s of steps) if (spanDeg / s <= 12) return s;
  return 90;
}

/**
 * Call `fn` once per animation frame at most, however often `request()` is called in between.
 * `cancel()` drops a pending frame.
 */
export function frameScheduler(fn: () => void): { request: () => void; cancel: () => void } {
  let id = 0;
  return {
    request() {
      if (id === 0)
        id = requestAnimationFrame(() => {
          id = 0;
          fn();
        });
    },
    cancel() {
      if (id !== 0) cancelAnimationFrame(id);
      id = 0;
    },
  };
}

/**
 * Call `onResize` whenever `el` changes size; the returned cleanup stops watching and calls
 * `onStop` (e.g. cancel a pending frame). Meant as the return value of a Svelte `$effect`.
 */
export function watchResize(el: Element, onResize: () => void, onStop: () => void): () => void {
  const ro = new ResizeObserver(onResize);
  ro.observe(el);
  return () => {
    ro.disconnect();
    onStop();
  };
}
