/**
 * The processing parameters as the operator sees them: one table of labels and allowed ranges,
 * shared by the configuration schema (server/config/schema.ts), the live checks
 * (server/engine/params.ts, server/dsp/loading.ts), the processing panel and the mapping of the
 * server's refusals to the panel's words. The numbers live here only.
 *
 * Keys are the API's field paths as refusals name them (`<path>: <why>`, server/engine/params.ts).
 */

/** An allowed closed interval [min, max] unless an end is marked open. */
export interface FieldRange {
  min: number;
  max: number;
  /** (min, …: the end itself is refused. */
  minOpen?: boolean;
  maxOpen?: boolean;
}

/** The ranges. Config fields of the same name (server/config/schema.ts) take theirs from here. */
export const PROCESSING_LIMITS = {
  /** Covariance time constant, seconds (live also: more than one hop). */
  tauS: { min: 0.01, max: 3600 },
  /** Forgetting factor per hop. */
  lambda: { min: 0, max: 1, minOpen: true, maxOpen: true },
  /** Band edges, Hz (live also: low < high ≤ fs/2). */
  bandLowHz: { min: 0, max: 192000 },
  bandHighHz: { min: 1, max: 192000 },
  /** Display rate, rows per second. */
  spectrumRateHz: { min: 0.5, max: 50 },
  /** Direction grid step, degrees (live also: at most 20 000 directions). */
  azimuthStepDeg: { min: 0.01, max: 90 },
  /** Diagonal loading δ = ratio·tr(R)/M: up to 60 dB above the average sensor power. */
  loadingRatio: { min: 0, max: 1e6 },
  /** Diagonal loading in dB re tr(R)/M. */
  loadingDb: { min: -200, max: 60 },
  /**
   * Fixed δ: at most 10¹², one bin's power 120 dB above full scale, 60 dB above the loudest input
   * accepted; keeps R + δI and the spectra finite in float64.
   */
  loadingDelta: { min: 0, max: 1e12 },
  /** WNG floor, dB (WNG ≤ 10·log10 M, at most 30.1 dB for 1024 sensors). */
  wngFloorDb: { min: -100, max: 100 },
  /** Upper end of the WNG search, ratio to tr(R)/M. */
  wngMaxRatio: { min: 1e-9, max: 1e6 },
} as const satisfies Record<string, FieldRange>;

export interface ProcessingField {
  /** The label the panel shows. */
  label: string;
  /** The panel group, when the label alone would not say which setting a message is about. */
  group?: string;
  unit?: string;
  /** Numeric fields: the allowed range. */
  range?: FieldRange;
  /** The configuration leaf with the same range, when there is one. */
  configPath?: string;
}

const L = PROCESSING_LIMITS;
const LOADING = 'diagonal loading';

