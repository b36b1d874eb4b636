/**
 * The site plan (`--plan plan.json`): what the site page draws under the arrays.
 * `{ "name": "yard", "widthM": 120, "heightM": 80, "originM": [x, y], "image": { "file": "yard.png", "metresPerPixel": 0.1 } }`
 * - `widthM` × `heightM`: the plan's extent, metres; `originM`: the site coordinates of the plan's
 *   lower-left corner (so the plan covers x in [originM[0], originM[0] + widthM], y likewise);
 * - `image` (optional): a PNG, JPEG or SVG in the plan file's own folder (no sub-paths, no `..`),
 *   drawn with its lower-left corner at `originM`, `metresPerPixel` its scale.
 * The object is closed: an unknown field is an error naming it.
 */
import { readFileSync, realpathSync, statSync } from 'node:fs';
import { basename, dirname, extname, join } from 'node:path';
import { MAX_SITE_COORD_M } from '../../shared/site.ts';

export interface SitePlan {
  name: string;
  widthM: number;
  heightM: number;
  originM: [number, number];
  image: { file: string; metresPerPixel: number } | null;
}

/** The plan the page gets when none is given: 100 m × 100 m around the origin. */
export const DEFAULT_PLAN: SitePlan = { name: 'site', widthM: 100, heightM: 100, originM: [-50, -50], image: null };

export const PLAN_IMAGE_TYPES: Record<string, string> = { '.png': 'image/png', '.jpg': 'image/jpeg', '.jpeg': 'image/jpeg', '.svg': 'image/svg+xml' };
const MAX_PLAN_BYTES = 64 * 1024;
/** Largest plan image served, bytes. */
export const MAX_PLAN_IMAGE_BYTES = 20 * 1024 * 1024;

export class PlanError extends Error {
  readonly code = 'ERR_SITE_PLAN';
}

function closed(path: string, v: unknown, fields: string[]): Record<string, unknown> {
  if (typeof v !== 'object' || v === null || Array.isArray(v)) throw new PlanError(`${path || 'plan'}: must be an object`);
  for (const k of Object.keys(v)) if (!fields.includes(k)) throw new PlanError(`${path ? `${path}.` : ''}${k}: is not a field of the plan (fields: ${fields.join(', ')})`);
  return v as Record<string, unknown>;
}

function num(path: string, v: unknown, min: number, max: number): number {
  if (typeof v !== 'number' || !Number.isFinite(v) || v < min || v > max) throw new PlanError(`${path}: must be a number in ${min}–${max}`);
  return v;
}

/** Check a parsed plan object. @throws PlanError */
export function validatePlan(v: unknown): SitePlan {
  const o = closed('', v, ['name', 'widthM', 'heightM', 'originM', 'image']);
  if (typeof o.name !== 'string' || o.name.length < 1 || o.name.length > 100) throw new PlanError('name: must be a string of 1–100 characters');
  const origin = o.originM;
  if (!Array.isArray(origin) || origin.length !== 2) throw new PlanError('originM: must be [x, y] in metres');
  const originM: [number, number] = [num('originM[0]', origin[0], -MAX_SITE_COORD_M, MAX_SITE_COORD_M), num('originM[1]', origin[1], -MAX_SITE_COORD_M, MAX_SITE_COORD_M)];
  let image: SitePlan['image'] = null;
  if (o.image !== undefined && o.image !== null) {
    const im = closed('image', o.image, ['file', 'metresPerPixel']);
    const file = im.file;
    if (typeof file !== 'string' || file !== basename(file) || file.startsWith('.') || !(extname(file).toLowerCase() in PLAN_IMAGE_TYPES)) {
      throw new PlanError('image.file: must be a .png, .jpg or .svg file name in the plan\'s own folder (no path)');
    }
    image = { file, metresPerPixel: num('image.metresPerPixel', im.metresPerPixel, 1e-4, 1000) };
  }
  return { name: o.name, widthM: num('widthM', o.widthM, 1, 2 * MAX_SITE_COORD_M), heightM: num('heightM', o.heightM, 1, 2 * MAX_SITE_COORD_M), originM, image };
}

/** Read and check a plan file; returns the plan and its folder (the only place its image is served from). @throws PlanError */
export function loadPlan(path: string): { plan: SitePlan; dir: string } {
  let text: string;
  try {
    if (statSync(path).size > MAX_PLAN_BYTES) throw new PlanError(`${path}: larger than ${MAX_PLAN_BYTES} bytes`);
    text = readFileSync(path, 'utf8');
  } catch (e) {
    if (e instanceof PlanError) throw e;
    throw new PlanError(`${path}: cannot be read (${(e as Error).message})`);
  }
  let v: unknown;
  try {
    v = JSON.parse(text);
  } catch (e) {
    throw new PlanError(`${path}: not JSON (${(e as Error).message})`);
  }
  const plan = validatePlan(v);
  return { plan, dir: realpathSync(dirname(path)) };
}

/** The plan image's path, checked to be a regular file directly in `dir` (symlinks resolved); null otherwise. */
export function planImagePath(dir: string, plan: SitePlan): string | null {
  if (!plan.image) return null;
  try {
    const p = realpathSync(join(dir, plan.image.file));
    if (dirname(p) !== dir) return null;
    const st = statSync(p);
    return st.isFile() && st.size <= MAX_PLAN_IMAGE_BYTES ? p : null;
  } catch {
    return null;
  }
}
