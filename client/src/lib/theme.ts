/**
 * The dashboard palette, one place for CSS (as `--c-<name>` custom properties, set by main.ts)
 * and canvas drawing (which cannot read CSS variables cheaply per frame).
 */
export const PALETTE = {
  bg: '#0d1013',
  panel: '#141a1f',
  panel2: '#1a2128',
  line: '#27303a',
  grid: '#222a33',
  text: '#d8dee5',
  muted: '#8c97a4',
  faint: '#5b6571',
  accent: '#5cc6b2',
  mvdr: '#f0b34a',
  conventional: '#6ea6dc',
  beam: '#d283dd',
  ok: '#5cbf7e',
  warn: '#e3a23a',
  bad: '#e0645d',
  /** Partial rows (issue 17): a pink the colour scale never reaches (lib/partial-marks.ts). */
  partial: '#ff4896',
} as const;

export type PaletteName = keyof typeof PALETTE;

export const FONT_STACK = 'system-ui, -apple-system, "Segoe UI", Roboto, "Noto Sans", sans-serif';
export const MONO_STACK = 'ui-monospace, "SF Mono", "Cascadia Mono", "DejaVu Sans Mono", Menlo, monospace';

/** Write the palette into `:root` as CSS custom properties. */
export function applyPalette(root: HTMLElement = document.documentElement): void {
  for (const [k, v] of Object.entries(PALETTE)) root.style.setProperty(`--c-${k}`, v);
  root.style.setProperty('--font', FONT_STACK);
  root.style.setProperty('--mono', MONO_STACK);
}
