/**
 * Misspelt command-line flags: the nearest valid flag by optimal-string-alignment distance (the
 * restricted Damerau–Levenshtein distance: insertions, deletions, substitutions and swaps of two
 * adjacent characters each cost 1, no substring edited twice), and a strict flag parser that turns
 * every mistake into one clean line (`unknown flag --htp-port; did you mean --http-port?`) instead of
 * node:util parseArgs's own text. Every subcommand answers usage mistakes with exit code 2.
 */
import { parseArgs, type ParseArgsConfig } from 'node:util';

/** Exit code of every command-line mistake. */
export const USAGE_EXIT_CODE = 2;

/** A command-line mistake; its message is one line meant to be printed after `nullsteer CMD: `. */
export class FlagError extends Error {
  readonly code = 'ERR_CLI_FLAG';
}

/** Longest flag text compared (a pasted paragraph is not measured); longer input gets no suggestion. */
const MAX_COMPARED_CHARS = 64;

/**
 * Optimal string alignment distance between a and b (restricted Damerau–Levenshtein). Two rows of
 * the dynamic programme plus one for the swap, O(|a|·|b|) time.
 */
export function editDistance(a: string, b: string): number {
  const n = b.length;
  let prev2 = new Array<number>(n + 1).fill(0);
  let prev = Array.from({ length: n + 1 }, (_, j) => j);
  let cur = new Array<number>(n + 1).fill(0);
  for (let i = 1; i <= a.length; i++) {
    cur[0] = i;
    for (let j = 1; j <= n; j++) {
      const cost = a[i - 1] === b[j - 1] ? 0 : 1;
      let d = Math.min(prev[j] + 1, cur[j - 1] + 1, prev[j - 1] + cost);
      if (i > 1 && j > 1 && a[i - 1] === b[j - 2] && a[i - 2] === b[j - 1]) d = Math.min(d, prev2[j - 2] + 1);
      cur[j] = d;
    }
    [prev2, prev, cur] = [prev, cur, prev2];
  }
  return prev[n];
}

/**
 * The valid flag nearest to `given` (names without the leading dashes), or null when none is close:
 * a suggestion needs a distance of at most max(1, min(3, ⌊length/3⌋)) of the given name. Ties go to
 * the flag listed first. A given name that is a unique prefix of a valid one suggests that one.
 */
export function nearestFlag(given: string, valid: readonly string[]): string | null {
  if (given.length === 0 || given.length > MAX_COMPARED_CHARS) return null;
  const prefixed = valid.filter((v) => v.startsWith(given));
  if (prefixed.length === 1) return prefixed[0];
  const limit = Math.max(1, Math.min(3, Math.floor(given.length / 3)));
  let best: string | null = null;
  let bestD = Infinity;
  for (const v of valid) {
    const d = editDistance(given, v);
    if (d < bestD) {
      best = v;
      bestD = d;
    }
  }
  return bestD <= limit ? best : null;
}

/** `unknown flag --x; did you mean --y?` (or just `unknown flag --x` when nothing is near). */
export function unknownFlagText(given: string, valid: readonly string[]): string {
  const name = given.replace(/^-+/, '').replace(/=.*$/s, '');
  const shown = given.replace(/=.*$/s, '').slice(0, MAX_COMPARED_CHARS + 2);
  const near = nearestFlag(name, valid);
  return `unknown flag ${shown}${near !== null ? `; did you mean --${near}?` : ''}`;
}

type Options = NonNullable<ParseArgsConfig['options']>;

/**
 * Check argv against `options` the way node:util parseArgs (strict) reads it, and throw a FlagError
 * with a clean one-line message for: an unknown flag (with the nearest valid one), a flag that needs
 * a value and has none (at the end, or followed by another flag), and a value given to a boolean flag.
 * Then run parseArgs itself; anything it still refuses becomes a FlagError too. `alsoSuggest` names
 * flags that are not parsed here but may be suggested (those of a mode the caller dispatches on).
 */
export function parseFlags<T extends Options>(argv: string[], options: T, allowPositionals = true, alsoSuggest: readonly string[] = []) {
  const names = [...Object.keys(options), ...alsoSuggest.filter((n) => !Object.hasOwn(options, n))];
  const shorts = new Map<string, string>();
  for (const [name, o] of Object.entries(options)) if (o.short) shorts.set(o.short, name);
  for (let i = 0; i < argv.length; i++) {
    const arg = argv[i];
    if (arg === '--') break;
    if (!arg.startsWith('-') || arg === '-') continue;
    let name: string;
    let inlineValue = false;
    if (arg.startsWith('--')) {
      const eq = arg.indexOf('=');
      name = eq < 0 ? arg.slice(2) : arg.slice(2, eq);
      inlineValue = eq >= 0;
      if (!Object.hasOwn(options, name)) throw new FlagError(unknownFlagText(arg, names));
    } else {
      const s = arg.slice(1, 2);
      const long = shorts.get(s);
      if (long === undefined || arg.length > 2) throw new FlagError(unknownFlagText(arg, names));
      name = long;
    }
    const spec = options[name];
    if (spec.type === 'boolean') {
      if (inlineValue) throw new FlagError(`--${name} takes no value (got ${JSON.stringify(arg.slice(arg.indexOf('=') + 1).slice(0, 64))})`);
    } else if (!inlineValue) {
      const next = argv[i + 1];
      if (next === undefined) throw new FlagError(`--${name} needs a value`);
      if (next.startsWith('-') && next.length > 1) throw new FlagError(`--${name} needs a value (got the flag-like ${JSON.stringify(next.slice(0, 64))}; a value starting with - is written --${name}=VALUE)`);
      i++;
    }
  }
  try {
    return parseArgs({ args: argv, options, strict: true, allowPositionals });
  } catch (e) {
    const first = String((e as Error).message).split('\n')[0];
    throw new FlagError(first.replace(/^Unexpected argument/, 'unexpected argument'));
  }
}
