/**
 * Recording: `GET /api/recording` (status), `POST /api/recording` { raw?, beams?, encoding?,
 * rotateSeconds?, rotateBytes? } starts one, `DELETE /api/recording` stops it and answers the final status. The
 * folder is the configured `outputs.dir`; a request cannot choose another.
 */
import type { FastifyPluginAsync } from 'fastify';
import { HttpError } from '../errors.ts';

export interface RecordingRequest {
  raw: boolean;
  beams: boolean;
  encoding: 'int16' | 'int24' | 'float32';
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
  if (encoding !== 'int16' && encoding !== 'int24' && encoding !== 'float32') throw bad(`encoding: ${JSON.stringify(encoding)} not allowed; allowed int16, int24, float32`);
  if (rotateSeconds !== null && (typeof rotateSeconds !== 'number' || !(rotateSeconds >= 1 && rotateSeconds <= 86400))) throw bad(`rotateSeconds: ${JSON.stringify(rotateSeconds)} out of range; allowed 1–86400 or null`);
  const rotateBytes = o.rotateBytes ?? null;
  if (rotateBytes !== null && (typeof rotateBytes !== 'number' || !Number.isInteger(rotateBytes) || rotateBytes < 1 << 20 || rotateBytes > 0xffffffff - 4096)) {
    throw bad(`rotateBytes: ${JSON.stringify(rotateBytes)} out of range; allowed an integer 1048576–${0xffffffff - 4096} or null`);
  }
  return { raw, beams, encoding, rotateSeconds: rotateSeconds as number | null, rotateBytes: rotateBytes as number | null };
}

export function recordingRoutes(c: RecordingController): FastifyPluginAsync {
  return async (app) => {
    app.get('/recording', async () => c.status());
    app.post('/recording', async (req) => {
      const r = parseRecordingRequest(req.body);
      try {
        return await c.start(r);
      } catch (e) {
        const err = e as Error & { code?: string };
        throw bad(`(recording): ${err.code ? `${err.code}: ` : ''}${err.message}`);
      }
    });
    app.delete('/recording', async () => c.stop());
  };
}
