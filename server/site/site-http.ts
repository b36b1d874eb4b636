/**
 * The site service's HTTP side: `GET /api/site` (nodes, broker, counters), `GET /api/site/sources`
 * (the latest window's sources and rays), `GET /api/site/plan` and `/api/site/plan/image`, and the
 * site page (client/dist/site.html at `/`). Read-only: nothing here changes the service, so there is
 * no token; Host is checked on every request (server/http/origin-policy.ts, against DNS
 * rebinding), and errors use the HTTP error catalogue (server/http/errors.ts).
 */
import { createReadStream } from 'node:fs';
import { extname } from 'node:path';
import Fastify, { type FastifyInstance } from 'fastify';
import { HttpError } from '../http/errors.ts';
import { shown, type OriginPolicy } from '../http/origin-policy.ts';
import { staticRoutes } from '../http/routes/static.ts';
import type { SitePlanView } from '../../shared/site-view.ts';
import { PLAN_IMAGE_TYPES } from './plan-file.ts';

export interface SiteHttpDeps {
  site: () => unknown;
  sources: () => unknown;
  plan: SitePlanView;
  /** The checked path of the plan's image, or null. */
  planImage: string | null;
  originPolicy?: OriginPolicy;
  staticDir?: string;
  logger?: boolean | object;
}

export function buildSiteApp(d: SiteHttpDeps): FastifyInstance {
  const app = Fastify({ logger: d.logger ?? false, bodyLimit: 4096, forceCloseConnections: true });
  const policy = d.originPolicy;
  if (policy) {
    app.addHook('onRequest', async (req) => {
      const host = req.headers.host;
      if (!policy.hostAllowed(host)) throw new HttpError('ERR_HTTP_HOST_REFUSED', { host: shown(host) });
      if (req.method !== 'GET' && req.method !== 'HEAD' && !policy.originAllowed(req.headers.origin, host)) {
        throw new HttpError('ERR_HTTP_ORIGIN_REFUSED', { origin: shown(req.headers.origin) });
      }
    });
  }
  app.setNotFoundHandler((req, reply) => {
    const e = new HttpError('ERR_HTTP_NOT_FOUND', { method: req.method, url: req.url.split('?')[0] });
    void reply.code(e.statusCode).send(e.toJSON());
  });
  app.setErrorHandler((err: Error & { statusCode?: number }, req, reply) => {
    let e: HttpError;
    if (err instanceof HttpError) e = err;
    else if (err.statusCode && err.statusCode >= 400 && err.statusCode < 500) e = new HttpError('ERR_HTTP_VALIDATION', { detail: err.message });
    else {
      req.log.error(err);
      e = new HttpError('ERR_HTTP_INTERNAL');
    }
    void reply.code(e.statusCode).send(e.toJSON());
  });

  app.get('/api/site', async () => d.site());
  app.get('/api/site/sources', async () => d.sources());
  app.get('/api/site/plan', async () => d.plan);
  app.get('/api/site/plan/image', async (req, reply) => {
    if (!d.planImage) throw new HttpError('ERR_HTTP_NOT_FOUND', { method: 'GET', url: req.url.split('?')[0] });
    return reply.header('content-type', PLAN_IMAGE_TYPES[extname(d.planImage).toLowerCase()]).header('cache-control', 'max-age=60').send(createReadStream(d.planImage));
  });
  if (d.staticDir) app.register(staticRoutes(d.staticDir, 'site.html'));
  return app;
}
