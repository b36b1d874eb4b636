/** Number formatting shared by the views (units are in the callers' labels). */

/** Up to `digits` significant digits, without trailing zeros ("0.5", "0.989333", "1e-6"). */
export function fmtSig(v: number, digits = 6): string {
  if (!Number.isFinite(v)) return String(v);
  if (v === 0) return '0';
  const a = Math.abs(v);
  if (a >= 1e-4 && a < 1e7) return String(Number(v.toPrecision(digits)));
  return Number(v.toPrecision(digits)).toExponential().replace('e+', 'e');
}

/** Fixed decimals with a real minus sign; "—" for null/NaN. */
export function fmtFixed(v: number | null | undefined, decimals = 1): string {
  if (v === null || v === undefined || Number.isNaN(v)) return '—';
  if (v === Infinity) return '∞';
  if (v === -Infinity) return '−∞';
  const s = v.toFixed(decimals);
  return s.startsWith('-') ? `−${s.slice(1)}` : s;
}

/** Fixed decimals with an ASCII minus (for data- attributes tests parse). */
export function fmtAttr(v: number, decimals = 1): string {
  return Number.isFinite(v) ? v.toFixed(decimals) : String(v);
}

/** Frequency with a sensible unit: "415 Hz", "6.57 kHz". */
export function fmtHz(hz: number | null | undefined): string {
  if (hz === null || hz === undefined || !Number.isFinite(hz)) return '—';
  if (Math.abs(hz) >= 1000) return `${Number((hz / 1000).toPrecision(3))} kHz`;
  return `${Number(hz.toPrecision(3))} Hz`;
}

/** Integer with thin-space thousands separators. */
export function fmtCount(n: number | null | undefined): string {
  if (n === null || n === undefined || !Number.isFinite(n)) return '—';
  return Math.round(n).toString().replace(/\B(?=(\d{3})+(?!\d))/g, '\u2009');
}
