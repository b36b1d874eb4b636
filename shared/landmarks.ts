/**
 * Landmarks: named azimuths of the place the array stands in ("gate" at 35°), kept in the array
 * file (`"landmarks": [{ "name": "gate", "azimuthDeg": 35 }]`), drawn on the dashboard's azimuth
 * axes and named beside peaks near them. One validator for the array file and the REST body, and
 * the pure helpers the dashboard and the CLI share.
 *
 * Azimuths are degrees counter-clockwise from +x (DESIGN.md §3), accepted in −180…360 and kept in
 * [0, 360) (as the scene's paths are, server/ingest/scenario.ts).
 */

export interface Landmark {
  /** 1–40 printable characters, unique within the file. */
  name: string;
  /** Degrees counter-clockwise from +x, in [0, 360). */
  azimuthDeg: number;
}

/** Most landmarks an array file may hold. */
export const MAX_LANDMARKS = 64;
/** Longest name, characters (code points). */
export const MAX_LANDMARK_NAME = 40;
/** Lowest and highest azimuth accepted before normalising, degrees. */
export const LANDMARK_AZIMUTH_MIN_DEG = -180;
export const LANDMARK_AZIMUTH_MAX_DEG = 360;
/** A peak within this many degrees of a landmark is listed with its name. */
export const LANDMARK_TOLERANCE_DEG = 10;

/** No control, format, unassigned, private-use or surrogate characters (Unicode category C). */
const PRINTABLE = /^[^\p{C}]+$/u;

/** `deg` brought into [0, 360). */
export function normaliseAzimuthDeg(deg: number): number {
  const a = ((deg % 360) + 360) % 360;
  return a === 360 ? 0 : a;
}

/** Smallest angle between two azimuths, degrees in [0, 180] (wraps around: 359° and 1° are 2° apart). */
export function azimuthDistanceDeg(a: number, b: number): number {
  const d = Math.abs(normaliseAzimuthDeg(a) - normaliseAzimuthDeg(b));
  return d > 180 ? 360 - d : d;
}

/**
 * Check a landmark list. `at` is the field's path as the caller shows it (`landmarks` in the array
 * file and in the REST body); `add` collects each problem with the path of the offending value.
 * @returns the list with azimuths in [0, 360), or undefined when it has problems
 */
export function validateLandmarks(value: unknown, at: string, add: (path: string, v: unknown, msg: string) => void): Landmark[] | undefined {
  if (!Array.isArray(value) || value.length > MAX_LANDMARKS) {
    add(at, Array.isArray(value) ? `${value.length} entries` : value, `must be a list of at most ${MAX_LANDMARKS} { "name", "azimuthDeg" } objects`);
    return undefined;
  }
  let ok = true;
  const seen = new Map<string, number>();
  const out: Landmark[] = [];
  value.forEach((e, i) => {
    const p = `${at}[${i}]`;
    if (typeof e !== 'object' || e === null || Array.isArray(e)) {
      add(p, e, 'must be an object { "name", "azimuthDeg" }');
      ok = false;
      return;
    }
    const r = e as Record<string, unknown>;
    for (const k of Object.keys(r)) {
      if (k !== 'name' && k !== 'azimuthDeg') {
        add(`${p}.${k}`, r[k], 'is not a landmark field (name, azimuthDeg)');
        ok = false;
      }
    }
    const name = r.name;
    const chars = typeof name === 'string' ? [...name].length : 0;
    if (typeof name !== 'string' || chars < 1 || chars > MAX_LANDMARK_NAME || !PRINTABLE.test(name) || name.trim() === '') {
      add(`${p}.name`, name, `must be 1–${MAX_LANDMARK_NAME} printable characters, not only spaces`);
      ok = false;
    } else if (seen.has(name)) {
      add(`${p}.name`, name, `repeats the name of ${at}[${seen.get(name)}]: names must be unique`);
      ok = false;
    } else seen.set(name, i);
    const az = r.azimuthDeg;
    if (typeof az !== 'number' || !Number.isFinite(az) || az < LANDMARK_AZIMUTH_MIN_DEG || az > LANDMARK_AZIMUTH_MAX_DEG) {
      add(`${p}.azimuthDeg`, az, `must be a number of degrees in ${LANDMARK_AZIMUTH_MIN_DEG}–${LANDMARK_AZIMUTH_MAX_DEG} (counter-clockwise from +x)`);
      ok = false;
    }
    if (ok) out.push({ name: name as string, azimuthDeg: normaliseAzimuthDeg(az as number) });
  });
  return ok ? out : undefined;
}

/**
 * The landmark nearest `azimuthDeg` within `toleranceDeg` (wrapping around the circle), or null.
 * The first listed wins a tie.
 */
export function nearestLandmark(azimuthDeg: number, landmarks: readonly Landmark[], toleranceDeg = LANDMARK_TOLERANCE_DEG): { landmark: Landmark; distanceDeg: number } | null {
  let best: Landmark | null = null;
  let bestD = Infinity;
  for (const l of landmarks) {
    const d = azimuthDistanceDeg(azimuthDeg, l.azimuthDeg);
    if (d < bestD) {
      bestD = d;
      best = l;
    }
  }
  return best && bestD <= toleranceDeg ? { landmark: best, distanceDeg: bestD } : null;
}

/** "35.0° · gate" when a landmark is within the tolerance, else "35.0°". */
export function peakAzimuthText(azimuthDeg: number, landmarks: readonly Landmark[], toleranceDeg = LANDMARK_TOLERANCE_DEG): string {
  const near = nearestLandmark(azimuthDeg, landmarks, toleranceDeg);
  const a = `${azimuthDeg.toFixed(1)}°`;
  return near ? `${a} · ${near.landmark.name}` : a;
}

/** One line for the journal: what a change of the list added, removed, moved or renamed. */
export function landmarkChangeSummary(before: readonly Landmark[], after: readonly Landmark[]): string {
  const parts: string[] = [];
  const old = new Map(before.map((l) => [l.name, l.azimuthDeg]));
  const now = new Map(after.map((l) => [l.name, l.azimuthDeg]));
  for (const l of after) {
    const was = old.get(l.name);
    if (was === undefined) parts.push(`+ ${l.name} ${l.azimuthDeg}°`);
    else if (was !== l.azimuthDeg) parts.push(`${l.name} ${was}° → ${l.azimuthDeg}°`);
  }
  for (const l of before) if (!now.has(l.name)) parts.push(`− ${l.name}`);
  return `landmarks: ${parts.length ? parts.join(', ') : 'unchanged'}`;
}
