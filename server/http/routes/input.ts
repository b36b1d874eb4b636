/**
 * The input: `GET /api/input` → what feeds the array now (source kind, the processed stream and
 * where it comes from, every stream, RTP session, capture command and member of a merged array,
 * with their counters); `PUT /api/input/stream { "streamId": N }` processes that own-format stream
 * from now on (journaled; the timeline flags a discontinuity). 404 when no such stream has been
 * received, 409 when the input is not chosen by stream (a merged array, a capture command, the
 * simulator).
 */
import type { FastifyPluginAsync } from 'fastify';
import { HttpError } from '../errors.ts';

export interface InputController {
  describe(): Record<string, unknown>;
  /** Switch the processed stream; throws HttpError (404, 409) when it cannot. */
  selectStream(streamId: number): Record<string, unknown>;
}

export function inputRoutes(c: InputController): FastifyPluginAsync {
  return async (app) => {
    app.get('/input', async () => c.describe());
    app.put('/input/stream', async (req) => {
      const b = req.body as Record<string, unknown> | null;
      const bad = (d: string) => new HttpError('ERR_HTTP_VALIDATION', { detail: d });
      if (typeof b !== 'object' || b === null || Array.isArray(b)) throw bad('(body): must be a JSON object { "streamId": N }');
      for (const k of Object.keys(b)) if (k !== 'streamId') throw bad(`${k}: unknown field; known: streamId`);
      const id = b.streamId;
      if (!Number.isInteger(id) || (id as number) < 0 || (id as number) > 0xffffffff) throw bad(`streamId: ${JSON.stringify(id)}: allowed a whole number 0–4294967295`);
      return c.selectStream(id as number);
    });
  };
}
