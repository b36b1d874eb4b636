/**
 * Sectors: named regions of directions ("gate" from 20° to 50°) whose level the monitor measures
 * (issue 16). Kept in the array file
 * (`"sectors": [{ "name": "gate", "azimuthDeg": [20, 50], "method": "mvdr", "weighting": "A" }]`),
 * edited over REST (`/api/sectors/NAME`), drawn on the dashboard's direction history and spectrum.
 * One closed validator for the array file, the REST body and the hello message, and the pure
 * membership helpers the server and the dashboard share.
 *
 * Azimuths are degrees counter-clockwise from +x (DESIGN.md §3), each in [0, 360). A sector runs
 * counter-clockwise from `azimuthDeg[0]` to `azimuthDeg[1]`, both ends included, and may wrap
 * through 0: [350, 10] is the 20° around +x, [10, 350] the 340° everywhere else. The two ends may
 * not be equal (a sector of no width, or a whole turn, is ambiguous: a whole turn is the array as
 * a whole).
 *
 * Levels measured in a sector are indicative (no class-rated meter, no traceable calibration).
 */

export type SectorMethod = 'mvdr' | 'conventional';
/** Frequency weighting of IEC 61672-1 applied to the sector's band power. */
export type SectorWeighting = 'A' | 'C' | 'Z';

export interface Sector {
  /** 1–32 letters, digits, `_` or `-`; unique within the file; the REST path's last part. */
  name: string;
  /** [from, to], degrees in [0, 360), counter-clockwise from `from` to `to` (may wrap through 0). */
  azimuthDeg: [number, number];
  /** [lo, hi], degrees in −90…90, lo < hi; absent: every elevation of the grid. */
  elevationDeg?: [number, number];
  /** [lo, hi], Hz in 1…fs/2, lo < hi; absent: the processing band. */
  bandHz?: [number, number];
  /** Which spectrum the sector's level is taken from. */
  method: SectorMethod;
  weighting: SectorWeighting;
}

/** Most sectors an array file may hold. */
export const MAX_SECTORS = 8;
/** Name: letters, digits, `_` or `-`, 1–32 of them (safe in a URL path, a file name and a metric label). */
export const SECTOR_NAME = /^[A-Za-z0-9_-]{1,32}$/;
export const MAX_SECTOR_NAME = 32;
export const SECTOR_METHODS: readonly SectorMethod[] = ['mvdr', 'conventional'];
export const SECTOR_WEIGHTINGS: readonly SectorWeighting[] = ['A', 'C', 'Z'];
/** Lowest band edge, Hz. */
export const SECTOR_BAND_MIN_HZ = 1;
/**
 * Highest band edge when the sample rate is not known (the array file on its own): half of the
 * highest sample rate the project accepts, 192 kHz. The server checks against fs/2 on a PUT.
 */
export const SECTOR_BAND_MAX_HZ = 96_000;
/** The fields of a sector, in the order they are written. */
export const SECTOR_FIELDS = ['name', 'azimuthDeg', 'elevationDeg', 'bandHz', 'method', 'weighting'] as const;

/** What the server knows beyond the file: the sample rate's half and the processing band. */
export interface SectorLimits {
  /** fs/2, Hz: the highest band edge allowed. */
  nyquistHz?: number;
  /** The processing band [low, high], Hz: a sector's band must lie inside it (only those bins are computed). */
  processingBandHz?: readonly [number, number];
}

type Add = (path: string, v: unknown, msg: string) => void;

const isNum = (x: unknown): x is number => typeof x === 'number' && Number.isFinite(x);
const pair = (x: unknown): x is [number, number] => Array.isArray(x) && x.length === 2 && isNum(x[0]) && isNum(x[1]);

/**
 * Check one sector's fields (everything but the name when `withName` is false: the REST body,
 * whose name is in the path). Closed: a field not listed is a problem. `at` prefixes each path
 * (`sectors[2]` in the array file, `` in a REST body); `add` collects each problem.
 * @returns the sector (fields in the written order) or undefined when it has problems
 */
