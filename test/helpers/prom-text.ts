/**
 * A strict parser of the Prometheus text exposition format, version 0.0.4, written from the
 * format's documentation ("Exposition formats", section "Text format details",
 * https://prometheus.io/docs/instrumenting/exposition_formats/), for tests only:
 *   - UTF-8, lines separated by a line feed; the last line must end with one; empty lines ignored;
 *     tokens separated by blanks or tabs, leading and trailing ones ignored;
 *   - `# HELP name docstring` (escapes `\\` and `\n` only) and `# TYPE name type` (counter,
 *     gauge, histogram, summary, untyped), each at most once per name, before the name's first
 *     sample; other `#` lines are comments;
 *   - a sample: `name[{label="value",...[,]}] value [timestamp]`; metric names
 *     [a-zA-Z_:][a-zA-Z0-9_:]*, label names [a-zA-Z_][a-zA-Z0-9_]* (names starting with `__` are
 *     reserved); label values escape `\\`, `\"` and `\n`; values as Go's ParseFloat takes them,
 *     including NaN, +Inf and -Inf; the timestamp an int64 of ms;
 *   - all lines of one metric in one group, HELP and TYPE first; each name + label set once;
 *   - a histogram `x`: `x_bucket` lines with an `le` label, ascending, cumulative, ending at
 *     le="+Inf" equal to `x_count`, and `x_sum`; a summary `x`: `quantile` labels in [0, 1],
 *     `x_sum`, `x_count`.
 * Stricter than the format where it is silent (no '\r', no blanks inside the braces, a counter
 * is a non-negative number): anything it refuses throws PromTextError naming the line.
 */

export type PromType = 'counter' | 'gauge' | 'histogram' | 'summary' | 'untyped';

export interface PromSample {
  name: string;
  labels: Record<string, string>;
  value: number;
  timestampMs: number | null;
}

export interface PromFamily {
  name: string;
  type: PromType;
  help: string | null;
  samples: PromSample[];
}

export class PromTextError extends Error {}

