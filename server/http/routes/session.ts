/**
 * Session tools over REST:
 *   GET    /api/journal?limit=N&afterSeq=S&session=current|all  → { session, total, corruptLines, entries }
 *   GET    /api/presets                    → { presets: [{ name, savedAt, valid: true } | { name, valid: false, error }] }
 *   GET    /api/presets/:name              → { name, savedAt, params }
 *   PUT    /api/presets/:name[?overwrite=true|false]  { params? }
 *                                         → the preset saved (absent params: the ones in force)
 *   POST   /api/presets/:name/apply        → { params, derived } as applied (like PUT /api/processing)
 *   DELETE /api/presets/:name              → 204
 * A save under a name in use is 409 ERR_HTTP_PRESET_EXISTS unless `?overwrite=true` (the journal
 * then notes the preset as replaced); a query other than `overwrite=true|false` is 400.
 * A bad name is 400 ERR_HTTP_VALIDATION, a missing preset 404 ERR_HTTP_PRESET_NOT_FOUND, a preset
 * file that does not validate 422 ERR_HTTP_PRESET_INVALID naming the reason, a save while the data
 * folder's free space is below `data.minFreeBytes` (or that fails for want of space) 507
 * ERR_HTTP_INSUFFICIENT_STORAGE; another write failure 500 ERR_HTTP_PRESET_WRITE_FAILED.
 */
import type { FastifyPluginAsync } from 'fastify';
import type { ProcessingParams } from '../../engine/params.ts';
import type { JournalPage } from '../../../shared/session.ts';
import { PresetError, type Preset, type PresetListing } from '../../session/presets.ts';
import { HttpError } from '../errors.ts';
import { createSerial, type Serial } from '../serial.ts';
import type { ProcessingDerived } from './processing.ts';

export interface SessionController {
  journal(q: { afterSeq?: number; limit: number; all: boolean }): JournalPage;
  listPresets(): PresetListing[];
  getPreset(name: string): Preset;
  /** @param overwrite replace a preset of the same name; without it such a save throws PresetError 'exists' */
  savePreset(name: string, params: unknown | undefined, overwrite: boolean): Preset;
  applyPreset(name: string): Promise<{ params: ProcessingParams; derived: ProcessingDerived }>;
  deletePreset(name: string): void;
}

export const JOURNAL_LIMIT_MAX = 10_000;

function toHttp(e: unknown): unknown {
  if (!(e instanceof PresetError)) return e;
  if (e.kind === 'bad-name') return new HttpError('ERR_HTTP_VALIDATION', { detail: e.message });
  if (e.kind === 'exists') return new HttpError('ERR_HTTP_PRESET_EXISTS', { name: JSON.stringify(e.presetName) });
  if (e.kind === 'not-found') return new HttpError('ERR_HTTP_PRESET_NOT_FOUND', { name: JSON.stringify(e.presetName) });
  if (e.kind === 'no-space') return new HttpError('ERR_HTTP_INSUFFICIENT_STORAGE', { detail: e.message });
  if (e.kind === 'write-failed') return new HttpError('ERR_HTTP_PRESET_WRITE_FAILED', { detail: e.message });
  return new HttpError('ERR_HTTP_PRESET_INVALID', { name: JSON.stringify(e.presetName), detail: e.message });
}

function intQuery(q: Record<string, unknown>, key: string, min: number, max: number): number | undefined {
  const v = q[key];
  if (v === undefined) return undefined;
  if (typeof v !== 'string' || !/^[0-9]{1,15}$/.test(v) || Number(v) < min || Number(v) > max) throw new HttpError('ERR_HTTP_VALIDATION', { detail: `${key}: ${JSON.stringify(v)} not allowed; an integer ${min}–${max}` });
  return Number(v);
}

/** @param serial the queue shared with the other routes that change parameters (serial.ts) */
export function sessionRoutes(c: SessionController, serial: Serial = createSerial()): FastifyPluginAsync {
  return async (app) => {
    app.get('/journal', async (req) => {
      const q = (req.query ?? {}) as Record<string, unknown>;
      for (const k of Object.keys(q)) if (!['limit', 'afterSeq', 'session'].includes(k)) throw new HttpError('ERR_HTTP_VALIDATION', { detail: `${k}: unknown query parameter; known: limit, afterSeq, session` });
      const limit = intQuery(q, 'limit', 1, JOURNAL_LIMIT_MAX) ?? 200;
      const afterSeq = intQuery(q, 'afterSeq', 0, Number.MAX_SAFE_INTEGER);
      const which = q.session ?? 'current';
      if (which !== 'current' && which !== 'all') throw new HttpError('ERR_HTTP_VALIDATION', { detail: `session: ${JSON.stringify(which)} not allowed; current or all` });
      return c.journal({ limit, afterSeq, all: which === 'all' });
    });
    app.get('/presets', async () => ({ presets: c.listPresets() }));
    app.get<{ Params: { name: string } }>('/presets/:name', async (req) => {
      try {
        return c.getPreset(req.params.name);
      } catch (e) {
        throw toHttp(e);
      }
    });
    app.put<{ Params: { name: string } }>('/presets/:name', { schema: { body: { type: 'object' } } }, async (req) => {
      const body = (req.body ?? {}) as Record<string, unknown>;
      for (const k of Object.keys(body)) if (k !== 'params') throw new HttpError('ERR_HTTP_VALIDATION', { detail: `${k}: unknown field; known: params` });
      const q = (req.query ?? {}) as Record<string, unknown>;
      for (const k of Object.keys(q)) if (k !== 'overwrite') throw new HttpError('ERR_HTTP_VALIDATION', { detail: `${k}: unknown query parameter; known: overwrite` });
      const ow = q.overwrite ?? 'false';
      if (ow !== 'true' && ow !== 'false') throw new HttpError('ERR_HTTP_VALIDATION', { detail: `overwrite: ${JSON.stringify(ow)} not allowed; true or false` });
      try {
        return c.savePreset(req.params.name, body.params, ow === 'true');
      } catch (e) {
        throw toHttp(e);
      }
    });
    app.post<{ Params: { name: string } }>('/presets/:name/apply', async (req) => {
      try {
        return await serial(() => c.applyPreset(req.params.name));
      } catch (e) {
        throw toHttp(e);
      }
    });
    app.delete<{ Params: { name: string } }>('/presets/:name', async (req, reply) => {
      try {
        c.deletePreset(req.params.name);
      } catch (e) {
        throw toHttp(e);
      }
      return reply.code(204).send();
    });
  };
}
