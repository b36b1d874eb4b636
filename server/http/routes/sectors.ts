/**
 * Sectors (named regions of directions, shared/sectors.ts) over REST:
 *   GET    /api/sectors          → { sectors, maxSectors, file }
 *   GET    /api/sectors/NAME     → { sector }                      404 ERR_HTTP_SECTOR_NOT_FOUND
 *   PUT    /api/sectors/NAME     { azimuthDeg, elevationDeg?, bandHz?, method, weighting }
 *                                → { sector, created } (201 when created, 200 when replaced)
 *   DELETE /api/sectors/NAME     → { deleted: sector, sectors }    404 ERR_HTTP_SECTOR_NOT_FOUND
 * Each change is saved into the array file the server was started with (server/monitor/sectors.ts).
 * The body is closed and names every problem by its field (`azimuthDeg`, `bandHz`): 400
 * ERR_HTTP_VALIDATION; a band is checked against fs/2 and the processing band. A ninth sector is
 * 409 ERR_HTTP_SECTORS_FULL; a file that cannot be rewritten is 500 ERR_HTTP_ARRAY_FILE_FAILED
 * (the file is then unchanged). Mutating calls pass the app's Host/Origin, content-type and token
 * checks like every other mutating route (app.ts).
 */
import type { FastifyPluginAsync } from 'fastify';
import { MAX_SECTORS, MAX_SECTOR_NAME, SECTOR_NAME, validateSectorFields, type Sector } from '../../../shared/sectors.ts';
import { SectorsError, type SectorsController } from '../../monitor/sectors.ts';
import { HttpError } from '../errors.ts';
import { createSerial, type Serial } from '../serial.ts';

/** The path's NAME checked. @throws HttpError 400 */
function sectorName(params: unknown): string {
  const name = (params as { name?: unknown }).name;
  if (typeof name !== 'string' || !SECTOR_NAME.test(name)) {
    throw new HttpError('ERR_HTTP_VALIDATION', { detail: `name: must be 1–${MAX_SECTOR_NAME} letters, digits, _ or - (the last part of /api/sectors/NAME)` });
  }
  return name;
}

/** Check a PUT body for the sector `name`. @throws HttpError 400 naming every problem */
export function parseSectorBody(name: string, body: unknown, c: Pick<SectorsController, 'limits'>): Sector {
  const problems: string[] = [];
  const s = validateSectorFields(body, '', (path, _v, msg) => problems.push(`${path}: ${msg}`), { withName: false, name, limits: c.limits() });
  if (!s || problems.length > 0) throw new HttpError('ERR_HTTP_VALIDATION', { detail: problems.join('; ') });
  return s;
}

function httpError(e: unknown, name: string): unknown {
  if (!(e instanceof SectorsError)) return e;
  if (e.code === 'not-found') return new HttpError('ERR_HTTP_SECTOR_NOT_FOUND', { name });
  if (e.code === 'full') return new HttpError('ERR_HTTP_SECTORS_FULL', { detail: e.message });
  return new HttpError('ERR_HTTP_ARRAY_FILE_FAILED', { detail: e.message });
}

/** @param serial a queue of its own by default: changes run one at a time */
export function sectorsRoutes(c: SectorsController, serial: Serial = createSerial()): FastifyPluginAsync {
  return async (app) => {
    app.get('/sectors', async () => ({ sectors: c.list(), maxSectors: MAX_SECTORS, file: c.file() }));
    app.get('/sectors/:name', async (req) => {
      const name = sectorName(req.params);
      const sector = c.get(name);
      if (!sector) throw new HttpError('ERR_HTTP_SECTOR_NOT_FOUND', { name });
      return { sector };
    });
    app.put('/sectors/:name', async (req, reply) => {
      const name = sectorName(req.params);
      const s = parseSectorBody(name, req.body, c);
      return serial(async () => {
        try {
          const r = await c.put(s);
          void reply.code(r.created ? 201 : 200);
          return r;
        } catch (e) {
          throw httpError(e, name);
        }
      });
    });
    app.delete('/sectors/:name', async (req) => {
      const name = sectorName(req.params);
      return serial(async () => {
        try {
          const deleted = await c.remove(name);
          return { deleted, sectors: c.list() };
        } catch (e) {
          throw httpError(e, name);
        }
      });
    });
  };
}
