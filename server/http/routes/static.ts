/**
 * The dashboard's files (client/dist, built by `npm run build:client`, which `npm ci` runs): `/`
 * gives index.html, `/assets/…` the bundles. Only files inside the folder are served; paths are
 * checked after normalisation. Without a build, `/` says how to make one.
 */
import type { FastifyPluginAsync } from 'fastify';
import { readFile } from 'node:fs/promises';
import { extname, join, normalize, sep } from 'node:path';

const TYPES: Record<string, string> = {
  '.html': 'text/html; charset=utf-8',
  '.js': 'text/javascript; charset=utf-8',
  '.css': 'text/css; charset=utf-8',
  '.svg': 'image/svg+xml',
  '.png': 'image/png',
  '.ico': 'image/x-icon',
  '.json': 'application/json',
  '.woff2': 'font/woff2',
};

/** `page`: the HTML file served at `/` (the site service serves site.html from the same build). */
export function staticRoutes(dir: string, page = 'index.html'): FastifyPluginAsync {
  const root = join(normalize(dir), sep);
  return async (app) => {
    const send = async (rel: string, reply: import('fastify').FastifyReply) => {
      const path = normalize(join(root, rel));
      if (!path.startsWith(root)) return reply.code(404).send({ error: { code: 'ERR_HTTP_NOT_FOUND', message: `no file ${rel}`, statusCode: 404 } });
      try {
        const body = await readFile(path);
        const type = TYPES[extname(path)] ?? 'application/octet-stream';
        return reply.header('content-type', type).header('cache-control', rel === page ? 'no-cache' : 'max-age=3600').send(body);
      } catch {
        if (rel === page) {
          return reply.code(503).header('content-type', 'text/plain; charset=utf-8').send('The dashboard is not built: run `npm run build:client` (npm ci does it), then reload.');
        }
        return reply.code(404).send({ error: { code: 'ERR_HTTP_NOT_FOUND', message: `no file ${rel}`, statusCode: 404 } });
      }
    };
    app.get('/', async (_req, reply) => send(page, reply));
    app.get<{ Params: { '*': string } }>('/assets/*', async (req, reply) => send(`assets/${req.params['*']}`, reply));
    app.get('/favicon.ico', async (_req, reply) => reply.code(204).send());
  };
}
