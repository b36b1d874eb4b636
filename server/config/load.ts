/**
 * Configuration loading: config/default.json < user file (--config or NULLSTEER_CONFIG) <
 * environment variables < command-line flags. Later layers win field by field. The merged result is
 * validated as a whole, so one start-up lists every problem.
 */
import { existsSync, readFileSync } from 'node:fs';
import { dirname, isAbsolute, join, normalize, resolve, sep } from 'node:path';
import { fileURLToPath } from 'node:url';
import type { ArrayGeometry } from '../../shared/types.ts';
import { loadGeometry } from './array-file.ts';
import { CONFIG_SCHEMA, schemaLeaves, type Config, type FieldSpec } from './schema.ts';
import { ConfigError, validateConfig } from './validate.ts';

export const PROJECT_CONFIG_DIR = resolve(dirname(fileURLToPath(import.meta.url)), '../../config');

/** Environment variables and the field each sets. */
export const ENV_FIELDS: Record<string, string> = {
  NULLSTEER_HOST: 'server.host',
  NULLSTEER_HTTP_PORT: 'server.httpPort',
  NULLSTEER_TOKEN: 'server.token',
  NULLSTEER_SOURCE: 'source.kind',
  NULLSTEER_ARRAY: 'array.file',
  NULLSTEER_UDP_PORT: 'ingest.udp.port',
  NULLSTEER_NATS_TOKEN: 'cluster.token',
};

/** Command-line flags of `serve` that set one field each (besides --config and --set). */
export const FLAG_FIELDS: Record<string, string> = {
  host: 'server.host',
  'http-port': 'server.httpPort',
  'udp-port': 'ingest.udp.port',
  source: 'source.kind',
  array: 'array.file',
  token: 'server.token',
  nats: 'cluster.natsUrl',
  site: 'cluster.site',
  node: 'cluster.node',
};

export interface LoadOptions {
  /** Path of a user config file (JSON), layered over the defaults. */
  configFile?: string;
  env?: Record<string, string | undefined>;
  /** Field overrides as strings, dotted path → text, applied last (flags). */
  overrides?: [string, string][];
  /** Objects layered after the files and before env/flags (tests, embedding). */
  layers?: unknown[];
  cwd?: string;
}

export interface LoadedConfig {
  config: Config;
  geometry: ArrayGeometry;
  /** Absolute path of the geometry file in use. */
  arrayPath: string;
}

const LEAVES = new Map(schemaLeaves().map((l) => [l.path, l.spec]));

/** Parse a command-line or environment string for the field at `path`, by its schema type. */
export function parseFieldText(path: string, text: string): unknown {
  const spec = LEAVES.get(path);
  if (!spec) {
    throw new ConfigError([{ path, value: text, message: `${path}: unknown field; known fields: ${[...LEAVES.keys()].join(', ')}` }]);
  }
  if (text === 'null' && 'nullable' in spec && spec.nullable) return null;
  switch (spec.kind) {
    case 'int':
    case 'number': {
      const v = text.trim() === '' ? NaN : Number(text);
      return Number.isNaN(v) ? text : v;
    }
    case 'bool':
      return text === 'true' ? true : text === 'false' ? false : text;
    case 'enumList':
    case 'stringList':
      // A JSON list where items may hold commas (an argv list): --set capture.command='["arecord","-c","16"]'.
      if (text.trimStart().startsWith('[')) {
        try {
          return JSON.parse(text) as unknown;
        } catch {
          return text;
        }
      }
      return text.split(',').map((s) => s.trim()).filter((s) => s.length > 0);
    case 'recordList':
      try {
        return JSON.parse(text) as unknown;
      } catch {
        return text;
      }
    default:
      return text;
  }
}

function isPlainObject(v: unknown): v is Record<string, unknown> {
  return typeof v === 'object' && v !== null && !Array.isArray(v);
}

/** Deep merge of plain objects; arrays and scalars from `over` replace those in `base`. */
export function mergeLayers(base: unknown, over: unknown): unknown {
  if (!isPlainObject(base) || !isPlainObject(over)) return over === undefined ? base : over;
  const out: Record<string, unknown> = { ...base };
  for (const [k, v] of Object.entries(over)) out[k] = mergeLayers(base[k], v);
  return out;
}

