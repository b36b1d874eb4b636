/**
 * A small file system that a test can fill: a tmpfs of `sizeBytes` mounted on a fresh temporary
 * folder (these machines run the tests as root, and `mount -t tmpfs` makes a real disk that
 * answers ENOSPC like any other). Where mounting is not permitted (a container without the
 * capability), or with NULLSTEER_TEST_EMULATE_FULL_DISK=1, the folder is an ordinary one made to
 * behave full by ./full-disk-state.ts, whose vi.mock lines the test file must carry.
 *
 * fill(leaveBytes) writes a ballast file until only that much is left (0: until ENOSPC);
 * release() removes it. close() unmounts and removes the folder.
 */
import { execFileSync } from 'node:child_process';
import { closeSync, mkdtempSync, openSync, readdirSync, rmSync, statfsSync, writeSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { emulation } from './full-disk-state.ts';

export interface SmallDisk {
  readonly dir: string;
  /** true: a real tmpfs; false: the emulation of ./full-disk-state.ts. */
  readonly mounted: boolean;
  /** Leave only about `leaveBytes` available (0: the disk is full). */
  fill(leaveBytes?: number): void;
  /** Give the ballast's space back. */
  release(): void;
  /** Bytes available now, as statfs reports them (bavail × bsize). */
  freeBytes(): number;
  close(): void;
}

export function smallDisk(sizeBytes: number): SmallDisk {
  const dir = mkdtempSync(join(tmpdir(), 'nullsteer-disk-'));
  let mounted = false;
  if (process.env.NULLSTEER_TEST_EMULATE_FULL_DISK !== '1') {
    try {
      execFileSync('mount', ['-t', 'tmpfs', '-o', `size=${sizeBytes},mode=0755`, 'tmpfs', dir], { stdio: 'ignore' });
      mounted = true;
    } catch {
      mounted = false;
    }
  }
  if (!mounted) {
    emulation.root = dir;
    emulation.freeBytes = null;
  }
  const ballast = join(dir, 'ballast');
  const freeBytes = () => {
    const s = statfsSync(dir);
    return s.bavail * s.bsize;
  };
  return {
    dir,
    mounted,
    fill(leaveBytes = 0) {
      if (!mounted) {
        emulation.freeBytes = leaveBytes;
        return;
      }
      const fd = openSync(ballast, 'a');
      const chunk = new Uint8Array(64 * 1024).fill(0x5a);
      try {
        for (let room = freeBytes() - leaveBytes; room > 0; room = freeBytes() - leaveBytes) {
          try {
            writeSync(fd, chunk, 0, Math.min(chunk.byteLength, room));
          } catch (e) {
            if ((e as NodeJS.ErrnoException).code === 'ENOSPC') break;
            throw e;
          }
        }
        if (leaveBytes === 0) {
          // Down to the last byte: statfs counts whole blocks, the file system may hold a few more.
          for (;;) {
            try {
              writeSync(fd, chunk, 0, 1);
            } catch (e) {
              if ((e as NodeJS.ErrnoException).code === 'ENOSPC') break;
              throw e;
            }
          }
        }
      } finally {
        closeSync(fd);
      }
    },
    release() {
      if (!mounted) emulation.freeBytes = null;
      else rmSync(ballast, { force: true });
    },
    freeBytes,
    close() {
      if (mounted) {
        try {
          execFileSync('umount', [dir], { stdio: 'ignore' });
        } catch {
          execFileSync('umount', ['-l', dir], { stdio: 'ignore' });
        }
      } else {
        emulation.root = null;
        emulation.freeBytes = null;
      }
      rmSync(dir, { recursive: true, force: true });
    },
  };
}

/** Every file under `dir` whose name ends in .tmp (sidecars, presets and exports write through one). */
export function tmpFilesUnder(dir: string): string[] {
  const out: string[] = [];
  const walk = (d: string) => {
    for (const e of readdirSync(d, { withFileTypes: true })) {
      const p = join(d, e.name);
      if (e.isDirectory()) walk(p);
      else if (e.name.endsWith('.tmp')) out.push(p);
    }
  };
  walk(dir);
  return out;
}
