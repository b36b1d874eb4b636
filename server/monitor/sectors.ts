/**
 * The sectors of the running server (shared/sectors.ts), kept in the array file it was started
 * with: each change rewrites the file's `sectors` field through updateArrayFile (the rest of the
 * file kept, the result validated as a whole, the file replaced atomically), then the listeners
 * run (journal, dashboards, level measurement). The list held here is always the one on disk:
 * a write that fails leaves both unchanged.
 *
 * Readers (the level measurement) use list(), get(name) and onChange(listener); the REST routes
 * (server/http/routes/sectors.ts) use put() and remove(). Changes run one at a time (updateArrayFile
 * serialises writes of one file; the routes also queue their changes).
 */
import { basename } from 'node:path';
import { MAX_SECTORS, sectorLimitProblems, type Sector, type SectorLimits } from '../../shared/sectors.ts';
import { updateArrayFile } from '../config/array-file-update.ts';
import { ConfigError } from '../config/validate.ts';
import { publicText } from '../public-text.ts';

/** A change of the list: `before` and `after` are copies; listeners may keep them. */
export type SectorsListener = (after: Sector[], before: Sector[]) => void;

/** Why a change was refused; `message` is safe to show. */
export class SectorsError extends Error {
  constructor(
    readonly code: 'not-found' | 'full' | 'save-failed',
    message: string,
  ) {
    super(message);
    this.name = 'SectorsError';
  }
}

export interface SectorsController {
  /** The sectors in file order (copies). */
  list(): Sector[];
  /** One sector by name (a copy), undefined when there is none. */
  get(name: string): Sector | undefined;
  /**
   * Run `listener` after every change saved (not for the list at start: read list() for that).
   * @returns a function that removes the listener
   */
  onChange(listener: SectorsListener): () => void;
  /**
   * Create or replace the sector of `s.name` (already validated; a new one goes last).
   * @throws SectorsError 'full' with MAX_SECTORS already and a new name, 'save-failed' when the file cannot be rewritten
   */
  put(s: Sector): Promise<{ sector: Sector; created: boolean }>;
  /** @throws SectorsError 'not-found', 'save-failed' */
  remove(name: string): Promise<Sector>;
  /** The sample rate's half and the processing band now, for checking a sector's band. */
  limits(): SectorLimits;
  /** The array file's name (no folder). */
  file(): string;
  /**
   * The saved sectors checked against limits() now: a band above fs/2 or outside the processing band
   * (changed since the sector was saved). One line each; empty when all fit.
   */
  problems(): string[];
}

const copy = (s: Sector): Sector => {
  const o: Sector = { ...s, azimuthDeg: [s.azimuthDeg[0], s.azimuthDeg[1]] };
  if (s.elevationDeg) o.elevationDeg = [s.elevationDeg[0], s.elevationDeg[1]];
  if (s.bandHz) o.bandHz = [s.bandHz[0], s.bandHz[1]];
  return o;
};

/**
 * Sectors kept in the array file at `arrayPath`, starting from `initial` (the file's list as loaded).
 * @param limits what a PUT checks a band against (fs/2, the processing band); `{}` when unknown
 */
export function arrayFileSectors(arrayPath: string, initial: readonly Sector[], limits: () => SectorLimits = () => ({})): SectorsController {
  let current: Sector[] = initial.map(copy);
  const listeners = new Set<SectorsListener>();

  async function save(next: Sector[]): Promise<void> {
    let saved: Sector[];
    try {
      const g = await updateArrayFile(arrayPath, { sectors: next.length > 0 ? next : undefined });
      saved = g.sectors ?? [];
    } catch (e) {
      // The file as it is now does not validate, or cannot be read or written: say why, without its folder.
      const text = e instanceof ConfigError ? e.issues.map((i) => i.message.split(arrayPath).join(basename(arrayPath))).join('; ') : publicText(e);
      throw new SectorsError('save-failed', text);
    }
    const before = current;
    current = saved;
    for (const l of listeners) {
      try {
        l(saved.map(copy), before.map(copy));
      } catch (e) {
        // A listener's failure is its own: the file is saved and the others still hear of it.
        process.emitWarning(`sectors: a listener failed: ${publicText(e)}`);
      }
    }
  }

  return {
    list: () => current.map(copy),
    get(name) {
      const s = current.find((x) => x.name === name);
      return s ? copy(s) : undefined;
    },
    onChange(listener) {
      listeners.add(listener);
      return () => void listeners.delete(listener);
    },
    async put(s) {
      const i = current.findIndex((x) => x.name === s.name);
      if (i < 0 && current.length >= MAX_SECTORS) throw new SectorsError('full', `there are already ${MAX_SECTORS} sectors (${current.map((x) => x.name).join(', ')}); delete one first`);
      const next = i < 0 ? [...current, copy(s)] : current.map((x, j) => (j === i ? copy(s) : x));
      await save(next);
      return { sector: copy(current.find((x) => x.name === s.name)!), created: i < 0 };
    },
    async remove(name) {
      const s = current.find((x) => x.name === name);
      if (!s) throw new SectorsError('not-found', `no sector named ${name}`);
      await save(current.filter((x) => x.name !== name));
      return copy(s);
    },
    limits,
    file: () => basename(arrayPath),
    problems: () => sectorLimitProblems(current, limits()),
  };
}
