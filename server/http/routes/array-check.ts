/**
 * The array check over REST:
 *   GET  /api/array-check                 → { running, checks, failures, last, calibration, savedAt, applies }
 *   POST /api/array-check { azimuthDeg?, elevationDeg?, seconds?, misplacedBoundUs? }
 *        → taps the next `seconds` (0.5–10, default 2) of the live input, answers the per-channel rows,
 *          the faults in plain words and the proposed calibration (engine/array-check-runner.ts).
 *          409 ERR_HTTP_CHECK_RUNNING while one runs; 503 ERR_HTTP_CHECK_NO_INPUT without input.
 *   POST /api/array-check/calibration { gainDb, delayUs, polarity?, channelOrder?, sensitivityMvPerPa?, fullScaleVolts? }
 *        → saved into the array file's `calibration` and applied to the running processing at once.
 * Bodies are closed: an unknown field is a 400 naming the known ones.
 */
import type { FastifyPluginAsync } from 'fastify';
import { validateCalibration } from '../../config/array-file.ts';
import { ConfigError } from '../../config/validate.ts';
import { ArrayCheckError, MAX_CHECK_SECONDS, MIN_CHECK_SECONDS, type ArrayCheckController, type ArrayCheckRequest } from '../../engine/array-check-runner.ts';
import { publicText } from '../../public-text.ts';
import type { ChannelCalibration } from '../../../shared/types.ts';
import { HttpError } from '../errors.ts';

export type { ArrayCheckController };

const FIELDS = ['azimuthDeg', 'elevationDeg', 'seconds', 'misplacedBoundUs'] as const;
/** Allowed ranges of the check's body (a bound above 1 ms would hide every misplacement). */
const RANGES: Record<(typeof FIELDS)[number], [number, number, string]> = {
  azimuthDeg: [-360, 360, '°'],
  elevationDeg: [-90, 90, '°'],
  seconds: [MIN_CHECK_SECONDS, MAX_CHECK_SECONDS, 's'],
  misplacedBoundUs: [1, 1000, 'µs'],
};

/** Check a POST /api/array-check body; throws HttpError 400 naming the field. */
export function parseCheckBody(body: unknown): ArrayCheckRequest {
  if (body === undefined || body === null) return {};
  if (typeof body !== 'object' || Array.isArray(body)) throw new HttpError('ERR_HTTP_VALIDATION', { detail: 'body: must be a JSON object' });
  const b = body as Record<string, unknown>;
  for (const k of Object.keys(b)) if (!(FIELDS as readonly string[]).includes(k)) throw new HttpError('ERR_HTTP_VALIDATION', { detail: `${k}: unknown field; known: ${FIELDS.join(', ')}` });
  const out: ArrayCheckRequest = {};
  for (const k of FIELDS) {
    const v = b[k];
    if (v === undefined) continue;
    const [lo, hi, unit] = RANGES[k];
    if (typeof v !== 'number' || !Number.isFinite(v) || v < lo || v > hi) throw new HttpError('ERR_HTTP_VALIDATION', { detail: `${k}: ${JSON.stringify(v)} not allowed; a number in ${lo}–${hi} ${unit}` });
    out[k] = v;
  }
  if (out.elevationDeg !== undefined && out.azimuthDeg === undefined) throw new HttpError('ERR_HTTP_VALIDATION', { detail: 'elevationDeg: given without azimuthDeg; state both, or neither to use the strongest peak' });
  return out;
}

/** Check a calibration body against the array's channel count (the array file's own rules). */
export function parseCalibrationBody(body: unknown, channels: number): ChannelCalibration {
  const messages: string[] = [];
  const cal = validateCalibration(body, channels, (path, _v, msg) => messages.push(`${path} ${msg}`));
  if (messages.length > 0 || !cal) throw new HttpError('ERR_HTTP_CALIBRATION_INVALID', { detail: messages.join('; ') || 'calibration: must be an object' });
  // validateCalibration fills an absent list with zeros; the body must state both lists.
  const o = body as Record<string, unknown>;
  for (const k of ['gainDb', 'delayUs']) if (o[k] === undefined) throw new HttpError('ERR_HTTP_CALIBRATION_INVALID', { detail: `calibration.${k} is missing: give one number per position, ${channels} in all` });
  return cal;
}

export function arrayCheckRoutes(c: ArrayCheckController): FastifyPluginAsync {
  return async (app) => {
    app.get('/array-check', async () => c.state());
    app.post('/array-check', async (req) => {
      const request = parseCheckBody(req.body);
      try {
        return await c.run(request);
      } catch (e) {
        if (!(e instanceof ArrayCheckError)) throw e;
        const f = e.failure;
        if (f.kind === 'running') throw new HttpError('ERR_HTTP_CHECK_RUNNING', { startedAt: f.startedAt });
        if (f.kind === 'no-input') throw new HttpError('ERR_HTTP_CHECK_NO_INPUT', { got: f.got, want: f.want, waitedS: f.waitedS, detail: f.detail });
        throw new HttpError('ERR_HTTP_CHECK_FAILED', { detail: publicText(f.detail) });
      }
    });
    app.post('/array-check/calibration', async (req) => {
      const cal = parseCalibrationBody(req.body, c.channels);
      try {
        return await c.saveCalibration(cal);
      } catch (e) {
        if (e instanceof ConfigError) throw new HttpError('ERR_HTTP_CALIBRATION_WRITE_FAILED', { detail: publicText(e.issues.map((i) => i.message).join('; ')) });
        if (e instanceof HttpError) throw e;
        throw new HttpError('ERR_HTTP_CALIBRATION_WRITE_FAILED', { detail: publicText(e) });
      }
    });
  };
}
