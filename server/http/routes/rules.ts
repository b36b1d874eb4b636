/**
 * Monitoring rules and events over REST (shared/rules.ts, server/monitor/events.ts). Indicative
 * levels only (no class-rated meter, no traceable calibration).
 *   GET    /api/rules            → { rules, maxRules, unit }
 *   GET    /api/rules/NAME       → { rule }                          404 ERR_HTTP_RULE_NOT_FOUND
 *   PUT    /api/rules/NAME       { sector, threshold: { mode, db }, minDurationS?, releaseS?, hysteresisDb?, clip? }
 *                                → { rule, created } (201 created, 200 replaced)
 *   DELETE /api/rules/NAME       → { deleted: rule, rules }          404 ERR_HTTP_RULE_NOT_FOUND
 *   GET    /api/events?from=UTC&to=UTC&rule=NAME → { events } (recent events kept in memory, oldest first)
 * Bodies and queries are closed: 400 ERR_HTTP_VALIDATION naming every problem. A seventeenth rule is
 * 409 ERR_HTTP_RULES_FULL; a rules file that cannot be written is 500 ERR_HTTP_RULES_FILE_FAILED.
 * Mutating calls pass the app's Host/Origin, content-type and token checks (app.ts).
 */
import type { FastifyPluginAsync } from 'fastify';
import { MAX_RULES, RULE_NAME, validateRule } from '../../../shared/rules.ts';
import type { MonitorEvent } from '../../monitor/events.ts';
import { RulesError, type RulesStore } from '../../monitor/rules-store.ts';
import { HttpError } from '../errors.ts';
import { createSerial, type Serial } from '../serial.ts';

export interface RulesRoutesDeps {
  store: RulesStore;
  events: (fromMs: number, toMs: number, rule?: string) => MonitorEvent[];
  unit: () => string;
}

function ruleName(params: unknown): string {
  const name = (params as { name?: unknown }).name;
  if (typeof name !== 'string' || !RULE_NAME.test(name)) throw new HttpError('ERR_HTTP_VALIDATION', { detail: 'name: must be 1–32 letters, digits, _ or - (the last part of /api/rules/NAME)' });
  return name;
}

function eventsQuery(q: Record<string, unknown>): { fromMs: number; toMs: number; rule?: string } {
  const problems: string[] = [];
  for (const k of Object.keys(q)) if (!['from', 'to', 'rule'].includes(k)) problems.push(`${k}: unknown parameter; known: from, to, rule`);
  const time = (k: string): number | null => {
    const v = q[k];
    if (v === undefined) return null;
    const n = typeof v === 'string' ? (/^\d{1,15}$/.test(v) ? Number(v) : Date.parse(v)) : NaN;
    if (!Number.isFinite(n)) {
      problems.push(`${k}: must be an ISO 8601 UTC time or milliseconds since 1970`);
      return null;
    }
    return n;
  };
  const fromMs = time('from') ?? -Infinity, toMs = time('to') ?? Infinity;
  const rule = q.rule;
  if (rule !== undefined && (typeof rule !== 'string' || !RULE_NAME.test(rule))) problems.push('rule: must be a rule name');
  if (problems.length > 0) throw new HttpError('ERR_HTTP_VALIDATION', { detail: problems.join('; ') });
  return { fromMs, toMs, ...(typeof rule === 'string' ? { rule } : {}) };
}

export function rulesRoutes(d: RulesRoutesDeps, serial: Serial = createSerial()): FastifyPluginAsync {
  const failed = (e: unknown): never => {
    if (e instanceof RulesError) {
      if (e.code === 'full') throw new HttpError('ERR_HTTP_RULES_FULL', { detail: e.message });
      if (e.code === 'save-failed') throw new HttpError('ERR_HTTP_RULES_FILE_FAILED', { detail: e.message });
    }
    throw e;
  };
  return async (app) => {
    app.get('/rules', async () => ({ rules: d.store.list(), maxRules: MAX_RULES, unit: d.unit(), loadError: d.store.loadError }));
    app.get('/rules/:name', async (req) => {
      const name = ruleName(req.params);
      const rule = d.store.get(name);
      if (!rule) throw new HttpError('ERR_HTTP_RULE_NOT_FOUND', { name });
      return { rule };
    });
    app.put('/rules/:name', async (req, reply) => {
      const name = ruleName(req.params);
      const problems: string[] = [];
      const rule = validateRule(name, req.body, d.store.maxPreS, (path, msg) => problems.push(`${path}: ${msg}`));
      if (!rule) throw new HttpError('ERR_HTTP_VALIDATION', { detail: problems.join('; ') });
      return serial(async () => {
        try {
          const r = await d.store.put(rule);
          void reply.code(r.created ? 201 : 200);
          return r;
        } catch (e) {
          return failed(e);
        }
      });
    });
    app.delete('/rules/:name', async (req) => {
      const name = ruleName(req.params);
      return serial(async () => {
        try {
          const deleted = await d.store.remove(name);
          return { deleted, rules: d.store.list() };
        } catch (e) {
          if (e instanceof RulesError && e.code === 'not-found') throw new HttpError('ERR_HTTP_RULE_NOT_FOUND', { name });
          return failed(e);
        }
      });
    });
    app.get('/events', async (req) => {
      const q = eventsQuery((req.query ?? {}) as Record<string, unknown>);
      return { events: d.events(q.fromMs, q.toMs, q.rule), indicative: true };
    });
  };
}