export function validateSectorFields(value: unknown, at: string, add: Add, opts: { withName?: boolean; name?: string; limits?: SectorLimits } = {}): Sector | undefined {
  const withName = opts.withName ?? true;
  const p = (k: string) => (at ? `${at}.${k}` : k);
  if (typeof value !== 'object' || value === null || Array.isArray(value)) {
    add(at || '(body)', value, `must be an object { ${withName ? '"name", ' : ''}"azimuthDeg", "elevationDeg"?, "bandHz"?, "method", "weighting" }`);
    return undefined;
  }
  const r = value as Record<string, unknown>;
  let ok = true;
  const bad = (path: string, v: unknown, msg: string) => {
    add(path, v, msg);
    ok = false;
  };
  const known: readonly string[] = withName ? SECTOR_FIELDS : SECTOR_FIELDS.filter((k) => k !== 'name');
  for (const k of Object.keys(r)) {
    if (known.includes(k)) continue;
    if (k === 'name' && !withName) bad(p(k), r[k], 'comes from the path (/api/sectors/NAME), not the body');
    else bad(p(k), r[k], `is not a sector field (${known.join(', ')})`);
  }
  const name = withName ? r.name : opts.name;
  if (typeof name !== 'string' || !SECTOR_NAME.test(name)) bad(withName ? p('name') : 'name', name, `must be 1–${MAX_SECTOR_NAME} letters, digits, _ or -`);

  const az = r.azimuthDeg;
  if (!pair(az) || !az.every((a) => a >= 0 && a < 360)) bad(p('azimuthDeg'), az, 'must be [from, to], degrees in [0, 360) (the sector runs counter-clockwise from "from" to "to" and may wrap through 0)');
  else if (az[0] === az[1]) bad(p('azimuthDeg'), az, 'must have two different ends (from = to has no width)');

  const el = r.elevationDeg;
  if (el !== undefined) {
    if (!pair(el) || !el.every((e) => e >= -90 && e <= 90)) bad(p('elevationDeg'), el, 'must be [lo, hi], degrees in -90…90');
    else if (!(el[0] < el[1])) bad(p('elevationDeg'), el, 'must have lo < hi');
  }

  const band = r.bandHz;
  if (band !== undefined) {
    const top = opts.limits?.nyquistHz ?? SECTOR_BAND_MAX_HZ;
    const what = opts.limits?.nyquistHz !== undefined ? `${top} Hz (half the sample rate)` : `${top} Hz`;
    if (!pair(band) || !band.every((f) => f >= SECTOR_BAND_MIN_HZ && f <= top)) bad(p('bandHz'), band, `must be [lo, hi], Hz in ${SECTOR_BAND_MIN_HZ}…${what}`);
    else if (!(band[0] < band[1])) bad(p('bandHz'), band, 'must have lo < hi');
    else {
      const pb = opts.limits?.processingBandHz;
      if (pb && (band[0] < pb[0] || band[1] > pb[1])) bad(p('bandHz'), band, `must lie inside the processing band ${pb[0]}–${pb[1]} Hz (only those frequencies are analysed)`);
    }
  }

  const method = r.method;
  if (typeof method !== 'string' || !(SECTOR_METHODS as readonly string[]).includes(method)) bad(p('method'), method, `must be one of ${SECTOR_METHODS.map((m) => `"${m}"`).join(', ')}`);
  const weighting = r.weighting;
  if (typeof weighting !== 'string' || !(SECTOR_WEIGHTINGS as readonly string[]).includes(weighting)) bad(p('weighting'), weighting, `must be one of ${SECTOR_WEIGHTINGS.map((m) => `"${m}"`).join(', ')} (IEC 61672-1 frequency weighting)`);

  if (!ok) return undefined;
  const s: Sector = { name: name as string, azimuthDeg: [(az as number[])[0], (az as number[])[1]], method: method as SectorMethod, weighting: weighting as SectorWeighting };
  if (el !== undefined) s.elevationDeg = [(el as number[])[0], (el as number[])[1]];
  if (band !== undefined) s.bandHz = [(band as number[])[0], (band as number[])[1]];
  return ordered(s);
}

/** The sector with its fields in the written order (stable file diffs). */
function ordered(s: Sector): Sector {
  const o: Sector = { name: s.name, azimuthDeg: s.azimuthDeg } as Sector;
  if (s.elevationDeg) o.elevationDeg = s.elevationDeg;
  if (s.bandHz) o.bandHz = s.bandHz;
  o.method = s.method;
  o.weighting = s.weighting;
  return o;
}

/**
 * Check a sector list (the array file's `sectors`, the hello's `array.sectors`): at most
 * MAX_SECTORS, names unique, each sector closed-validated.
 * @returns the list, or undefined when it has problems (each one given to `add`)
 */
export function validateSectors(value: unknown, at: string, add: Add, limits?: SectorLimits): Sector[] | undefined {
  if (!Array.isArray(value) || value.length > MAX_SECTORS) {
    add(at, Array.isArray(value) ? `${value.length} entries` : value, `must be a list of at most ${MAX_SECTORS} sectors { "name", "azimuthDeg", "elevationDeg"?, "bandHz"?, "method", "weighting" }`);
    return undefined;
  }
  let ok = true;
  const seen = new Map<string, number>();
  const out: Sector[] = [];
  value.forEach((e, i) => {
    const s = validateSectorFields(e, `${at}[${i}]`, add, { limits });
    if (!s) {
      ok = false;
      return;
    }
    if (seen.has(s.name)) {
      add(`${at}[${i}].name`, s.name, `repeats the name of ${at}[${seen.get(s.name)}]: names must be unique`);
      ok = false;
      return;
    }
    seen.set(s.name, i);
    out.push(s);
  });
  return ok ? out : undefined;
}

