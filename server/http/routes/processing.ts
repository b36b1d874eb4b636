/**
 * The live processing parameters over REST:
 *   GET   /api/processing        → { params, derived }
 *   PUT   /api/processing        every field of ProcessingParams → { params, derived } as applied
 *   PATCH /api/processing        any subset, `tauS` instead of `lambda` allowed → { params, derived }
 *   POST  /api/processing/reset  forget the covariance estimates → 204
 *
 * Fastify schemas check only the body's outer shape (an object; for PUT, every field present);
 * server/engine/params.ts patchParams is the authority for fields and ranges. Every refusal is
 * ERR_HTTP_VALIDATION with the message `<field>: <why>`. Changes (and resets) are applied one at a
 * time in arrival order, each on top of the previous one, so two concurrent PATCHes cannot undo
 * each other. The bearer-token check for mutating requests lives in app.ts (it covers every route).
 */
import type { FastifyPluginAsync, FastifySchema } from 'fastify';
import { ParamError, patchParams, type ProcessingParams } from '../../engine/params.ts';
import { PlanError } from '../../engine/plan-error.ts';
import type { ProcessingDerived } from '../../../shared/messages.ts';
import { HttpError } from '../errors.ts';
import { createSerial, type Serial } from '../serial.ts';

export type { ProcessingDerived };

/** What the routes drive: the engine (or a fake in tests). */
export interface ProcessingController {
  /** The parameters in force. */
  get(): ProcessingParams;
  /**
   * Apply fully validated parameters (from the next hop); returns what was applied. May throw
   * ParamError to refuse a combination only the engine can judge (answered 400 like the others).
   */
  apply(next: ProcessingParams): Promise<ProcessingParams> | ProcessingParams;
  /** Figures derived from the parameters in force; hopSamples and sampleRateHz also feed tauS. */
  derived(): ProcessingDerived;
  /** Forget the covariance estimates (they rebuild from the next hop). */
  reset(): void | Promise<void>;
}

/** The fields PUT requires: all of ProcessingParams (grid.elevationDeg stays optional inside grid). */
export const PROCESSING_FIELDS = ['lambda', 'loading', 'bandHz', 'grid', 'methods', 'spectrumRateHz', 'normalise', 'fftSize'] as const satisfies readonly (keyof ProcessingParams)[];

interface AjvError {
  keyword: string;
  instancePath: string;
  params: Record<string, unknown>;
  message?: string;
}

/** ajv errors → the one message shape `<field>: <why>` (the body itself is `(body)`, as in patchParams). */
function schemaError(errors: AjvError[]): Error {
  const e = errors[0];
  const path = e.instancePath.replace(/^\//, '').replace(/\//g, '.');
  if (e.keyword === 'required') {
    const f = [path, String(e.params.missingProperty)].filter(Boolean).join('.');
    return new HttpError('ERR_HTTP_VALIDATION', { detail: `${f}: required; PUT replaces every field (use PATCH to change some)` });
  }
  return new HttpError('ERR_HTTP_VALIDATION', { detail: `${path || '(body)'}: ${e.message ?? e.keyword}` });
}

// Outer shapes only. Member types are deliberately not declared: fastify's ajv coerces declared
// types ("0.9" → 0.9), and patchParams must see what the client sent.
const patchSchema: FastifySchema = { body: { type: 'object' } };
const putSchema: FastifySchema = { body: { type: 'object', required: [...PROCESSING_FIELDS] } };

const PLAN_ERRORS = { 'too-large': 'ERR_HTTP_PLAN_TOO_LARGE', refused: 'ERR_HTTP_PLAN_REFUSED', timeout: 'ERR_HTTP_CHANGE_TIMEOUT' } as const;

/**
 * A parameter refusal as the 400 every parameter route answers; a plan that cannot be built as 422
 * (too large for the budget, or refused by a worker) or 503 (not built in time); others as they are.
 */
export function paramErrorToHttp(e: unknown): unknown {
  if (e instanceof ParamError) return new HttpError('ERR_HTTP_VALIDATION', { detail: e.message });
  if (e instanceof PlanError) return new HttpError(PLAN_ERRORS[e.kind], { detail: e.message });
  return e;
}
const toHttp = paramErrorToHttp;

/** @param serial the queue shared with the other routes that change parameters (serial.ts) */
export function processingRoutes(controller: ProcessingController, serial: Serial = createSerial()): FastifyPluginAsync {
  return async (app) => {
    const answer = (params: ProcessingParams) => ({ params, derived: controller.derived() });
    const change = (body: unknown) =>
      serial(async () => {
        try {
          const d = controller.derived();
          const next = patchParams(controller.get(), body, { sampleRateHz: d.sampleRateHz, hop: d.hopSamples });
          return answer(await controller.apply(next));
        } catch (e) {
          throw toHttp(e);
        }
      });

    app.get('/processing', async () => answer(controller.get()));
    app.put('/processing', { schema: putSchema, schemaErrorFormatter: schemaError }, async (req) => change(req.body));
    app.patch('/processing', { schema: patchSchema, schemaErrorFormatter: schemaError }, async (req) => change(req.body));
    app.post('/processing/reset', async (_req, reply) => {
      await serial(async () => controller.reset());
      return reply.code(204).send();
    });
  };
}
