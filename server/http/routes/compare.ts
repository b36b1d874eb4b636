/**
 * The comparison chain over REST:
 *   GET    /api/compare                      → { enabled, params, derived, status } (enabled false: the rest null)
 *   PUT    /api/compare  { lambda|tauS, loading, methods }  → turn on or change; answers like GET
 *   DELETE /api/compare                      → turn off → { enabled: false, … }
 *   POST   /api/compare/promote { side }     → side "compare": its settings become the main chain's
 *       and the main's go to the comparison (a swap, so one more promote goes back); side "main":
 *       keep the main chain and turn the comparison off. Answers { main: { params, derived }, compare }.
 * Its rows stream on the live path + `/compare` (same binary rows as the main path).
 */
import type { FastifyPluginAsync } from 'fastify';
import type { ProcessingParams } from '../../engine/params.ts';
import { HttpError } from '../errors.ts';
import { paramErrorToHttp, type ProcessingDerived } from './processing.ts';
import { createSerial, type Serial } from '../serial.ts';

export interface CompareState {
  enabled: boolean;
  params: ProcessingParams | null;
  derived: ProcessingDerived | null;
  status: Record<string, unknown> | null;
}

export interface CompareController {
  state(): CompareState;
  set(body: unknown): Promise<CompareState>;
  off(): Promise<CompareState>;
  promote(side: 'compare' | 'main'): Promise<{ main: { params: ProcessingParams; derived: ProcessingDerived }; compare: CompareState }>;
}

const toHttp = paramErrorToHttp;

/** @param serial the queue shared with the other routes that change parameters (serial.ts) */
export function compareRoutes(c: CompareController, serial: Serial = createSerial()): FastifyPluginAsync {
  return async (app) => {
    app.get('/compare', async () => c.state());
    app.put('/compare', { schema: { body: { type: 'object' } } }, async (req) =>
      serial(async () => {
        try {
          return await c.set(req.body);
        } catch (e) {
          throw toHttp(e);
        }
      }),
    );
    app.delete('/compare', async () => serial(() => c.off()));
    app.post('/compare/promote', { schema: { body: { type: 'object' } } }, async (req) => {
      const body = req.body as Record<string, unknown>;
      for (const k of Object.keys(body)) if (k !== 'side') throw new HttpError('ERR_HTTP_VALIDATION', { detail: `${k}: unknown field; known: side` });
      if (body.side !== 'compare' && body.side !== 'main') throw new HttpError('ERR_HTTP_VALIDATION', { detail: `side: ${JSON.stringify(body.side)} not allowed; allowed "compare" (its settings become the main chain's) or "main" (keep main, end the comparison)` });
      const side = body.side;
      return serial(async () => {
        if (side === 'compare' && !c.state().enabled) throw new HttpError('ERR_HTTP_VALIDATION', { detail: 'side: "compare" but no comparison chain is running; PUT /api/compare first' });
        return c.promote(side);
      });
    });
  };
}
