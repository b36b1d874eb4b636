/**
 * Steered beams: `GET /api/beams`, `POST /api/beams` { azimuthDeg, elevationDeg?, method? },
 * `DELETE /api/beams/:id`. The look direction is kept as given; its response is computed on the
 * nearest direction of the scan grid.
 */
import type { FastifyPluginAsync } from 'fastify';
import { HttpError } from '../errors.ts';

export interface BeamView {
  id: number;
  azimuthDeg: number;
  elevationDeg: number;
  method: 'mvdr' | 'delay-and-sum';
  wngDb: number | null;
  responseDb: number[] | null;
  updatedAtMs: number | null;
}

export interface BeamsController {
  list(): readonly BeamView[];
  /** @throws RangeError when no more beams fit */
  add(azimuthDeg: number, elevationDeg: number, method: 'mvdr' | 'delay-and-sum'): BeamView;
  remove(id: number): boolean;
}

function bad(detail: string): HttpError {
  return new HttpError('ERR_HTTP_VALIDATION', { detail });
}

export function beamsRoutes(c: BeamsController): FastifyPluginAsync {
  return async (app) => {
    app.get('/beams', async () => ({ beams: c.list() }));
    app.post('/beams', async (req) => {
      const b = req.body;
      if (typeof b !== 'object' || b === null || Array.isArray(b)) throw bad('(body): must be a JSON object { azimuthDeg, elevationDeg?, method? }');
      const o = b as Record<string, unknown>;
      for (const k of Object.keys(o)) if (!['azimuthDeg', 'elevationDeg', 'method'].includes(k)) throw bad(`${k}: unknown field; known: azimuthDeg, elevationDeg, method`);
      const az = o.azimuthDeg;
      const el = o.elevationDeg ?? 0;
      const method = o.method ?? 'mvdr';
      if (typeof az !== 'number' || !Number.isFinite(az) || az < -360 || az > 720) throw bad(`azimuthDeg: ${JSON.stringify(az)} out of range; allowed a number −360–720`);
      if (typeof el !== 'number' || !Number.isFinite(el) || el < -90 || el > 90) throw bad(`elevationDeg: ${JSON.stringify(el)} out of range; allowed a number −90–90`);
      if (method !== 'mvdr' && method !== 'delay-and-sum') throw bad(`method: ${JSON.stringify(method)} not allowed; allowed mvdr, delay-and-sum`);
      try {
        return c.add(az, el, method);
      } catch (e) {
        throw bad(`(beams): ${(e as Error).message}`);
      }
    });
    app.delete<{ Params: { id: string } }>('/beams/:id', async (req, reply) => {
      const id = Number(req.params.id);
      if (!Number.isInteger(id) || !c.remove(id)) throw new HttpError('ERR_HTTP_NOT_FOUND', { method: 'DELETE', url: `/api/beams/${req.params.id}` });
      return reply.code(204).send();
    });
  };
}
