/**
 * Free space on the disks the server writes to (recordings, presets), and file-system errors told
 * without paths: answers and status may be read by anyone who can reach the port, so they name a
 * folder the way the configuration wrote it (or by its last name) and never the absolute path.
 */
import { statfsSync } from 'node:fs';
import { statfs } from 'node:fs/promises';
import { basename, isAbsolute } from 'node:path';

/** Bytes an unprivileged process may still write in the file system holding `dir` (bavail × bsize). */
export async function freeBytes(dir: string): Promise<number> {
  const s = await statfs(dir);
  return s.bavail * s.bsize;
}

/** {@link freeBytes}, synchronously (for the small synchronous writers: presets). */
export function freeBytesSync(dir: string): number {
  const s = statfsSync(dir);
  return s.bavail * s.bsize;
}

/** How answers name a configured folder: a relative path as written, an absolute one by its last name. */
export function folderLabel(configured: string): string {
  return isAbsolute(configured) ? basename(configured) || '/' : configured;
}

/** The error codes of a write that failed for want of space (disk full, quota exceeded). */
const NO_SPACE = new Set(['ENOSPC', 'EDQUOT']);

export function isNoSpace(e: unknown): boolean {
  return NO_SPACE.has((e as NodeJS.ErrnoException | null)?.code ?? '');
}

/**
 * A file-system error without the paths Node puts into its messages: "no space left on device
 * (ENOSPC)". Errors that are not from the file system keep their message.
 */
export function fsErrorText(e: unknown): string {
  const err = e as NodeJS.ErrnoException | null;
  const code = typeof err?.code === 'string' ? err.code : null;
  const message = typeof err?.message === 'string' ? err.message : String(e);
  if (code !== null) {
    // Node's form: "ENOSPC: no space left on device, write" or "EACCES: permission denied, open '/x/y'".
    const m = /^[A-Z0-9_]+: ([^,]+)/.exec(message);
    return m ? `${m[1]} (${code})` : code;
  }
  return message;
}

/** "the recordings folder "rec" has 4096 bytes free, below the reserve of 1048576 bytes" */
export function reserveText(what: string, label: string, free: number, reserve: number): string {
  return `the ${what} folder ${JSON.stringify(label)} has ${free} bytes free, below the reserve of ${reserve} bytes`;
}
