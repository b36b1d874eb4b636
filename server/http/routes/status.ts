/** `GET /api/status`: what the server is, what it listens on, and what has arrived. */
import type { FastifyPluginAsync } from 'fastify';

export type StatusProvider = () => Record<string, unknown>;

export function statusRoutes(status: StatusProvider): FastifyPluginAsync {
  return async (app) => {
    app.get('/status', async () => status());
  };
}
