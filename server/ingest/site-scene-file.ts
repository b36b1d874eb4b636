/**
 * Site scene files: sound sources placed in the site frame (x east, y north, z up, metres;
 * shared/site.ts), for the simulator to render as each array at its pose hears them
 * (site-scene.ts). A closed schema: an unknown field is an error. Validated on load with every
 * problem reported at once, each naming the file and the field, like the array file
 * (server/config/array-file.ts).
 *
 * ```json
 * { "name": "yard", "speedOfSoundMps": 343.2, "noiseDbfs": -80,
 *   "sources": [
 *     { "name": "pump", "levelDbAt1m": -10, "signal": { "kind": "broadband", "lowHz": 200, "highHz": 4000 }, "positionM": [40, 30, 1] },
 *     { "name": "cart", "levelDbAt1m": -14, "signal": { "kind": "tonal", "frequencyHz": 700 },
 *       "path": { "pointsM": [[20, 20, 1], [60, 20, 1]], "speedMps": 2, "loop": false } } ] }
 * ```
 */
import { readFile } from 'node:fs/promises';
import { ConfigError, type ConfigIssue } from '../config/validate.ts';

export type SceneSignal = { kind: 'broadband'; lowHz: number; highHz: number } | { kind: 'tonal'; frequencyHz: number };

export interface ScenePath {
  /** Corners of the path in the site frame, metres, 2…MAX_PATH_POINTS. */
  pointsM: [number, number, number][];
  /** Speed along the path, m/s. */
  speedMps: number;
  /** true: round the closed polygon (last point back to the first); false: there and back. */
  loop: boolean;
}

export interface SceneSource {
  name: string;
  /** rms level of the emitted signal at 1 m from the source, dBFS (20·log10 rms, full scale ±1). */
  levelDbAt1m: number;
  signal: SceneSignal;
  /** Fixed position, site frame, metres; null when the source follows a path. */
  positionM: [number, number, number] | null;
  path: ScenePath | null;
}

export interface SiteScene {
  name: string;
  speedOfSoundMps: number;
  sources: SceneSource[];
  /** Sensor self-noise, rms per channel, dBFS; null: none. */
  noiseDbfs: number | null;
}

export const MAX_SCENE_SOURCES = 32;
export const MAX_PATH_POINTS = 256;
/** Site coordinates of a scene, ±metres: a site, not a map (bounds the propagation delay). */
export const MAX_SCENE_COORD_M = 2000;
export const MAX_SOURCE_SPEED_MPS = 50;
/** Band edges: the band-limiting filter (site-scene.ts) cannot shape lower corners. */
export const MIN_BROADBAND_LOW_HZ = 50;
export const DEFAULT_SCENE_SPEED_OF_SOUND_MPS = 343.2;
/** Default sensor self-noise when the file gives none, dBFS per channel. */
export const DEFAULT_SCENE_NOISE_DBFS = -90;
const SCENE_NAME = /^[A-Za-z0-9 _.-]{1,64}$/;

const TOP_FIELDS = ['name', 'speedOfSoundMps', 'sources', 'noiseDbfs'];
const SOURCE_FIELDS = ['name', 'levelDbAt1m', 'signal', 'positionM', 'path'];
const PATH_FIELDS = ['pointsM', 'speedMps', 'loop'];

