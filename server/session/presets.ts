/**
 * Named parameter sets: one JSON file per preset, `<data dir>/presets/<name>.json`, holding
 * `{ "name", "savedAt", "params" }` with the full ProcessingParams.
 *
 * Every read validates the file against a closed schema, like a REST body: it must parse, have no
 * field beyond those three, name itself as its file does, and its params must pass the same check
 * as a REST change (patchParams, given as `validate`). A file that fails is listed with its error
 * and cannot be applied; the others are unaffected.
 *
 * A save under a name in use is refused (kind 'exists') unless the caller asks to overwrite.
 * Writes go to a temporary file first and are renamed into place, so a preset is never
 * half-written. A save is refused (kind 'no-space') while the folder's free space is below
 * `minFreeBytes`, and when the write fails for want of space; a failed write removes its temporary
 * file and leaves the earlier version of the preset as it was. Temporary files left by a killed
 * server are removed when the store opens. Messages name the folder by `label`, never by its path.
 */
import { existsSync, mkdirSync, readdirSync, readFileSync, renameSync, rmSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import type { ProcessingParams } from '../engine/params.ts';
import { freeBytesSync, fsErrorText, isNoSpace, reserveText } from '../io/disk-space.ts';

/** Letters, digits, space, `_`, `-`, `.`; starting with a letter or digit; at most 64. */
export const PRESET_NAME = /^[A-Za-z0-9][A-Za-z0-9 _.-]{0,63}$/;
export const PRESET_NAME_TEXT = '1–64 characters: letters, digits, space, _ - . (starting with a letter or digit)';

export type { Preset, PresetListing } from '../../shared/session.ts';
import type { Preset, PresetListing } from '../../shared/session.ts';

/** The fields of a preset file, all required, no others. */
export const PRESET_FIELDS = ['name', 'savedAt', 'params'] as const;

/** Temporary files of save(): `<name>.json.<pid>.tmp`. */
const TMP_FILE = /\.json\.\d+\.tmp$/;

export class PresetError extends Error {
  constructor(
    /** bad-name, not-found, invalid, exists: the client's; no-space: the disk is (nearly) full; write-failed: another I/O error. */
    readonly kind: 'bad-name' | 'not-found' | 'invalid' | 'exists' | 'no-space' | 'write-failed',
    readonly presetName: string,
    message: string,
  ) {
    super(message);
    this.name = 'PresetError';
  }
}

export interface PresetSaveOptions {
  /** Replace a preset of the same name; without it such a save is refused (kind 'exists'). Default false. */
  overwrite?: boolean;
}

/** What save() did: the preset as stored, and the one it replaced (null when the name was new). */
export interface PresetSaved {
  preset: Preset;
  replaced: { savedAt: string | null } | null;
}

export interface PresetStoreOptions {
  /** Free bytes to keep on the folder's disk; saves are refused below it. Default 0 (no check). */
  minFreeBytes?: number;
  /** How messages name the folder (never its absolute path); default "presets". */
  label?: string;
}

export class PresetStore {
  readonly dir: string;
  readonly #validate: (params: unknown) => ProcessingParams;
  readonly #minFreeBytes: number;
  readonly #label: string;

  /**
   * @param validate throws (with a `<field>: <why>` message) when params are not acceptable
   * @throws Error when the folder cannot be created or read
   */
  constructor(dir: string, validate: (params: unknown) => ProcessingParams, options: PresetStoreOptions = {}) {
    this.dir = dir;
    this.#validate = validate;
    this.#minFreeBytes = options.minFreeBytes ?? 0;
    this.#label = options.label ?? 'presets';
    mkdirSync(dir, { recursive: true });
    for (const f of readdirSync(dir)) if (TMP_FILE.test(f)) rmSync(join(dir, f), { force: true });
  }

  static checkName(name: string): void {
    if (!PRESET_NAME.test(name) || name.endsWith('.') || name.endsWith(' ')) throw new PresetError('bad-name', name, `preset name ${JSON.stringify(name)} not allowed; ${PRESET_NAME_TEXT}`);
  }

  #file(name: string): string {
    return join(this.dir, `${name}.json`);
  }

  /** Every preset file, sorted by name, valid or not. */
  list(): PresetListing[] {
    const names = readdirSync(this.dir)
      .filter((f) => f.endsWith('.json'))
      .map((f) => f.slice(0, -5))
      .filter((n) => PRESET_NAME.test(n))
      .sort();
    return names.map((name) => {
      try {
        const p = this.get(name);
        return { name, savedAt: p.savedAt, valid: true as const };
      } catch (e) {
        return { name, valid: false as const, error: (e as Error).message };
      }
    });
  }

  /** @throws PresetError not-found, bad-name or invalid (the reason named) */
  get(name: string): Preset {
    PresetStore.checkName(name);
    let text: string;
    try {
      text = readFileSync(this.#file(name), 'utf8');
    } catch (e) {
      if ((e as NodeJS.ErrnoException).code === 'ENOENT') throw new PresetError('not-found', name, `no preset named ${name}`);
      throw new PresetError('invalid', name, `cannot read: ${(e as NodeJS.ErrnoException).code ?? (e as Error).message}`);
    }
    let doc: unknown;
    try {
      doc = JSON.parse(text);
    } catch (e) {
      throw new PresetError('invalid', name, `not valid JSON (${(e as Error).message})`);
    }
    if (typeof doc !== 'object' || doc === null || Array.isArray(doc)) throw new PresetError('invalid', name, 'not a JSON object');
    const d = doc as Record<string, unknown>;
    for (const k of Object.keys(d)) {
      if (!(PRESET_FIELDS as readonly string[]).includes(k)) throw new PresetError('invalid', name, `${k}: unknown field; known: ${PRESET_FIELDS.join(', ')}`);
    }
    if (d.name !== name) throw new PresetError('invalid', name, `names itself ${JSON.stringify(d.name)}, not ${JSON.stringify(name)}`);
    if (typeof d.savedAt !== 'string' || Number.isNaN(Date.parse(d.savedAt))) throw new PresetError('invalid', name, 'savedAt: not a date');
    let params: ProcessingParams;
    try {
      params = this.#validate(d.params);
    } catch (e) {
      throw new PresetError('invalid', name, (e as Error).message);
    }
    return { name, savedAt: d.savedAt, params };
  }

  /**
   * Save a preset. A name already in use (its file valid or not) is refused unless
   * `options.overwrite`; then the earlier file is replaced and its savedAt reported (null when it
   * did not validate).
   * @throws PresetError bad-name or invalid (the client's), exists (the name is in use and no
   *   overwrite asked), no-space (free space below the reserve, or the write failed for want of
   *   space), write-failed (another I/O error)
   */
  save(name: string, params: unknown, options: PresetSaveOptions = {}): PresetSaved {
    PresetStore.checkName(name);
    let checked: ProcessingParams;
    try {
      checked = this.#validate(params);
    } catch (e) {
      throw new PresetError('invalid', name, (e as Error).message);
    }
    // Checked and written in one synchronous run: no other save can come between.
    let replaced: PresetSaved['replaced'] = null;
    if (existsSync(this.#file(name))) {
      if (options.overwrite !== true) throw new PresetError('exists', name, `a preset named ${JSON.stringify(name)} exists; save with overwrite to replace it`);
      let savedAt: string | null = null;
      try {
        savedAt = this.get(name).savedAt;
      } catch {
        savedAt = null; // an unreadable file is replaced all the same
      }
      replaced = { savedAt };
    }
    if (this.#minFreeBytes > 0) {
      let free: number;
      try {
        free = freeBytesSync(this.dir);
      } catch (e) {
        throw new PresetError('write-failed', name, `saving preset ${JSON.stringify(name)}: ${fsErrorText(e)}`);
      }
      if (free < this.#minFreeBytes) throw new PresetError('no-space', name, reserveText('presets', this.#label, free, this.#minFreeBytes));
    }
    const p: Preset = { name, savedAt: new Date().toISOString(), params: checked };
    const tmp = `${this.#file(name)}.${process.pid}.tmp`;
    try {
      writeFileSync(tmp, `${JSON.stringify(p, null, 2)}\n`);
      renameSync(tmp, this.#file(name));
    } catch (e) {
      rmSync(tmp, { force: true });
      throw new PresetError(isNoSpace(e) ? 'no-space' : 'write-failed', name, `saving preset ${JSON.stringify(name)}: ${fsErrorText(e)}`);
    }
    return { preset: p, replaced };
  }

  /** @throws PresetError not-found or bad-name */
  delete(name: string): void {
    PresetStore.checkName(name);
    try {
      rmSync(this.#file(name));
    } catch (e) {
      if ((e as NodeJS.ErrnoException).code === 'ENOENT') throw new PresetError('not-found', name, `no preset named ${name}`);
      throw e;
    }
  }
}
