/**
 * Array geometry files: `{ "name": …, "positions": [[x, y, z], …] }` in metres, optionally
 * `"calibration": { "gainDb": […], "delayUs": […], "sensitivityMvPerPa": …, "fullScaleVolts": …, "polarity": […], "channelOrder": […] }`
 * (the lists one entry per position, each part optional),
 * `"landmarks": [{ "name": "gate", "azimuthDeg": 35 }]` (shared/landmarks.ts),
 * `"pose": { "positionM": [x, y, z], "headingDeg": h }` (its place on a site plan, shared/site.ts),
 * `"sectors": [{ "name": "gate", "azimuthDeg": [20, 50], "method": "mvdr", "weighting": "A" }]` (shared/sectors.ts); more fields allowed
 * and ignored. Validated on load with errors naming the file and the field.
 */
import { readFile } from 'node:fs/promises';
import type { ArrayGeometry, ChannelCalibration, InputMapping } from '../../shared/types.ts';
import { ConfigError, type ConfigIssue } from './validate.ts';
import { validateLandmarks } from '../../shared/landmarks.ts';
import { SiteMessageError, validatePose, type Pose } from '../../shared/site.ts';
import { validateSectors } from '../../shared/sectors.ts';

export const MAX_SENSORS = 1024;
/** Coordinates beyond this are almost certainly millimetres or a typo, not metres. */
export const MAX_COORD_M = 100;
/** Two sensors closer than this are the same sensor listed twice. */
export const MIN_SPACING_M = 0.001;

/** Check a parsed geometry object; `where` prefixes every message (e.g. the file name). */
export function validateGeometry(value: unknown, where: string): ArrayGeometry {
  const issues: ConfigIssue[] = [];
  const add = (path: string, v: unknown, msg: string) => issues.push({ path, value: v, message: `${where}: ${path} ${msg}` });
  if (typeof value !== 'object' || value === null || Array.isArray(value)) {
    throw new ConfigError([{ path: '', value, message: `${where}: not a JSON object` }]);
  }
  const o = value as Record<string, unknown>;
  const name = o.name === undefined ? '' : o.name;
  if (typeof name !== 'string' || name.length > 200) add('name', name, 'must be a string of at most 200 characters');
  if (o.description !== undefined && typeof o.description !== 'string') add('description', o.description, 'must be a string');
  const pos = o.positions;
  if (!Array.isArray(pos) || pos.length < 1 || pos.length > MAX_SENSORS) {
    add('positions', Array.isArray(pos) ? `${pos.length} entries` : pos, `must be a list of 1–${MAX_SENSORS} [x, y, z] triples in metres`);
    throw new ConfigError(issues);
  }
  const out: [number, number, number][] = [];
  pos.forEach((p, m) => {
    if (!Array.isArray(p) || p.length !== 3 || !p.every((x) => typeof x === 'number' && Number.isFinite(x))) {
      add(`positions[${m}]`, p, 'must be [x, y, z], three finite numbers in metres');
      return;
    }
    if (p.some((x) => Math.abs(x) > MAX_COORD_M)) add(`positions[${m}]`, p, `has a coordinate beyond ±${MAX_COORD_M} m (positions are metres)`);
    out.push([p[0], p[1], p[2]]);
  });
  if (issues.length === 0) {
    for (let a = 0; a < out.length; a++) {
      for (let b = a + 1; b < out.length; b++) {
        const d = Math.hypot(out[a][0] - out[b][0], out[a][1] - out[b][1], out[a][2] - out[b][2]);
        if (d < MIN_SPACING_M) add(`positions[${b}]`, pos[b], `is within ${MIN_SPACING_M * 1000} mm of positions[${a}]: the same sensor twice?`);
      }
    }
  }
  const calibration = o.calibration === undefined ? undefined : validateCalibration(o.calibration, pos.length, add);
  const inputs = o.inputs === undefined ? undefined : validateInputs(o.inputs, pos.length, add);
  const landmarks = o.landmarks === undefined ? undefined : validateLandmarks(o.landmarks, 'landmarks', add);
  const sectors = o.sectors === undefined ? undefined : validateSectors(o.sectors, 'sectors', add);
  let pose: Pose | undefined;
  if (o.pose !== undefined) {
    try {
      pose = validatePose('pose', o.pose);
    } catch (e) {
      if (!(e instanceof SiteMessageError)) throw e;
      add(e.path, o.pose, e.message.slice(e.path.length + 2));
    }
  }
  if (issues.length > 0) throw new ConfigError(issues);
  const g: ArrayGeometry = { name: typeof name === 'string' && name ? name : where, description: o.description as string | undefined, positions: out };
  if (calibration) g.calibration = calibration;
  if (inputs) g.inputs = inputs;
  if (landmarks) g.landmarks = landmarks;
  if (pose) g.pose = pose;
  if (sectors) g.sectors = sectors;
  return g;
}