/** Check a parsed scene object; `where` (the file name) prefixes every message. @throws ConfigError */
export function validateScene(value: unknown, where: string): SiteScene {
  const issues: ConfigIssue[] = [];
  const add = (path: string, v: unknown, msg: string) => issues.push({ path, value: v, message: `${where}: ${path || 'the scene'} ${msg}` });
  if (typeof value !== 'object' || value === null || Array.isArray(value)) {
    throw new ConfigError([{ path: '', value, message: `${where}: not a JSON object` }]);
  }
  const o = value as Record<string, unknown>;
  closed(o, '', TOP_FIELDS, add);
  const name = o.name;
  if (typeof name !== 'string' || !SCENE_NAME.test(name)) add('name', name, 'must be 1–64 letters, digits, spaces, _ . or -');
  const c = o.speedOfSoundMps === undefined ? DEFAULT_SCENE_SPEED_OF_SOUND_MPS : o.speedOfSoundMps;
  if (!isNum(c) || c < 200 || c > 2000) add('speedOfSoundMps', c, 'must be a number of m/s in 200–2000');
  const noise = o.noiseDbfs === undefined ? DEFAULT_SCENE_NOISE_DBFS : o.noiseDbfs;
  if (noise !== null && (!isNum(noise) || noise < -200 || noise > 0)) add('noiseDbfs', noise, 'must be a number of dBFS in -200–0, or null (no self-noise)');
  const list = o.sources;
  const sources: SceneSource[] = [];
  if (!Array.isArray(list) || list.length < 1 || list.length > MAX_SCENE_SOURCES) {
    add('sources', Array.isArray(list) ? `${list.length} entries` : list, `must be a list of 1–${MAX_SCENE_SOURCES} sources`);
  } else {
    const names = new Map<string, number>();
    list.forEach((s, i) => {
      const src = validateSource(s, `sources[${i}]`, add);
      if (src === null) return;
      const before = names.get(src.name);
      if (before !== undefined) add(`sources[${i}].name`, src.name, `is already the name of sources[${before}]: names must differ`);
      names.set(src.name, i);
      sources.push(src);
    });
  }
  if (issues.length > 0) throw new ConfigError(issues);
  return { name: name as string, speedOfSoundMps: c as number, sources, noiseDbfs: noise as number | null };
}

type Add = (path: string, v: unknown, msg: string) => void;

function isNum(v: unknown): v is number {
  return typeof v === 'number' && Number.isFinite(v);
}

function closed(o: Record<string, unknown>, at: string, fields: string[], add: Add): void {
  for (const k of Object.keys(o)) if (!fields.includes(k)) add(at ? `${at}.${k}` : k, o[k], `is not a field here (${fields.join(', ')})`);
}

function point(v: unknown, at: string, add: Add): [number, number, number] | null {
  if (!Array.isArray(v) || v.length !== 3 || !v.every(isNum)) {
    add(at, v, 'must be [x, y, z], three finite numbers in metres (x east, y north, z up)');
    return null;
  }
  if (v.some((x) => Math.abs(x) > MAX_SCENE_COORD_M)) {
    add(at, v, `has a coordinate beyond ±${MAX_SCENE_COORD_M} m`);
    return null;
  }
  return [v[0], v[1], v[2]];
}

function validateSource(v: unknown, at: string, outer: Add): SceneSource | null {
  let problems = 0;
  const add: Add = (path, val, msg) => {
    problems++;
    outer(path, val, msg);
  };
  if (typeof v !== 'object' || v === null || Array.isArray(v)) {
    add(at, v, 'must be an object { "name", "levelDbAt1m", "signal", "positionM" or "path" }');
    return null;
  }
  const o = v as Record<string, unknown>;
  closed(o, at, SOURCE_FIELDS, add);
  if (typeof o.name !== 'string' || !SCENE_NAME.test(o.name)) add(`${at}.name`, o.name, 'must be 1–64 letters, digits, spaces, _ . or -');
  if (!isNum(o.levelDbAt1m) || o.levelDbAt1m < -150 || o.levelDbAt1m > 40) add(`${at}.levelDbAt1m`, o.levelDbAt1m, 'must be a number of dBFS (rms at 1 m) in -150–40');
  const signal = validateSignal(o.signal, `${at}.signal`, add);
  let positionM: [number, number, number] | null = null;
  let path: ScenePath | null = null;
  if ((o.positionM === undefined) === (o.path === undefined)) {
    add(at, o.positionM === undefined ? 'neither' : 'both', 'must have exactly one of "positionM" (fixed) and "path" (moving)');
  } else if (o.positionM !== undefined) {
    positionM = point(o.positionM, `${at}.positionM`, add);
  } else {
    path = validatePath(o.path, `${at}.path`, add);
  }
  if (problems > 0 || signal === null) return null;
  return { name: o.name as string, levelDbAt1m: o.levelDbAt1m as number, signal, positionM, path };
}

