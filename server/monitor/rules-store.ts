/**
 * The monitoring rules of the running server (shared/rules.ts), kept in `data.dir/rules.json`
 * (`{ "rules": [ { "name", …body } ] }`): read and checked at start (a file that does not validate is
 * refused with every problem named, the server keeps running without rules and says so in status),
 * rewritten atomically (a temporary file renamed over it) on each change, one change at a time. The
 * list held here is always the one on disk: a write that fails leaves both unchanged. Listeners run
 * after each saved change (journal, event detectors).
 */
import { mkdir, readFile, rename, writeFile } from 'node:fs/promises';
import { dirname } from 'node:path';
import { MAX_RULES, validateRule, type Rule } from '../../shared/rules.ts';
import { fsErrorText } from '../io/disk-space.ts';

export type RulesListener = (after: Rule[], before: Rule[]) => void;

export class RulesError extends Error {
  constructor(
    readonly code: 'not-found' | 'full' | 'save-failed',
    message: string,
  ) {
    super(message);
    this.name = 'RulesError';
  }
}

const copy = (r: Rule): Rule => structuredClone(r);

export class RulesStore {
  readonly path: string;
  readonly maxPreS: number;
  #current: Rule[] = [];
  #chain: Promise<unknown> = Promise.resolve();
  readonly #listeners = new Set<RulesListener>();
  /** Why the file read at start was not used (null when it was, or there was none). */
  loadError: string | null = null;

  /** @param maxPreS the pre-trigger ring's length (monitor.preTriggerS): the longest clip.preS */
  constructor(path: string, maxPreS: number) {
    this.path = path;
    this.maxPreS = maxPreS;
  }

  /** Read the file (absent: no rules). Never throws: a bad file is told in loadError. */
  async load(): Promise<void> {
    let text: string;
    try {
      text = await readFile(this.path, 'utf8');
    } catch (e) {
      if ((e as NodeJS.ErrnoException).code !== 'ENOENT') this.loadError = fsErrorText(e);
      return;
    }
    const problems: string[] = [];
    const rules = parseRulesFile(text, this.maxPreS, problems);
    if (problems.length > 0) this.loadError = `rules.json: ${problems.join('; ')}`;
    else this.#current = rules;
  }

  list(): Rule[] {
    return this.#current.map(copy);
  }

  get(name: string): Rule | undefined {
    const r = this.#current.find((x) => x.name === name);
    return r ? copy(r) : undefined;
  }

  onChange(listener: RulesListener): () => void {
    this.#listeners.add(listener);
    return () => void this.#listeners.delete(listener);
  }

  /** Create or replace (validated already). @throws RulesError 'full', 'save-failed' */
  put(rule: Rule): Promise<{ rule: Rule; created: boolean }> {
    return this.#serial(async () => {
      const i = this.#current.findIndex((x) => x.name === rule.name);
      if (i < 0 && this.#current.length >= MAX_RULES) throw new RulesError('full', `there are already ${MAX_RULES} rules; delete one first`);
      await this.#save(i < 0 ? [...this.#current, copy(rule)] : this.#current.map((x, j) => (j === i ? copy(rule) : x)));
      return { rule: copy(rule), created: i < 0 };
    });
  }

  /** @throws RulesError 'not-found', 'save-failed' */
  remove(name: string): Promise<Rule> {
    return this.#serial(async () => {
      const r = this.#current.find((x) => x.name === name);
      if (!r) throw new RulesError('not-found', `no rule named ${name}`);
      await this.#save(this.#current.filter((x) => x.name !== name));
      return copy(r);
    });
  }

  #serial<T>(f: () => Promise<T>): Promise<T> {
    const p = this.#chain.then(f, f);
    this.#chain = p.catch(() => undefined);
    return p;
  }

  async #save(next: Rule[]): Promise<void> {
    const tmp = `${this.path}.tmp`;
    try {
      await mkdir(dirname(this.path), { recursive: true });
      await writeFile(tmp, JSON.stringify({ rules: next.map(({ name, ...body }) => ({ name, ...body })) }, null, 2) + '\n');
      await rename(tmp, this.path);
    } catch (e) {
      throw new RulesError('save-failed', `rules.json could not be written: ${fsErrorText(e)}`);
    }
    const before = this.#current;
    this.#current = next;
    this.loadError = null;
    for (const l of this.#listeners) {
      try {
        l(next.map(copy), before.map(copy));
      } catch (e) {
        process.emitWarning(`rules: a listener failed: ${(e as Error).message}`);
      }
    }
  }
}

/** Parse `{ "rules": [...] }`: each rule checked (closed), names unique, at most MAX_RULES. */
export function parseRulesFile(text: string, maxPreS: number, problems: string[]): Rule[] {
  let o: unknown;
  try {
    o = JSON.parse(text);
  } catch {
    problems.push('not JSON');
    return [];
  }
  if (typeof o !== 'object' || o === null || Array.isArray(o) || Object.keys(o).some((k) => k !== 'rules') || !Array.isArray((o as { rules?: unknown }).rules)) {
    problems.push('must be { "rules": [ ... ] }');
    return [];
  }
  const list = (o as { rules: unknown[] }).rules;
  if (list.length > MAX_RULES) problems.push(`rules: at most ${MAX_RULES}`);
  const out: Rule[] = [];
  list.slice(0, MAX_RULES).forEach((item, i) => {
    const name = typeof item === 'object' && item !== null && typeof (item as { name?: unknown }).name === 'string' ? (item as { name: string }).name : '';
    const { name: _n, ...body } = (typeof item === 'object' && item !== null ? item : {}) as Record<string, unknown>;
    const r = validateRule(name, body, maxPreS, (path, msg) => problems.push(`rules[${i}].${path} ${msg}`));
    if (r) {
      if (out.some((x) => x.name === r.name)) problems.push(`rules[${i}].name: ${r.name} is repeated`);
      else out.push(r);
    }
  });
  return out;
}