const METRIC_NAME = /^[a-zA-Z_:][a-zA-Z0-9_:]*$/;
const LABEL_NAME = /^[a-zA-Z_][a-zA-Z0-9_]*$/;
const TYPES = new Set<PromType>(['counter', 'gauge', 'histogram', 'summary', 'untyped']);
const FLOAT = /^[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?$/;
const TIMESTAMP = /^-?\d+$/;

/** A value as the format writes it: a decimal float, NaN, +Inf or -Inf. */
export function parsePromValue(s: string): number | null {
  if (s === 'NaN') return Number.NaN;
  if (s === '+Inf') return Number.POSITIVE_INFINITY;
  if (s === '-Inf') return Number.NEGATIVE_INFINITY;
  return FLOAT.test(s) ? Number(s) : null;
}

function unescape(s: string, allowed: Record<string, string>, where: () => string): string {
  let out = '';
  for (let i = 0; i < s.length; i++) {
    const ch = s[i];
    if (ch !== '\\') {
      out += ch;
      continue;
    }
    const next = s[i + 1];
    if (next === undefined || !(next in allowed)) throw new PromTextError(`${where()}: bad escape \\${next ?? ''}`);
    out += allowed[next];
    i++;
  }
  return out;
}

/** Parse `{...}` starting at s[0] === '{'; returns the labels and the index after '}'. */
function parseLabels(s: string, where: () => string): { labels: Record<string, string>; end: number } {
  const labels: Record<string, string> = {};
  let i = 1;
  for (;;) {
    if (s[i] === '}') return { labels, end: i + 1 };
    const eq = s.indexOf('=', i);
    if (eq < 0) throw new PromTextError(`${where()}: label without '='`);
    const name = s.slice(i, eq);
    if (!LABEL_NAME.test(name)) throw new PromTextError(`${where()}: bad label name ${JSON.stringify(name)}`);
    if (name.startsWith('__')) throw new PromTextError(`${where()}: label name ${name} is reserved`);
    if (name in labels) throw new PromTextError(`${where()}: label ${name} twice`);
    if (s[eq + 1] !== '"') throw new PromTextError(`${where()}: label value of ${name} not quoted`);
    let j = eq + 2;
    let raw = '';
    for (;;) {
      if (j >= s.length) throw new PromTextError(`${where()}: unterminated label value`);
      if (s[j] === '\\') {
        raw += s.slice(j, j + 2);
        j += 2;
        continue;
      }
      if (s[j] === '"') break;
      raw += s[j++];
    }
    labels[name] = unescape(raw, { '\\': '\\', '"': '"', n: '\n' }, where);
    i = j + 1;
    if (s[i] === ',') i++;
    else if (s[i] !== '}') throw new PromTextError(`${where()}: expected ',' or '}' after label ${name}`);
  }
}

const key = (labels: Record<string, string>, omit?: string) =>
  JSON.stringify(
    Object.keys(labels)
      .filter((k) => k !== omit)
      .sort()
      .map((k) => [k, labels[k]]),
  );

/** Parse a whole exposition; families in the order they appear, by name. */
export function parsePromText(text: string): Map<string, PromFamily> {
  if (text.length > 0 && !text.endsWith('\n')) throw new PromTextError('the last line must end with a line feed');
  if (text.includes('\r')) throw new PromTextError('lines end with a line feed alone (found \\r)');
  const families = new Map<string, PromFamily>();
  const closed = new Set<string>();
  const sampled = new Set<string>();
  const seen = new Set<string>();
  let current: string | null = null;
  const lines = text.split('\n');
  lines.pop();
  const family = (name: string): PromFamily => {
    let f = families.get(name);
    if (!f) families.set(name, (f = { name, type: 'untyped', help: null, samples: [] }));
    return f;
  };
  const enter = (name: string, where: () => string) => {
    if (current === name) return;
    if (closed.has(name)) throw new PromTextError(`${where()}: lines of ${name} are not in one group`);
    if (current !== null) closed.add(current);
    current = name;
  };
  /** The family a sample name belongs to (histogram and summary suffixes). */
  const familyOf = (name: string): string => {
    for (const [suffix, types] of [
      ['_bucket', ['histogram']],
      ['_sum', ['histogram', 'summary']],
      ['_count', ['histogram', 'summary']],
    ] as const) {
      if (name.endsWith(suffix)) {
        const base = families.get(name.slice(0, -suffix.length));
        if (base && (types as readonly string[]).includes(base.type)) return base.name;
      }
    }
    return name;
  };

  lines.forEach((rawLine, k) => {
    const where = () => `line ${k + 1} ${JSON.stringify(rawLine.slice(0, 120))}`;
    const line = rawLine.replace(/^[ \t]+|[ \t]+$/g, '');
    if (line === '') return;
    if (line.startsWith('#')) {
      const m = /^#[ \t]+(HELP|TYPE)[ \t]+(\S+)(?:[ \t]+(.*))?$/.exec(line);
      if (!m) return; // a comment
      const [, kind, name, rest = ''] = m;
      if (!METRIC_NAME.test(name)) throw new PromTextError(`${where()}: bad metric name`);
      if (sampled.has(name)) throw new PromTextError(`${where()}: ${kind} after the first sample of ${name}`);
      enter(name, where);
      const f = family(name);
      if (kind === 'HELP') {
        if (f.help !== null) throw new PromTextError(`${where()}: second HELP for ${name}`);
        f.help = unescape(rest, { '\\': '\\', n: '\n' }, where);
      } else {
        if (!TYPES.has(rest as PromType)) throw new PromTextError(`${where()}: unknown type ${JSON.stringify(rest)}`);
        if ((f as PromFamily & { typed?: boolean }).typed) throw new PromTextError(`${where()}: second TYPE for ${name}`);
        (f as PromFamily & { typed?: boolean }).typed = true;
        f.type = rest as PromType;
      }
      return;
    }
    const nameEnd = line.search(/[{ \t]/);
    if (nameEnd <= 0) throw new PromTextError(`${where()}: no value`);
    const name = line.slice(0, nameEnd);
    if (!METRIC_NAME.test(name)) throw new PromTextError(`${where()}: bad metric name ${JSON.stringify(name)}`);
    let rest = line.slice(nameEnd);
    let labels: Record<string, string> = {};
    if (rest.startsWith('{')) {
      const p = parseLabels(rest, where);
      labels = p.labels;
      rest = rest.slice(p.end);
      if (!/^[ \t]/.test(rest)) throw new PromTextError(`${where()}: no blank between labels and value`);
    }
    const tokens = rest.trim().split(/[ \t]+/);
    if (tokens.length < 1 || tokens.length > 2 || tokens[0] === '') throw new PromTextError(`${where()}: expected a value and an optional timestamp`);
    const value = parsePromValue(tokens[0]);
    if (value === null) throw new PromTextError(`${where()}: bad value ${JSON.stringify(tokens[0])}`);
    if (tokens.length === 2 && !TIMESTAMP.test(tokens[1])) throw new PromTextError(`${where()}: bad timestamp ${JSON.stringify(tokens[1])}`);
    const id = `${name}${key(labels)}`;
    if (seen.has(id)) throw new PromTextError(`${where()}: ${name} with these labels twice`);
    seen.add(id);
    const fam = familyOf(name);
    enter(fam, where);
    sampled.add(fam);
    sampled.add(name);
    family(fam).samples.push({ name, labels, value, timestampMs: tokens.length === 2 ? Number(tokens[1]) : null });
  });
  for (const f of families.values()) checkFamily(f);
  return families;
}

function checkFamily(f: PromFamily): void {
  const bad = (what: string) => new PromTextError(`${f.name} (${f.type}): ${what}`);
  if (f.type === 'counter') {
    for (const s of f.samples) {
      if (s.name !== f.name) throw bad(`sample ${s.name} in a counter`);
      if (!(s.value >= 0)) throw bad(`counter value ${s.value}`);
    }
  } else if (f.type === 'gauge' || f.type === 'untyped') {
    for (const s of f.samples) if (s.name !== f.name) throw bad(`sample ${s.name}`);
  } else if (f.type === 'histogram') {
    const groups = new Map<string, { buckets: { le: number; value: number }[]; sum: number | null; count: number | null }>();
    const group = (labels: Record<string, string>) => {
      const k = key(labels, 'le');
      let g = groups.get(k);
      if (!g) groups.set(k, (g = { buckets: [], sum: null, count: null }));
      return g;
    };
    for (const s of f.samples) {
      if (s.name === `${f.name}_bucket`) {
        const le = s.labels.le === undefined ? null : parsePromValue(s.labels.le);
        if (le === null || Number.isNaN(le)) throw bad(`bucket without a valid le label`);
        group(s.labels).buckets.push({ le, value: s.value });
      } else if (s.name === `${f.name}_sum`) {
        if ('le' in s.labels) throw bad('le label on _sum');
        group(s.labels).sum = s.value;
      } else if (s.name === `${f.name}_count`) {
        if ('le' in s.labels) throw bad('le label on _count');
        group(s.labels).count = s.value;
      } else throw bad(`sample ${s.name}`);
    }
    for (const g of groups.values()) {
      if (g.buckets.length === 0 || g.sum === null || g.count === null) throw bad('needs _bucket, _sum and _count');
      for (let i = 1; i < g.buckets.length; i++) {
        if (!(g.buckets[i].le > g.buckets[i - 1].le)) throw bad('le not ascending');
        if (!(g.buckets[i].value >= g.buckets[i - 1].value)) throw bad('buckets not cumulative');
      }
      const last = g.buckets[g.buckets.length - 1];
      if (last.le !== Number.POSITIVE_INFINITY) throw bad('no le="+Inf" bucket');
      if (last.value !== g.count) throw bad(`le="+Inf" bucket ${last.value} ≠ _count ${g.count}`);
      if (g.buckets.some((b) => !(b.value >= 0))) throw bad('negative bucket');
    }
  } else {
    for (const s of f.samples) {
      if (s.name === f.name) {
        const q = s.labels.quantile === undefined ? null : parsePromValue(s.labels.quantile);
        if (q === null || !(q >= 0 && q <= 1)) throw bad('quantile label outside [0, 1]');
      } else if (s.name !== `${f.name}_sum` && s.name !== `${f.name}_count`) throw bad(`sample ${s.name}`);
    }
  }
}

/** The one sample of `name` with exactly these labels (throws when absent). */
export function sampleOf(families: Map<string, PromFamily>, family: string, name: string, labels: Record<string, string> = {}): PromSample {
  const f = families.get(family);
  const s = f?.samples.find((x) => x.name === name && key(x.labels) === key(labels));
  if (!s) throw new Error(`no sample ${name}${JSON.stringify(labels)} in ${family}`);
  return s;
}