function validateSignal(v: unknown, at: string, add: Add): SceneSignal | null {
  if (typeof v !== 'object' || v === null || Array.isArray(v)) {
    add(at, v, 'must be { "kind": "broadband", "lowHz", "highHz" } or { "kind": "tonal", "frequencyHz" }');
    return null;
  }
  const o = v as Record<string, unknown>;
  if (o.kind === 'broadband') {
    closed(o, at, ['kind', 'lowHz', 'highHz'], add);
    const { lowHz, highHz } = o;
    if (!isNum(lowHz) || lowHz < MIN_BROADBAND_LOW_HZ || lowHz > 100_000) {
      add(`${at}.lowHz`, lowHz, `must be a number of Hz in ${MIN_BROADBAND_LOW_HZ}–100000`);
      return null;
    }
    if (!isNum(highHz) || highHz <= lowHz || highHz > 100_000) {
      add(`${at}.highHz`, highHz, `must be a number of Hz above lowHz (${lowHz}), at most 100000`);
      return null;
    }
    return { kind: 'broadband', lowHz, highHz };
  }
  if (o.kind === 'tonal') {
    closed(o, at, ['kind', 'frequencyHz'], add);
    if (!isNum(o.frequencyHz) || o.frequencyHz <= 0 || o.frequencyHz > 100_000) {
      add(`${at}.frequencyHz`, o.frequencyHz, 'must be a number of Hz in (0, 100000]');
      return null;
    }
    return { kind: 'tonal', frequencyHz: o.frequencyHz };
  }
  add(`${at}.kind`, o.kind, 'must be "broadband" or "tonal"');
  return null;
}

function validatePath(v: unknown, at: string, add: Add): ScenePath | null {
  if (typeof v !== 'object' || v === null || Array.isArray(v)) {
    add(at, v, 'must be { "pointsM": [[x, y, z], …], "speedMps", "loop" }');
    return null;
  }
  const o = v as Record<string, unknown>;
  closed(o, at, PATH_FIELDS, add);
  let ok = true;
  const pts: [number, number, number][] = [];
  if (!Array.isArray(o.pointsM) || o.pointsM.length < 2 || o.pointsM.length > MAX_PATH_POINTS) {
    add(`${at}.pointsM`, Array.isArray(o.pointsM) ? `${o.pointsM.length} entries` : o.pointsM, `must be a list of 2–${MAX_PATH_POINTS} [x, y, z] points`);
    ok = false;
  } else {
    o.pointsM.forEach((p, i) => {
      const q = point(p, `${at}.pointsM[${i}]`, add);
      if (q === null) ok = false;
      else pts.push(q);
    });
    if (ok) {
      for (let i = 1; i < pts.length; i++) {
        if (Math.hypot(pts[i][0] - pts[i - 1][0], pts[i][1] - pts[i - 1][1], pts[i][2] - pts[i - 1][2]) < 0.01) {
          add(`${at}.pointsM[${i}]`, o.pointsM[i], `is within 1 cm of pointsM[${i - 1}]: a path's consecutive points must differ`);
          ok = false;
        }
      }
    }
  }
  if (!isNum(o.speedMps) || o.speedMps <= 0 || o.speedMps > MAX_SOURCE_SPEED_MPS) {
    add(`${at}.speedMps`, o.speedMps, `must be a number of m/s in (0, ${MAX_SOURCE_SPEED_MPS}]`);
    ok = false;
  }
  if (typeof o.loop !== 'boolean') {
    add(`${at}.loop`, o.loop, 'must be true (round the closed path) or false (there and back)');
    ok = false;
  }
  return ok ? { pointsM: pts, speedMps: o.speedMps as number, loop: o.loop as boolean } : null;
}

/**
 * Read and validate a scene file.
 * @param field the configuration field that named it (for the message when it cannot be read)
 * @throws ConfigError
 */
export async function loadScene(path: string, field = 'simulator.scene'): Promise<SiteScene> {
  let text: string;
  try {
    text = await readFile(path, 'utf8');
  } catch (e) {
    throw new ConfigError([{ path: field, value: path, message: `${field} = ${JSON.stringify(path)}: cannot read (${(e as NodeJS.ErrnoException).code ?? String(e)})` }]);
  }
  let json: unknown;
  try {
    json = JSON.parse(text);
  } catch (e) {
    throw new ConfigError([{ path: field, value: path, message: `${path}: not valid JSON (${(e as Error).message})` }]);
  }
  return validateScene(json, path);
}
