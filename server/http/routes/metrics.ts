/**
 * `GET /metrics`: the server's figures in the Prometheus text exposition format, version 0.0.4
 * (server/monitor/metrics.ts). Guarded like `GET /api/status` (app.ts: Host check always; the
 * token when `access.openStatus` is false).
 */
import type { FastifyPluginAsync } from 'fastify';
import { METRICS_CONTENT_TYPE } from '../../monitor/metrics.ts';

export const METRICS_PATH = '/metrics';

/** The exposition text of one scrape. */
export type MetricsProvider = () => Promise<string>;

export function metricsRoutes(render: MetricsProvider): FastifyPluginAsync {
  return async (app) => {
    app.get(METRICS_PATH, async (_req, reply) => {
      const text = await render();
      return reply.header('content-type', METRICS_CONTENT_TYPE).header('cache-control', 'no-store').send(text);
    });
  };
}
