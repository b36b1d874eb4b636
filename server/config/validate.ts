/**
 * Validation of a merged configuration object against CONFIG_SCHEMA. Every problem is reported
 * (not just the first), each naming the field path, the value found and the values allowed.
 */
import { allowedText, CONFIG_SCHEMA, type Config, type FieldSpec } from './schema.ts';

export interface ConfigIssue {
  path: string;
  value: unknown;
  message: string;
}

export class ConfigError extends Error {
  readonly code = 'ERR_CONFIG_INVALID';
  readonly issues: ConfigIssue[];
  constructor(issues: ConfigIssue[]) {
    super(`invalid configuration:\n${issues.map((i) => `  - ${i.message}`).join('\n')}`);
    this.name = 'ConfigError';
    this.issues = issues;
  }
}

function show(v: unknown): string {
  if (typeof v === 'string') return JSON.stringify(v.length > 60 ? `${v.slice(0, 57)}...` : v);
  if (v === undefined) return 'missing';
  try {
    const s = JSON.stringify(v);
    return s.length > 60 ? `${s.slice(0, 57)}...` : s;
  } catch {
    return String(v);
  }
}

function isPlainObject(v: unknown): v is Record<string, unknown> {
  return typeof v === 'object' && v !== null && !Array.isArray(v);
}

function check(value: unknown, spec: FieldSpec, path: string, issues: ConfigIssue[]): void {
  const bad = (why: string) => {
    const allowed = spec.kind === 'object' ? 'an object' : allowedText(spec);
    issues.push({ path, value, message: `${path || '(root)'} = ${show(value)}: ${why}; allowed ${allowed}` });
  };
  if (spec.kind === 'object') {
    if (!isPlainObject(value)) return bad('not an object');
    for (const [k, s] of Object.entries(spec.fields)) check(value[k], s, path ? `${path}.${k}` : k, issues);
    for (const k of Object.keys(value)) {
      if (!(k in spec.fields)) {
        const p = path ? `${path}.${k}` : k;
        issues.push({ path: p, value: value[k], message: `${p}: unknown field; known here: ${Object.keys(spec.fields).join(', ')}` });
      }
    }
    return;
  }
  if (value === null && 'nullable' in spec && spec.nullable) return;
  switch (spec.kind) {
    case 'int':
    case 'number':
      if (typeof value !== 'number' || !Number.isFinite(value)) return bad('not a number');
      if (spec.kind === 'int' && !Number.isInteger(value)) return bad('not an integer');
      if (value < spec.min || value > spec.max) return bad('out of range');
      return;
    case 'string':
      if (typeof value !== 'string') return bad('not a string');
      if (spec.maxLength !== undefined && value.length > spec.maxLength) return bad('too long');
      if (spec.pattern && !spec.pattern.test(value)) return bad('wrong form');
      if (value.length === 0) return bad('empty');
      return;
    case 'enum':
      if (typeof value !== 'string' || !spec.values.includes(value)) return bad('not allowed');
      return;
    case 'enumList':
      if (!Array.isArray(value)) return bad('not a list');
      if (value.length < spec.minItems) return bad('too few items');
      for (const item of value) if (typeof item !== 'string' || !spec.values.includes(item)) return bad(`item ${show(item)} not allowed`);
      if (new Set(value).size !== value.length) return bad('repeated item');
      return;
    case 'stringList':
      if (!Array.isArray(value)) return bad('not a list');
      if (value.length > spec.maxItems) return bad('too many items');
      for (const item of value) if (typeof item !== 'string' || item.length > spec.maxLength || !spec.pattern.test(item)) return bad(`item ${show(item)} not allowed`);
      return;
    case 'bool':
      if (typeof value !== 'boolean') return bad('not a boolean');
      return;
    case 'recordList':
      if (!Array.isArray(value)) return bad('not a list');
      if (value.length > spec.maxItems) return bad('too many items');
      value.forEach((item, i) => {
        // Optional fields of a record (`optional`) are checked only when present.
        const fields = spec.optional && isPlainObject(item) ? Object.fromEntries(Object.entries(spec.fields).filter(([k]) => !(spec.optional?.includes(k) && item[k] === undefined))) : spec.fields;
        check(item, { kind: 'object', fields }, `${path}[${i}]`, issues);
      });
      return;
  }
}

const LOOPBACK = /^(127\.\d+\.\d+\.\d+|::1|\[::1\]|localhost)$/i;

/** True when `host` binds only to the loopback interface. */
export function isLoopbackHost(host: string): boolean {
  return LOOPBACK.test(host);
}

/** Validate a merged object; returns it typed, or throws ConfigError listing every problem. */
export function validateConfig(value: unknown): Config {
  const issues: ConfigIssue[] = [];
  check(value, CONFIG_SCHEMA, '', issues);
  if (issues.length === 0) {
    const c = value as Config;
    if (!isLoopbackHost(c.server.host) && c.server.token === null) {
      issues.push({
        path: 'server.token',
        value: null,
        message: `server.token = null: required when server.host (${c.server.host}) is not loopback; allowed ${allowedText({ kind: 'string', doc: '', patternDoc: 'at least 16 printable ASCII characters, no spaces' })}`,
      });
    }
  }
  if (issues.length > 0) throw new ConfigError(issues);
  return value as Config;
}