/**
 * Saved sectors checked again against what the server knows now (fs/2, the processing band, which
 * may have changed since a sector was saved): one line per problem, `sectors.NAME.bandHz …`.
 */
export function sectorLimitProblems(sectors: readonly Sector[], limits: SectorLimits): string[] {
  const out: string[] = [];
  for (const s of sectors) {
    validateSectorFields(s, `sectors.${s.name}`, (path, _v, msg) => out.push(`${path} ${msg}`), { limits });
  }
  return out;
}

/** Width of a sector in degrees, counter-clockwise from its first end to its second: (0, 360). */
export function sectorWidthDeg(s: Pick<Sector, 'azimuthDeg'>): number {
  const w = (((s.azimuthDeg[1] - s.azimuthDeg[0]) % 360) + 360) % 360;
  return w === 0 ? 360 : w;
}

/** Grid angles carry decimal noise (35.00000000001): this much is still inside, degrees. */
const EDGE_EPS_DEG = 1e-9;

/**
 * True when azimuth `azDeg` (any real number of degrees, brought into [0, 360)) lies in the sector,
 * ends included; wrap-around through 0 is handled. Elevation is not looked at.
 */
export function azimuthInSector(azDeg: number, s: Pick<Sector, 'azimuthDeg'>): boolean {
  if (!Number.isFinite(azDeg)) return false;
  const rel = ((((azDeg - s.azimuthDeg[0]) % 360) + 360) % 360);
  const w = sectorWidthDeg(s);
  // Just below a full turn is the first end again, seen from the other side of 0.
  return rel <= w + EDGE_EPS_DEG || rel >= 360 - EDGE_EPS_DEG;
}

/** True when elevation `elDeg` lies in the sector's elevation range (ends included); always true without one. */
export function elevationInSector(elDeg: number, s: Pick<Sector, 'elevationDeg'>): boolean {
  if (!s.elevationDeg) return true;
  return elDeg >= s.elevationDeg[0] - EDGE_EPS_DEG && elDeg <= s.elevationDeg[1] + EDGE_EPS_DEG;
}

/**
 * Indices of the grid directions inside the sector, ascending.
 * @param gridAzimuthsDeg azimuth of each direction d, length D (the engine's DirectionGrid.azimuthDeg)
 * @param gridElevationsDeg elevation of each direction d, length D (DirectionGrid.elevationDeg)
 * @throws RangeError when the two lengths differ
 */
export function sectorDirections(s: Pick<Sector, 'azimuthDeg' | 'elevationDeg'>, gridAzimuthsDeg: ArrayLike<number>, gridElevationsDeg: ArrayLike<number>): Int32Array {
  const n = gridAzimuthsDeg.length;
  if (gridElevationsDeg.length !== n) throw new RangeError(`sectorDirections: ${n} azimuths but ${gridElevationsDeg.length} elevations (one of each per direction)`);
  const idx = new Int32Array(n);
  let k = 0;
  for (let d = 0; d < n; d++) if (azimuthInSector(gridAzimuthsDeg[d], s) && elevationInSector(gridElevationsDeg[d], s)) idx[k++] = d;
  return idx.slice(0, k);
}

const fmtRange = (r: readonly [number, number] | undefined, unit: string) => (r ? `${r[0]}–${r[1]}${unit === '°' ? '' : ' '}${unit}` : '');

/** "gate 20°→50° mvdr A" (with elevation and band when set): a sector in one line. */
export function sectorText(s: Sector): string {
  const parts = [`${s.name} ${s.azimuthDeg[0]}°→${s.azimuthDeg[1]}°`];
  if (s.elevationDeg) parts.push(`el ${fmtRange(s.elevationDeg, '°')}`);
  if (s.bandHz) parts.push(fmtRange(s.bandHz, 'Hz'));
  parts.push(s.method, s.weighting);
  return parts.join(' ');
}

/** One line for the journal: what a change of the list added, changed or removed. */
export function sectorChangeSummary(before: readonly Sector[], after: readonly Sector[]): string {
  const parts: string[] = [];
  const old = new Map(before.map((s) => [s.name, s]));
  const now = new Set(after.map((s) => s.name));
  for (const s of after) {
    const was = old.get(s.name);
    if (!was) parts.push(`+ ${sectorText(s)}`);
    else if (JSON.stringify(was) !== JSON.stringify(s)) parts.push(`${sectorText(was)} → ${sectorText(s).slice(s.name.length + 1)}`);
  }
  for (const s of before) if (!now.has(s.name)) parts.push(`− ${s.name}`);
  return `sectors: ${parts.length ? parts.join(', ') : 'unchanged'}`;
}