function setPath(obj: Record<string, unknown>, path: string, value: unknown): void {
  const keys = path.split('.');
  let o = obj;
  for (const k of keys.slice(0, -1)) {
    if (!isPlainObject(o[k])) o[k] = {};
    o = o[k] as Record<string, unknown>;
  }
  o[keys[keys.length - 1]] = value;
}

function readJsonFile(path: string, what: string): unknown {
  let text: string;
  try {
    text = readFileSync(path, 'utf8');
  } catch (e) {
    throw new ConfigError([{ path: what, value: path, message: `${what} = ${JSON.stringify(path)}: cannot read (${(e as NodeJS.ErrnoException).code ?? String(e)})` }]);
  }
  try {
    return JSON.parse(text);
  } catch (e) {
    throw new ConfigError([{ path: what, value: path, message: `${path}: not valid JSON (${(e as Error).message})` }]);
  }
}

/**
 * The places a geometry path is looked for, in order: an absolute path as is; a relative one against
 * cwd, then against the project's config/ directory, or the project root when it starts with config/
 * (so `config/arrays/x.json` names the shipped file from any directory, never config/config/…).
 */
export function arrayPathCandidates(file: string, cwd: string): string[] {
  if (isAbsolute(file)) return [file];
  const rel = normalize(file);
  const fromProject = rel.startsWith(`config${sep}`) ? resolve(PROJECT_CONFIG_DIR, '..', rel) : resolve(PROJECT_CONFIG_DIR, rel);
  const tried = [resolve(cwd, file), fromProject];
  return tried.filter((p, i) => tried.indexOf(p) === i);
}

/**
 * Resolve a geometry path to the first candidate that exists ({@link arrayPathCandidates}).
 * @throws ConfigError on array.file naming every path tried when none exists
 */
export function resolveArrayPath(file: string, cwd: string): string {
  const tried = arrayPathCandidates(file, cwd);
  const found = tried.find((p) => existsSync(p));
  if (found !== undefined) return found;
  const where = tried.length === 1 ? tried[0] : `tried ${tried.join(', ')}`;
  throw new ConfigError([{ path: 'array.file', value: file, message: `array.file = ${JSON.stringify(file)}: no such file (${where})` }]);
}

/** Resolve (see {@link resolveArrayPath}) and read a geometry file. @throws ConfigError */
export async function loadArrayFile(file: string, cwd: string = process.cwd()): Promise<{ geometry: ArrayGeometry; arrayPath: string }> {
  const arrayPath = resolveArrayPath(file, cwd);
  return { geometry: await loadGeometry(arrayPath), arrayPath };
}

/** Build and validate the configuration from all layers, then load the array geometry. */
export async function loadConfig(opts: LoadOptions = {}): Promise<LoadedConfig> {
  const env = opts.env ?? {};
  const cwd = opts.cwd ?? process.cwd();
  let merged = readJsonFile(join(PROJECT_CONFIG_DIR, 'default.json'), 'config/default.json');
  const userFile = opts.configFile ?? env.NULLSTEER_CONFIG;
  if (userFile) merged = mergeLayers(merged, readJsonFile(resolve(cwd, userFile), '--config'));
  for (const layer of opts.layers ?? []) merged = mergeLayers(merged, layer);
  const tail: Record<string, unknown> = {};
  for (const [name, path] of Object.entries(ENV_FIELDS)) {
    const text = env[name];
    if (text !== undefined && text !== '') setPath(tail, path, parseFieldText(path, text));
  }
  for (const [path, text] of opts.overrides ?? []) setPath(tail, path, parseFieldText(path, text));
  merged = mergeLayers(merged, tail);
  const config = validateConfig(merged);
  const { geometry, arrayPath } = await loadArrayFile(config.array.file, cwd);
  return { config, geometry, arrayPath };
}

export { CONFIG_SCHEMA, ConfigError };
export type { Config, FieldSpec };
