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

/** A duration as h:mm:ss ("0:00:07", "12:03:45"); "—" for null or a negative/non-finite value. */
export function fmtDuration(s: number | null | undefined): string {
  if (s === null || s === undefined || !Number.isFinite(s) || s < 0) return '—';
  const t = Math.floor(s);
  const h = Math.floor(t / 3600);
  const m = Math.floor((t % 3600) / 60);
  const sec = t % 60;
  return `${h}:${String(m).padStart(2, '0')}:${String(sec).padStart(2, '0')}`;
}

/** Bytes with a decimal unit: "812 B", "23.0 MB", "45.6 GB"; "—" for null. */
export function fmtBytes(b: number | null | undefined): string {
  if (b === null || b === undefined || !Number.isFinite(b) || b < 0) return '—';
  const units = ['B', 'kB', 'MB', 'GB', 'TB'];
  let v = b;
  let u = 0;
  while (v >= 1000 && u < units.length - 1) {
    v /= 1000;
    u++;
  }
  return u === 0 ? `${Math.round(v)} B` : `${v.toFixed(1)} ${units[u]}`;
}