/** Most inputs (members) one array may have. */
export const MAX_INPUTS = 64;
/** `stream:ID` (own-format frames), `capture`, or an RTP session name. */
export const INPUT_SOURCE = /^(stream:(0|[1-9]\d{0,9})|[A-Za-z0-9._-]{1,64})$/;

/** The `inputs` list: each position fed by exactly one member, channels and positions whole numbers. */
function validateInputs(value: unknown, m: number, add: (path: string, v: unknown, msg: string) => void): InputMapping[] | undefined {
  if (!Array.isArray(value) || value.length < 1 || value.length > MAX_INPUTS) {
    add('inputs', Array.isArray(value) ? `${value.length} entries` : value, `must be a list of 1–${MAX_INPUTS} { "source", "channels", "positions" } objects`);
    return undefined;
  }
  const FIELDS = ['source', 'channels', 'positions', 'referenceChannel', 'offsetUs'];
  const fedBy: (number | undefined)[] = Array(m).fill(undefined);
  const sources = new Set<string>();
  const out: InputMapping[] = [];
  value.forEach((e, i) => {
    const at = `inputs[${i}]`;
    if (typeof e !== 'object' || e === null || Array.isArray(e)) {
      add(at, e, 'must be an object { "source", "channels", "positions" }');
      return;
    }
    const r = e as Record<string, unknown>;
    for (const k of Object.keys(r)) if (!FIELDS.includes(k)) add(`${at}.${k}`, r[k], `is not an inputs field (${FIELDS.join(', ')})`);
    const source = r.source;
    if (typeof source !== 'string' || !INPUT_SOURCE.test(source) || (source.startsWith('stream:') && Number(source.slice(7)) > 0xffffffff)) {
      add(`${at}.source`, source, 'must be an RTP session name (letters, digits, . _ -), "capture", or "stream:ID" (ID 0–4294967295)');
      return;
    }
    if (sources.has(source)) add(`${at}.source`, source, 'appears twice: list all of a source\'s channels in one entry');
    sources.add(source);
    const ints = (key: 'channels' | 'positions', max: number): number[] | null => {
      const v = r[key];
      if (!Array.isArray(v) || v.length < 1 || v.length > MAX_SENSORS || !v.every((x) => Number.isInteger(x) && x >= 0 && x < max)) {
        add(`${at}.${key}`, v, `must be a list of 1–${MAX_SENSORS} whole numbers in 0–${max - 1}`);
        return null;
      }
      if (new Set(v).size !== v.length) {
        add(`${at}.${key}`, v, 'lists a number twice');
        return null;
      }
      return v as number[];
    };
    const channels = ints('channels', 65535);
    const positions = ints('positions', m);
    if (!channels || !positions) return;
    if (channels.length !== positions.length) {
      add(`${at}.positions`, `${positions.length} entries`, `must pair with channels one to one (${channels.length} channels)`);
      return;
    }
    for (const p of positions) {
      if (fedBy[p] !== undefined) add(`${at}.positions`, p, `position ${p} is already fed by inputs[${fedBy[p]}]`);
      else fedBy[p] = i;
    }
    const entry: InputMapping = { source, channels, positions };
    if (r.referenceChannel !== undefined) {
      if (!Number.isInteger(r.referenceChannel) || (r.referenceChannel as number) < 0 || (r.referenceChannel as number) > 65534) add(`${at}.referenceChannel`, r.referenceChannel, 'must be a channel number of the source\'s stream, 0–65534');
      else entry.referenceChannel = r.referenceChannel as number;
    }
    if (r.offsetUs !== undefined) {
      if (typeof r.offsetUs !== 'number' || !Number.isFinite(r.offsetUs) || Math.abs(r.offsetUs) > MAX_CALIBRATION_DELAY_US) add(`${at}.offsetUs`, r.offsetUs, `must be a number within ±${MAX_CALIBRATION_DELAY_US} µs`);
      else entry.offsetUs = r.offsetUs;
    }
    out.push(entry);
  });
  const unfed = fedBy.flatMap((f, p) => (f === undefined ? [p] : []));
  if (unfed.length > 0 && out.length === value.length) add('inputs', `${unfed.length} unfed`, `must feed every position; no input feeds ${unfed.slice(0, 8).join(', ')}${unfed.length > 8 ? ', …' : ''}`);
  const refs = out.filter((e) => e.referenceChannel !== undefined).length;
  if (refs > 0 && refs < out.length) add('inputs', `${refs} of ${out.length}`, 'referenceChannel must be given for every input or for none');
  return out;
}

