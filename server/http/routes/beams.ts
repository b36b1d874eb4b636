/**
 * Steered beams: `GET /api/beams`, `POST /api/beams` { azimuthDeg, elevationDeg?, method? },
 * `DELETE /api/beams/:id`. The look direction is kept as given; its response is computed on the
 * nearest direction of the scan grid.
 */
import type { FastifyPluginAsync } from 'fastify';
import type { BeamState } from '../../engine/beam-set.ts';
import { HttpError } from '../errors.ts';

/** A beam as the API shows it: the engine's own record (engine/beam-set.ts). */
export type BeamView = BeamState;

export interface BeamsController {
  list(): readonly BeamView[];
  /** @throws RangeError when no more beams fit */
  add(azimuthDeg: number, elevationDeg: number, method: 'mvdr' | 'delay-and-sum'): BeamView;
  remove(id: number): boolean;
  update(id: number, patch: Partial<Pick<BeamView, 'azimuthDeg' | 'elevationDeg' | 'method' | 'gainDb' | 'limiter' | 'updateEvery'>>): BeamView | null;
  /** Delay of the beam audio behind the input, seconds. */
  latencyS(): number;
}

type BeamPatch = Parameters<BeamsController['update']>[1];

/** Validate the fields of a beam body; `partial` allows any subset (PATCH). */
function beamFields(body: unknown, partial: boolean): BeamPatch {
  if (typeof body !== 'object' || body === null || Array.isArray(body)) throw bad('(body): must be a JSON object { azimuthDeg, elevationDeg?, method?, gainDb?, limiter?, updateEvery? }');
  const o = body as Record<string, unknown>;
  const known = ['azimuthDeg', 'elevationDeg', 'method', 'gainDb', 'limiter', 'updateEvery'];
  for (const k of Object.keys(o)) if (!known.includes(k)) throw bad(`${k}: unknown field; known: ${known.join(', ')}`);
  const out: BeamPatch = {};
  const num = (k: string, lo: number, hi: number, int = false) => {
    const v = o[k];
    if (typeof v !== 'number' || !Number.isFinite(v) || v < lo || v > hi || (int && !Number.isInteger(v))) throw bad(`${k}: ${JSON.stringify(v)} out of range; allowed ${int ? 'an integer' : 'a number'} ${lo}–${hi}`);
    return v;
  };
  if (o.azimuthDeg !== undefined || !partial) out.azimuthDeg = num('azimuthDeg', -360, 720);
  if (o.elevationDeg !== undefined) out.elevationDeg = num('elevationDeg', -90, 90);
  if (o.gainDb !== undefined) out.gainDb = num('gainDb', -60, 40);
  if (o.updateEvery !== undefined) out.updateEvery = num('updateEvery', 1, 100, true);
  if (o.method !== undefined) {
    if (o.method !== 'mvdr' && o.method !== 'delay-and-sum') throw bad(`method: ${JSON.stringify(o.method)} not allowed; allowed mvdr, delay-and-sum`);
    out.method = o.method;
  }
  if (o.limiter !== undefined) {
    if (typeof o.limiter !== 'boolean') throw bad('limiter: must be true or false');
    out.limiter = o.limiter;
  }
  return out;
}

function bad(detail: string): HttpError {
  return new HttpError('ERR_HTTP_VALIDATION', { detail });
}

export function beamsRoutes(c: BeamsController): FastifyPluginAsync {
  return async (app) => {
    app.get('/beams', async () => ({ beams: c.list(), audioLatencyS: c.latencyS() }));
    app.post('/beams', async (req) => {
      const f = beamFields(req.body, false);
      try {
        const b = c.add(f.azimuthDeg!, f.elevationDeg ?? 0, f.method ?? 'mvdr');
        const { azimuthDeg: _a, elevationDeg: _e, method: _m, ...rest } = f;
        return Object.keys(rest).length > 0 ? c.update(b.id, rest) : b;
      } catch (e) {
        throw bad(`(beams): ${(e as Error).message}`);
      }
    });
    app.patch<{ Params: { id: string } }>('/beams/:id', async (req) => {
      const f = beamFields(req.body, true);
      const b = c.update(Number(req.params.id), f);
      if (!b) throw new HttpError('ERR_HTTP_NOT_FOUND', { method: 'PATCH', url: `/api/beams/${req.params.id}` });
      return b;
    });
    app.delete<{ Params: { id: string } }>('/beams/:id', async (req, reply) => {
      const id = Number(req.params.id);
      if (!Number.isInteger(id) || !c.remove(id)) throw new HttpError('ERR_HTTP_NOT_FOUND', { method: 'DELETE', url: `/api/beams/${req.params.id}` });
      return reply.code(204).send();
    });
  };
}
