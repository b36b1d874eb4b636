/**
 * Text of an internal error fit for REST answers and status, which anyone who can reach the port
 * may read: the first line only (no stack), absolute file paths cut to their last part (no
 * folder layout of the machine), at most 300 characters. The full error stays in the server log.
 */
import { basename } from 'node:path';
import { fsErrorText } from './io/disk-space.ts';

/** Absolute paths quoted the way Node's fs errors quote them: open '/a/b/c.json'. */
const QUOTED_PATH = /(['"`])(\/[^'"`\n]*)\1/g;
/** Unquoted absolute paths of three parts or more (/root/x/y.ts, file:///…); URL paths of the API are not passed here. */
const BARE_PATH = /(file:\/\/)?(\/[\w.@+~-]+){3,}\/?/g;

export function publicText(e: unknown): string {
  // A system call's error (errno, syscall): told as the file-system errors of the outputs are.
  if (typeof (e as NodeJS.ErrnoException | null)?.errno === 'number' && typeof (e as NodeJS.ErrnoException).syscall === 'string') return fsErrorText(e);
  const raw = e instanceof Error ? `${e.name && e.name !== 'Error' ? `${e.name}: ` : ''}${e.message}` : String(e);
  const first = raw.split('\n')[0];
  const cut = first.replace(QUOTED_PATH, (_m, q: string, p: string) => `${q}${basename(p)}${q}`).replace(BARE_PATH, (p) => basename(p.replace(/^file:\/\//, '')));
  return cut.length > 300 ? `${cut.slice(0, 297)}...` : cut;
}