/** Largest calibration gain accepted, ±dB: beyond it the channel is faulty, not mismatched. */
export const MAX_CALIBRATION_GAIN_DB = 40;
/**
 * Largest calibration delay accepted, ±µs. The correction is a phase ramp on each STFT frame, exact
 * only for delays much shorter than the frame (N/fs ≥ 5.3 ms at 48 kHz); 1 ms covers cables and
 * converters.
 */
export const MAX_CALIBRATION_DELAY_US = 1000;

export function validateCalibration(value: unknown, m: number, add: (path: string, v: unknown, msg: string) => void): ChannelCalibration | undefined {
  if (typeof value !== 'object' || value === null || Array.isArray(value)) {
    add('calibration', value, 'must be an object { "gainDb": [...], "delayUs": [...] }');
    return undefined;
  }
  const c = value as Record<string, unknown>;
  const FIELDS = ['gainDb', 'delayUs', 'sensitivityMvPerPa', 'fullScaleVolts', 'polarity', 'channelOrder'];
  for (const k of Object.keys(c)) if (!FIELDS.includes(k)) add(`calibration.${k}`, c[k], `is not a calibration field (${FIELDS.join(', ')})`);
  const list = (key: 'gainDb' | 'delayUs', limit: number, unit: string): number[] => {
    const v = c[key];
    if (v === undefined) return Array(m).fill(0);
    if (!Array.isArray(v) || v.length !== m) {
      add(`calibration.${key}`, Array.isArray(v) ? `${v.length} entries` : v, `must list one number (${unit}) per position, ${m} in all`);
      return [];
    }
    v.forEach((x, i) => {
      if (typeof x !== 'number' || !Number.isFinite(x) || Math.abs(x) > limit) add(`calibration.${key}[${i}]`, x, `must be a number within ±${limit} ${unit}`);
    });
    return v as number[];
  };
  const out: ChannelCalibration = { gainDb: list('gainDb', MAX_CALIBRATION_GAIN_DB, 'dB'), delayUs: list('delayUs', MAX_CALIBRATION_DELAY_US, 'µs') };
  const sens = c.sensitivityMvPerPa;
  const vfs = c.fullScaleVolts;
  if ((sens === undefined) !== (vfs === undefined)) {
    add(sens === undefined ? 'calibration.sensitivityMvPerPa' : 'calibration.fullScaleVolts', undefined, 'is needed too: give sensitivityMvPerPa and fullScaleVolts together (or neither)');
  } else if (sens !== undefined) {
    if (typeof sens !== 'number' || !Number.isFinite(sens) || sens < 0.01 || sens > 10000) add('calibration.sensitivityMvPerPa', sens, 'must be a number of mV/Pa in 0.01–10000');
    else out.sensitivityMvPerPa = sens;
    if (typeof vfs !== 'number' || !Number.isFinite(vfs) || vfs < 0.001 || vfs > 1000) add('calibration.fullScaleVolts', vfs, 'must be a number of volts (peak at digital full scale) in 0.001–1000');
    else out.fullScaleVolts = vfs;
  }
  // The array check's additions: inverted channels and swapped cables (undone before gain and delay).
  if (c.polarity !== undefined) {
    if (!Array.isArray(c.polarity) || c.polarity.length !== m || !c.polarity.every((s) => s === 1 || s === -1)) add('calibration.polarity', Array.isArray(c.polarity) ? `${c.polarity.length} entries` : c.polarity, `must list 1 or -1 per position (-1: inverted), ${m} in all`);
    else out.polarity = c.polarity as number[];
  }
  if (c.channelOrder !== undefined) {
    const o = c.channelOrder;
    if (!Array.isArray(o) || o.length !== m || !o.every((q) => Number.isInteger(q) && q >= 0 && q < m) || new Set(o).size !== m) add('calibration.channelOrder', Array.isArray(o) ? `[${o.slice(0, 8).join(', ')}${o.length > 8 ? ', …' : ''}]` : o, `must list, per position, the input channel it reads: each of 0–${m - 1} exactly once`);
    else out.channelOrder = o as number[];
  }
  return out;
}

/** Read and validate a geometry file. */
export async function loadGeometry(path: string): Promise<ArrayGeometry> {
  let text: string;
  try {
    text = await readFile(path, 'utf8');
  } catch (e) {
    throw new ConfigError([{ path: 'array.file', value: path, message: `array.file = ${JSON.stringify(path)}: cannot read (${(e as NodeJS.ErrnoException).code ?? String(e)})` }]);
  }
  let json: unknown;
  try {
    json = JSON.parse(text);
  } catch (e) {
    throw new ConfigError([{ path: 'array.file', value: path, message: `${path}: not valid JSON (${(e as Error).message})` }]);
  }
  return validateGeometry(json, path);
}
