/**
 * Recording: `GET /api/recording` (status), `POST /api/recording` { raw?, beams?, encoding?,
 * rotateSeconds?, rotateBytes? } starts one, `DELETE /api/recording` stops it and answers the final status. The
 * folder is the configured `outputs.dir`; a request cannot choose another.
 *
 * Errors: a bad body 400 ERR_HTTP_VALIDATION; starting while recording 409 ERR_HTTP_RECORDING_ACTIVE;
 * stopping when idle 409 ERR_HTTP_NOT_RECORDING; free space below `outputs.minFreeBytes` 507
 * ERR_HTTP_INSUFFICIENT_STORAGE; only a folder the server cannot write is a 5xx
 * (ERR_HTTP_RECORDING_FAILED). No answer carries a folder's absolute path.
 */
import type { FastifyPluginAsync } from 'fastify';
import { isOutputError } from '../../outputs/wav-writer.ts';
import { HttpError } from '../errors.ts';

export interface RecordingRequest {
  raw: boolean;
  beams: boolean;
  encoding: 'int16' | 'int24' | 'int32' | 'float32';
  rotateSeconds: number | null;
  rotateBytes: number | null;
}

export interface RecordingController {
  status(): unknown;
  start(req: RecordingRequest): Promise<unknown>;
  stop(): Promise<unknown>;
}

const bad = (d: string) => new HttpError('ERR_HTTP_VALIDATION', { detail: d });

export function parseRecordingRequest(body: unknown): RecordingRequest {
  const o = (body ?? {}) as Record<string, unknown>;
  if (typeof o !== 'object' || Array.isArray(o)) throw bad('(body): must be a JSON object');
  for (const k of Object.keys(o)) if (!['raw', 'beams', 'encoding', 'rotateSeconds', 'rotateBytes'].includes(k)) throw bad(`${k}: unknown field; known: raw, beams, encoding, rotateSeconds, rotateBytes`);
  const raw = o.raw ?? true;
  const beams = o.beams ?? true;
  const encoding = o.encoding ?? 'float32';
  const rotateSeconds = o.rotateSeconds ?? null;
  if (typeof raw !== 'boolean') throw bad('raw: must be true or false');
  if (typeof beams !== 'boolean') throw bad('beams: must be true or false');
  if (!raw && !beams) throw bad('raw, beams: at least one must be true');
  if (encoding !== 'int16' && encoding !== 'int24' && encoding !== 'int32' && encoding !== 'float32') throw bad(`encoding: ${JSON.stringify(encoding)} not allowed; allowed int16, int24, int32, float32`);
  if (rotateSeconds !== null && (typeof rotateSeconds !== 'number' || !(rotateSeconds >= 1 && rotateSeconds <= 86400))) throw bad(`rotateSeconds: ${JSON.stringify(rotateSeconds)} out of range; allowed 1–86400 or null`);
  const rotateBytes = o.rotateBytes ?? null;
  if (rotateBytes !== null && (typeof rotateBytes !== 'number' || !Number.isInteger(rotateBytes) || rotateBytes < 1 << 20 || rotateBytes > 0xffffffff - 4096)) {
    throw bad(`rotateBytes: ${JSON.stringify(rotateBytes)} out of range; allowed an integer 1048576–${0xffffffff - 4096} or null`);
  }
  return { raw, beams, encoding, rotateSeconds: rotateSeconds as number | null, rotateBytes: rotateBytes as number | null };
}

/** The recorder's errors (server/outputs/wav-writer.ts catalogue) as the API's; others pass (internal). */
export function recordingHttpError(e: unknown): unknown {
  if (!isOutputError(e)) return e;
  switch (e.code) {
    case 'ERR_REC_ALREADY_RECORDING':
      return new HttpError('ERR_HTTP_RECORDING_ACTIVE', { detail: e.detail });
    case 'ERR_REC_NOT_RECORDING':
      return new HttpError('ERR_HTTP_NOT_RECORDING');
    case 'ERR_REC_NO_SPACE':
      return new HttpError('ERR_HTTP_INSUFFICIENT_STORAGE', { detail: e.detail });
    case 'ERR_REC_EXISTS':
      return new HttpError('ERR_HTTP_RECORDING_EXISTS', { detail: e.detail });
    case 'ERR_REC_BAD_OPTIONS':
      return bad(`(recording): ${e.detail}`);
    default:
      return new HttpError('ERR_HTTP_RECORDING_FAILED', { detail: e.detail });
  }
}

export function recordingRoutes(c: RecordingController): FastifyPluginAsync {
  return async (app) => {
    app.get('/recording', async () => c.status());
    app.post('/recording', async (req) => {
      const r = parseRecordingRequest(req.body);
      try {
        return await c.start(r);
      } catch (e) {
        throw recordingHttpError(e);
      }
    });
    app.delete('/recording', async () => {
      try {
        return await c.stop();
      } catch (e) {
        throw recordingHttpError(e);
      }
    });
  };
}
