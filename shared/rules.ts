/**
 * Monitoring rules (issue 16): when a sector's level makes an event. Shared by the server (REST,
 * array file, detector) and the dashboard (editor). Indicative levels only.
 *
 *   { "sector": NAME,
 *     "threshold": { "mode": "absolute" | "above-background", "db": X },
 *     "minDurationS": 0.5, "releaseS": 2, "hysteresisDb": 3,
 *     "clip": { "preS": 5, "postS": 5, "beam": true, "raw": false } }
 *
 * `absolute`: the sector's fast level (time weighting F, 125 ms) above `db` (dBFS, or dB SPL when the
 * array is calibrated). `above-background`: above the sector's running L90 (the level exceeded 90 % of
 * the last 10 minutes of 1-s values, ISO 1996-1's term) by `db`. An event starts when the level has
 * stayed above the threshold for `minDurationS` (its start is the first sample above) and ends when it
 * has stayed below threshold − `hysteresisDb` for `releaseS` (its end is then).
 */

export const MAX_RULES = 16;
export const RULE_NAME = /^[A-Za-z0-9_-]{1,32}$/;

export interface Rule {
  name: string;
  sector: string;
  threshold: { mode: 'absolute' | 'above-background'; db: number };
  minDurationS: number;
  releaseS: number;
  hysteresisDb: number;
  clip: { preS: number; postS: number; beam: boolean; raw: boolean };
}

export type RuleBody = Omit<Rule, 'name'>;

/** Defaults of the optional fields. */
export const RULE_DEFAULTS = { minDurationS: 0.5, releaseS: 2, hysteresisDb: 3, clip: { preS: 5, postS: 5, beam: true, raw: false } } as const;

/** Limits: durations in seconds, levels in dB. `maxPreS` is the server's pre-trigger ring (monitor.preTriggerS). */
export const RULE_LIMITS = { minDurationS: [0, 3600], releaseS: [0, 3600], hysteresisDb: [0, 40], absoluteDb: [-200, 200], aboveDb: [0, 100], postS: [0, 600] } as const;

type Problem = (path: string, message: string) => void;

function obj(v: unknown, path: string, fields: readonly string[], bad: Problem): Record<string, unknown> | null {
  if (typeof v !== 'object' || v === null || Array.isArray(v)) {
    bad(path || '(body)', 'must be a JSON object');
    return null;
  }
  for (const k of Object.keys(v)) if (!fields.includes(k)) bad(path ? `${path}.${k}` : k, `unknown field; known: ${fields.join(', ')}`);
  return v as Record<string, unknown>;
}

function num(v: unknown, path: string, [lo, hi]: readonly [number, number], bad: Problem): number | null {
  if (typeof v !== 'number' || !Number.isFinite(v) || v < lo || v > hi) {
    bad(path, `must be a number in ${lo}–${hi}`);
    return null;
  }
  return v;
}

/**
 * Check a rule's body (closed). Every problem goes to `bad` with its path; returns the rule with its
 * defaults, or null when there was a problem.
 * @param maxPreS the longest pre-trigger span the server keeps (monitor.preTriggerS)
 */
export function validateRule(name: string, body: unknown, maxPreS: number, bad: Problem): Rule | null {
  let ok = true;
  const p: Problem = (path, msg) => {
    ok = false;
    bad(path, msg);
  };
  if (!RULE_NAME.test(name)) p('name', 'must be 1–32 letters, digits, _ or -');
  const o = obj(body, '', ['sector', 'threshold', 'minDurationS', 'releaseS', 'hysteresisDb', 'clip'], p);
  if (!o) return null;
  const sector = typeof o.sector === 'string' && RULE_NAME.test(o.sector) ? o.sector : (p('sector', 'must name a sector (1–32 letters, digits, _ or -)'), '');
  const t = o.threshold === undefined ? (p('threshold', 'missing: { "mode": "absolute" | "above-background", "db": X }'), null) : obj(o.threshold, 'threshold', ['mode', 'db'], p);
  let threshold: Rule['threshold'] | null = null;
  if (t) {
    if (t.mode !== 'absolute' && t.mode !== 'above-background') p('threshold.mode', 'must be "absolute" or "above-background"');
    else {
      const db = num(t.db, 'threshold.db', t.mode === 'absolute' ? RULE_LIMITS.absoluteDb : RULE_LIMITS.aboveDb, p);
      if (db !== null) threshold = { mode: t.mode, db };
    }
  }
  const opt = (k: 'minDurationS' | 'releaseS' | 'hysteresisDb') => (o[k] === undefined ? RULE_DEFAULTS[k] : num(o[k], k, RULE_LIMITS[k], p));
  const minDurationS = opt('minDurationS'), releaseS = opt('releaseS'), hysteresisDb = opt('hysteresisDb');
  let clip: Rule['clip'] = { ...RULE_DEFAULTS.clip, preS: Math.min(RULE_DEFAULTS.clip.preS, maxPreS) };
  if (o.clip !== undefined) {
    const c = obj(o.clip, 'clip', ['preS', 'postS', 'beam', 'raw'], p);
    if (c) {
      const preS = c.preS === undefined ? clip.preS : num(c.preS, 'clip.preS', [0, maxPreS], p);
      const postS = c.postS === undefined ? clip.postS : num(c.postS, 'clip.postS', RULE_LIMITS.postS, p);
      const beam = c.beam === undefined ? true : typeof c.beam === 'boolean' ? c.beam : (p('clip.beam', 'must be true or false'), true);
      const raw = c.raw === undefined ? false : typeof c.raw === 'boolean' ? c.raw : (p('clip.raw', 'must be true or false'), false);
      if (preS !== null && postS !== null) clip = { preS, postS, beam, raw };
    }
  }
  if (!ok || !threshold || minDurationS === null || releaseS === null || hysteresisDb === null) return null;
  return { name, sector, threshold, minDurationS, releaseS, hysteresisDb, clip };
}
