/**
 * Changing an array file from the running server (a calibration from the array check, landmarks
 * edited in the dashboard) without losing what the operator wrote in it: the file is read again,
 * only the named top-level fields are replaced (a field set to `undefined` is removed), the result
 * is validated as a whole like a file loaded at start-up, and the file is replaced atomically
 * (temporary file, then rename). Fields this project does not know are kept as they were, and the
 * field order of the original is kept so a diff of the file shows only what changed.
 *
 * Updates to one file are serialised: two requests at once cannot interleave read and write and
 * lose one of the changes.
 */
import { readFile } from 'node:fs/promises';
import type { ArrayGeometry } from '../../shared/types.ts';
import { writeFileAtomic } from '../outputs/sidecar.ts';
import { validateGeometry } from './array-file.ts';
import { ConfigError } from './validate.ts';

/** Largest array file rewritten (the 1024-sensor files with calibration are well under 1 MiB). */
export const MAX_ARRAY_FILE_BYTES = 4 * 1024 * 1024;

const queues = new Map<string, Promise<unknown>>();

/**
 * Replace `fields` in the array file at `path` and return the validated geometry of the new file.
 * @throws ConfigError when the file cannot be read or parsed or the result does not validate (the
 *   file is then left untouched)
 */
export function updateArrayFile(path: string, fields: Record<string, unknown>): Promise<ArrayGeometry> {
  const before = queues.get(path) ?? Promise.resolve();
  const run = before.catch(() => {}).then(() => rewrite(path, fields));
  const tail = run.catch(() => {});
  queues.set(path, tail);
  void tail.then(() => {
    if (queues.get(path) === tail) queues.delete(path);
  });
  return run;
}

async function rewrite(path: string, fields: Record<string, unknown>): Promise<ArrayGeometry> {
  let text: string;
  try {
    text = await readFile(path, 'utf8');
  } catch (e) {
    throw new ConfigError([{ path: 'array.file', value: path, message: `${path}: cannot read (${(e as NodeJS.ErrnoException).code ?? String(e)})` }]);
  }
  if (text.length > MAX_ARRAY_FILE_BYTES) throw new ConfigError([{ path: 'array.file', value: path, message: `${path}: larger than ${MAX_ARRAY_FILE_BYTES} bytes, not rewritten` }]);
  let json: unknown;
  try {
    json = JSON.parse(text);
  } catch (e) {
    throw new ConfigError([{ path: 'array.file', value: path, message: `${path}: not valid JSON (${(e as Error).message})` }]);
  }
  if (typeof json !== 'object' || json === null || Array.isArray(json)) throw new ConfigError([{ path: '', value: path, message: `${path}: not a JSON object` }]);
  const next: Record<string, unknown> = { ...(json as Record<string, unknown>) };
  for (const [k, v] of Object.entries(fields)) {
    if (v === undefined) delete next[k];
    else next[k] = v;
  }
  const geometry = validateGeometry(next, path);
  await writeFileAtomic(path, formatArrayFile(next));
  return geometry;
}

/**
 * JSON with two-space indentation, except that short lists of numbers (a position, a row of gains)
 * stay on one line, as people write array files by hand.
 */
export function formatArrayFile(value: unknown): string {
  const text = JSON.stringify(value, null, 2);
  return `${text.replace(/\[\s*(-?[\d.eE+-]+(?:,\s*-?[\d.eE+-]+)*)\s*\]/g, (_m, inner: string) => `[${inner.split(/,\s*/).join(', ')}]`)}\n`;
}