/** Every processing field a refusal can name, by API path. */
export const PROCESSING_FIELDS: Record<string, ProcessingField> = {
  tauS: { label: 'time constant τ', unit: 's', range: L.tauS, configPath: 'processing.tauS' },
  lambda: { label: 'forgetting factor λ', unit: '/hop', range: L.lambda },
  loading: { label: LOADING },
  'loading.mode': { label: 'mode', group: LOADING },
  'loading.ratio': { label: 'ratio to tr(R)/M', group: LOADING, unit: '×', range: L.loadingRatio, configPath: 'processing.loadingRatio' },
  'loading.db': { label: 'level re tr(R)/M', group: LOADING, unit: 'dB', range: L.loadingDb },
  'loading.delta': { label: 'δ', group: LOADING, unit: 'FS²', range: L.loadingDelta },
  'loading.floorDb': { label: 'WNG floor', group: LOADING, unit: 'dB', range: L.wngFloorDb },
  'loading.maxRatio': { label: 'largest ratio of the WNG search', group: LOADING, unit: '×', range: L.wngMaxRatio },
  bandHz: { label: 'band', unit: 'Hz' },
  'bandHz.low': { label: 'band low', unit: 'Hz', range: L.bandLowHz, configPath: 'processing.bandLowHz' },
  'bandHz.high': { label: 'band high', unit: 'Hz', range: L.bandHighHz, configPath: 'processing.bandHighHz' },
  fftSize: { label: 'FFT size' },
  grid: { label: 'direction grid' },
  'grid.azimuthDeg': { label: 'azimuth grid' },
  'grid.azimuthDeg.startDeg': { label: 'azimuth start', unit: '°' },
  'grid.azimuthDeg.stopDeg': { label: 'azimuth stop', unit: '°' },
  'grid.azimuthDeg.stepDeg': { label: 'azimuth step', unit: '°', range: L.azimuthStepDeg, configPath: 'processing.azimuthStepDeg' },
  'grid.elevationDeg': { label: 'elevation grid' },
  'grid.elevationDeg.startDeg': { label: 'elevation start', unit: '°' },
  'grid.elevationDeg.stopDeg': { label: 'elevation stop', unit: '°' },
  'grid.elevationDeg.stepDeg': { label: 'elevation step', unit: '°', range: L.azimuthStepDeg },
  methods: { label: 'methods' },
  spectrumRateHz: { label: 'spectrum rate', unit: 'rows/s', range: L.spectrumRateHz, configPath: 'processing.spectrumRateHz' },
  normalise: { label: 'normalise per bin' },
};

/** The name a message uses for a field: "time constant τ", "diagonal loading (ratio to tr(R)/M)". */
export function fieldName(path: string): string {
  const f = PROCESSING_FIELDS[path];
  if (!f) return path;
  return f.group ? `${f.group} (${f.label})` : f.label;
}

/** A range as messages write it: "0.01–3600", "(0, 1)". */
export function rangeText(r: FieldRange): string {
  if (r.minOpen || r.maxOpen) return `${r.minOpen ? '(' : '['}${r.min}, ${r.max}${r.maxOpen ? ')' : ']'}`;
  return `${r.min}–${r.max}`;
}

/** True when v is inside r. */
export function inRange(v: number, r: FieldRange): boolean {
  if (!Number.isFinite(v)) return false;
  if (r.minOpen ? !(v > r.min) : !(v >= r.min)) return false;
  if (r.maxOpen ? !(v < r.max) : !(v <= r.max)) return false;
  return true;
}

/**
 * The dashboard's own check before sending: null when the value is inside the field's range,
 * otherwise the refusal in the panel's words ("time constant τ: 5000 out of range; allowed 0.01–3600 s").
 */
export function checkField(path: string, v: number): string | null {
  const f = PROCESSING_FIELDS[path];
  if (!f?.range || inRange(v, f.range)) return null;
  return `${fieldName(path)}: ${Number.isFinite(v) ? v : JSON.stringify(String(v))} out of range; allowed ${rangeText(f.range)}${f.unit && !f.range.minOpen ? ` ${f.unit}` : ''}`;
}

/**
 * A server refusal (`<path>: <why>`, ERR_HTTP_VALIDATION's message) in the panel's words: the path
 * replaced by the field's name. Loading refusals name the sub-field at the start of the reason
 * ("loading: ratio must be in …"); that is folded in. Messages that name no known field pass unchanged.
 */
export function refusalMessage(message: string): string {
  const m = /^([A-Za-z][\w.]*): (.*)$/s.exec(message);
  if (!m) return message;
  let path = m[1];
  let why = m[2];
  const sub = /^([A-Za-z]\w*)(?::\s*|\s+)(.*)$/s.exec(why);
  if (sub && PROCESSING_FIELDS[`${path}.${sub[1]}`]) {
    path = `${path}.${sub[1]}`;
    why = sub[2];
  }
  if (!PROCESSING_FIELDS[path]) return message;
  return `${fieldName(path)}: ${why}`;
}
