/**
 * The fastify application, built from its dependencies and not listening: main.ts (or a test)
 * decides where it listens. Tests drive it in-process with `app.inject()`.
 */
import Fastify, { type FastifyInstance } from 'fastify';
import { HttpError } from './errors.ts';
import { statusRoutes, type StatusProvider } from './routes/status.ts';

export interface AppDeps {
  status: StatusProvider;
  /** fastify logger setting; false in tests. */
  logger?: boolean | object;
}

export const BODY_LIMIT_BYTES = 65536;

export function buildApp(deps: AppDeps): FastifyInstance {
  const app = Fastify({ logger: deps.logger ?? false, bodyLimit: BODY_LIMIT_BYTES });

  app.setNotFoundHandler((req, reply) => {
    const e = new HttpError('ERR_HTTP_NOT_FOUND', { method: req.method, url: req.url.split('?')[0] });
    void reply.code(e.statusCode).send(e.toJSON());
  });

  app.setErrorHandler((err: Error & { statusCode?: number; code?: string; validation?: unknown }, req, reply) => {
    let e: HttpError;
    if (err instanceof HttpError) e = err;
    else if (err.validation) e = new HttpError('ERR_HTTP_VALIDATION', { detail: err.message });
    else if (err.code === 'FST_ERR_CTP_BODY_TOO_LARGE') e = new HttpError('ERR_HTTP_BODY_TOO_LARGE', { limit: BODY_LIMIT_BYTES });
    else if (err.code === 'FST_ERR_CTP_INVALID_JSON_BODY' || err.code === 'FST_ERR_CTP_EMPTY_JSON_BODY') e = new HttpError('ERR_HTTP_BAD_BODY', { detail: err.message });
    else if (err.statusCode && err.statusCode >= 400 && err.statusCode < 500) e = new HttpError('ERR_HTTP_VALIDATION', { detail: err.message });
    else {
      req.log.error(err);
      e = new HttpError('ERR_HTTP_INTERNAL');
    }
    void reply.code(e.statusCode).send(e.toJSON());
  });

  app.register(statusRoutes(deps.status), { prefix: '/api' });
  return app;
}
