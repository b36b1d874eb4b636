/**
 * The fallback of ./full-disk.ts for machines where a test may not mount a tmpfs: a folder made to
 * behave like a small full file system by wrapping node:fs and node:fs/promises. A test file that
 * uses smallDisk() installs the wrappers with
 *
 *   vi.mock('node:fs', async (real) => (await import('../helpers/full-disk-state.ts')).wrapFs(await real()));
 *   vi.mock('node:fs/promises', async (real) => (await import('../helpers/full-disk-state.ts')).wrapFsPromises(await real()));
 *
 * They pass every call through unchanged unless the emulation is on (no tmpfs) and the path lies
 * under its folder. Then statfs reports `freeBytes`, and while that is 0 the disk is full the way
 * Linux reports it: a write that would grow a file writes what fits in the file's current size and
 * fails with ENOSPC; writeFile creates its file and then fails; appendFile fails. Overwriting bytes
 * a file already has still works (a header rewritten in place), and so do truncate and unlink.
 *
 * This module imports nothing from node:fs itself (the wrapped module is handed in), so the mock
 * factories can load it without waiting on themselves.
 */
import { resolve, sep } from 'node:path';

export const emulation = {
  /** The emulated disk's folder (absolute), or null when off. */
  root: null as string | null,
  /** What statfs reports as available under root; null: the real figure. 0 means full. */
  freeBytes: null as number | null,
  /** File descriptors opened under root (for writeSync). */
  fds: new Set<number>(),
};

function under(p: unknown): boolean {
  const root = emulation.root;
  if (root === null || (typeof p !== 'string' && !(p instanceof URL) && !Buffer.isBuffer(p))) return false;
  const abs = resolve(p instanceof URL ? p.pathname : String(p));
  return abs === root || abs.startsWith(root + sep);
}

const full = () => emulation.freeBytes === 0;

export function enospc(syscall: string): NodeJS.ErrnoException {
  return Object.assign(new Error(`ENOSPC: no space left on device, ${syscall}`), { code: 'ENOSPC', errno: -28, syscall });
}

type FsModule = typeof import('node:fs');
type FsPromisesModule = typeof import('node:fs/promises');

function emulatedStatfs<T extends { bsize: number; bavail: number; bfree: number }>(s: T): T {
  const free = emulation.freeBytes!;
  const blocks = Math.floor(free / s.bsize);
  return { ...s, bavail: blocks, bfree: blocks };
}

export function wrapFs(real: FsModule): FsModule {
  const m: FsModule = {
    ...real,
    writeSync: ((fd: number, buf: NodeJS.ArrayBufferView, offset?: number, length?: number, position?: number) => {
      if (emulation.fds.has(fd) && full() && typeof position === 'number' && typeof length === 'number') {
        const size = real.fstatSync(fd).size;
        if (position + length > size) {
          const fit = Math.max(0, size - position);
          if (fit > 0) return real.writeSync(fd, buf, offset, fit, position);
          throw enospc('write');
        }
      }
      return (real.writeSync as (...a: unknown[]) => number)(fd, buf, offset, length, position);
    }) as FsModule['writeSync'],
    writeFileSync: ((file: unknown, data: unknown, options?: unknown) => {
      if (under(file) && full()) {
        real.writeFileSync(file as string, '');
        throw enospc('write');
      }
      return (real.writeFileSync as (...a: unknown[]) => void)(file, data, options);
    }) as FsModule['writeFileSync'],
    appendFileSync: ((file: unknown, data: unknown, options?: unknown) => {
      if (under(file) && full()) throw enospc('write');
      return (real.appendFileSync as (...a: unknown[]) => void)(file, data, options);
    }) as FsModule['appendFileSync'],
    statfsSync: ((path: unknown, options?: unknown) => {
      const s = (real.statfsSync as (...a: unknown[]) => ReturnType<FsModule['statfsSync']>)(path, options);
      return under(path) && emulation.freeBytes !== null ? emulatedStatfs(s as { bsize: number; bavail: number; bfree: number }) : s;
    }) as FsModule['statfsSync'],
  };
  return { ...m, default: m } as FsModule;
}

export function wrapFsPromises(real: FsPromisesModule): FsPromisesModule {
  const open = (async (path: unknown, flags?: unknown, mode?: unknown) => {
    const h = await (real.open as (...a: unknown[]) => ReturnType<FsPromisesModule['open']>)(path, flags, mode);
    if (!under(path)) return h;
    const fd = h.fd;
    emulation.fds.add(fd);
    return new Proxy(h, {
      get(target, key) {
        if (key === 'write') {
          return async (buf: Uint8Array, offset: number, length: number, position: number) => {
            if (full() && typeof position === 'number') {
              const size = (await target.stat()).size;
              if (position + length > size) {
                const fit = Math.max(0, size - position);
                if (fit > 0) return target.write(buf, offset, fit, position);
                throw enospc('write');
              }
            }
            return target.write(buf, offset, length, position);
          };
        }
        if (key === 'close') {
          return async () => {
            emulation.fds.delete(fd);
            return target.close();
          };
        }
        const v = Reflect.get(target, key, target);
        return typeof v === 'function' ? v.bind(target) : v;
      },
    });
  }) as FsPromisesModule['open'];
  const m: FsPromisesModule = {
    ...real,
    open,
    writeFile: (async (file: unknown, data: unknown, options?: unknown) => {
      if (under(file) && full()) {
        await real.writeFile(file as string, '');
        throw enospc('write');
      }
      return (real.writeFile as (...a: unknown[]) => Promise<void>)(file, data, options);
    }) as FsPromisesModule['writeFile'],
    appendFile: (async (file: unknown, data: unknown, options?: unknown) => {
      if (under(file) && full()) throw enospc('write');
      return (real.appendFile as (...a: unknown[]) => Promise<void>)(file, data, options);
    }) as FsPromisesModule['appendFile'],
    statfs: (async (path: unknown, options?: unknown) => {
      const s = await (real.statfs as (...a: unknown[]) => ReturnType<FsPromisesModule['statfs']>)(path, options);
      return under(path) && emulation.freeBytes !== null ? emulatedStatfs(s as { bsize: number; bavail: number; bfree: number }) : s;
    }) as FsPromisesModule['statfs'],
  };
  return { ...m, default: m } as FsPromisesModule;
}
