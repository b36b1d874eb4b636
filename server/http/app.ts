/**
 * The fastify application, built from its dependencies and not listening: main.ts (or a test)
 * decides where it listens. Tests drive it in-process with `app.inject()`.
 */
import { createHash, timingSafeEqual } from 'node:crypto';
import Fastify, { type FastifyInstance, type FastifyRequest } from 'fastify';
import { AuthFailureLimiter, createAccessStats, noteRefusal, type AccessStats } from './access.ts';
import { HttpError } from './errors.ts';
import { parseJsonBody } from './json-body.ts';
import { shown, type OriginPolicy } from './origin-policy.ts';
import { tokenBuckets } from './token-buckets.ts';
import { beamsRoutes, type BeamsController } from './routes/beams.ts';
import { channelsRoutes, type ChannelsController } from './routes/channels.ts';
import { inputRoutes, type InputController } from './routes/input.ts';
import { processingRoutes, type ProcessingController } from './routes/processing.ts';
import { recordingRoutes, type RecordingController } from './routes/recording.ts';
import { sessionRoutes, type SessionController } from './routes/session.ts';
import { compareRoutes, type CompareController } from './routes/compare.ts';
import { landmarksRoutes, type LandmarksController } from './routes/landmarks.ts';
import { levelsRoutes, type LevelsController } from './routes/levels.ts';
import { rulesRoutes, type RulesRoutesDeps } from './routes/rules.ts';
import { sectorsRoutes } from './routes/sectors.ts';
import type { SectorsController } from '../monitor/sectors.ts';
import { actorOf, runAs } from './actor.ts';
import { createSerial, type SerialStats } from './serial.ts';
import { staticRoutes } from './routes/static.ts';
import { statusRoutes, type StatusProvider } from './routes/status.ts';
import { arrayCheckRoutes, type ArrayCheckController } from './routes/array-check.ts';
// Issue 16 (dashboard): GET /api/clips/FILE, event clips from outputs.dir/clips.
import { clipsRoutes } from './routes/clips.ts';
// Issue 16 (metrics): GET /metrics, guarded like GET /api/status.
import { METRICS_PATH, metricsRoutes, type MetricsProvider } from './routes/metrics.ts';

export interface AppDeps {
  status: StatusProvider;
  /** The live processing parameters (`/api/processing`); the routes are absent without it. */
  processing?: ProcessingController;
  /** Channel levels and masking (`/api/channels`); absent without it. */
  channels?: ChannelsController;
  /** The input picture and the processed stream (`/api/input`); absent without it. */
  input?: InputController;
  /** Recording (`/api/recording`); absent without it. */
  recording?: RecordingController;
  /** Parameter journal and presets (`/api/journal`, `/api/presets`); absent without it. */
  session?: SessionController;
  /** The comparison chain (`/api/compare`); absent without it. */
  compare?: CompareController;
  /** Steered beams (`/api/beams`); absent without it. */
  beams?: BeamsController;
  /** Named azimuths saved in the array file (`/api/landmarks`); absent without it. */
  landmarks?: LandmarksController;
  /** Sectors saved in the array file (`/api/sectors`); absent without it. */
  sectors?: SectorsController;
  /** The array check and saving its calibration (`/api/array-check`); absent without it. */
  arrayCheck?: ArrayCheckController;
  /** `GET /metrics` (Prometheus text exposition format), guarded like status; absent without it. */
  metrics?: MetricsProvider;
  /** Serves the built dashboard (client/dist) at `/` when given. */
  staticDir?: string;
  /**
   * When set, every mutating request (any method but GET, HEAD, OPTIONS) needs
   * `Authorization: Bearer <token>`, else 401 ERR_HTTP_UNAUTHORIZED. null/absent: no check.
   */
  token?: string | null;
  /**
   * Only with a token: true (default) leaves GET/HEAD under /api open; false makes them need the
   * token too (and GET /metrics, guarded like status). The dashboard page (`/`) and `/assets` stay open either way. (The WebSocket
   * upgrades do not pass through fastify and are not covered by this check.)
   */
  openStatus?: boolean;
  /**
   * Token bucket per client IP on mutating requests: `perS` refill, `burst` size; beyond it 429
   * ERR_HTTP_RATE_LIMITED with Retry-After. Default 20/s, burst 40; null or perS 0: no limit.
   * `now` (ms clock) is for tests.
   */
  rateLimit?: { perS: number; burst: number; now?: () => number } | null;
  /**
   * Host and Origin checks and the JSON content type on mutating requests (access.ts, steps 1–3).
   * Absent: none of the three (route tests built in-process).
   */
  originPolicy?: OriginPolicy;
  /** Refusal counts, shared with the upgrade checks and shown in status; one is made when absent. */
  accessStats?: AccessStats;
  /** Failed authentications per client IP, shared with the upgrade checks (access.ts step 4). */
  authFailures?: AuthFailureLimiter;
  /** Counts parameter changes answered at their deadline (serial.ts). */
  serialStats?: SerialStats;
  /** fastify logger setting; false in tests. */
  logger?: boolean | object;
  /** Levels per direction kept in memory (`GET /api/levels`; server/monitor/monitor.ts); absent without it. */
  levels?: LevelsController;
  /** Monitoring rules and events (`/api/rules`, `/api/events`); absent without them. */
  rules?: RulesRoutesDeps;
  /** outputs.dir/clips, resolved: `GET /api/clips/FILE` serves event clips from it; absent without it. */
  clipsDir?: string;
}

const READ_ONLY_METHODS = new Set(['GET', 'HEAD', 'OPTIONS']);

/** Compare bearer tokens in constant time (both sides hashed, so lengths always match). */
function tokenMatches(header: string | undefined, digest: Buffer): boolean {
  const m = /^Bearer[ ]+(\S+)\s*$/i.exec(header ?? '');
  if (!m) return false;
  return timingSafeEqual(createHash('sha256').update(m[1]).digest(), digest);
}

export const BODY_LIMIT_BYTES = 65536;
export const DEFAULT_RATE_LIMIT = { perS: 20, burst: 40 } as const;
export function buildApp(deps: AppDeps): FastifyInstance {
  // forceCloseConnections: close() must not wait for a browser's idle keep-alive sockets.
  const app = Fastify({ logger: deps.logger ?? false, bodyLimit: BODY_LIMIT_BYTES, forceCloseConnections: true });

  const stats = deps.accessStats ?? createAccessStats();
  const refuse = (req: FastifyRequest, reason: Parameters<typeof noteRefusal>[1]) => noteRefusal(stats, reason, req.method, req.url, req.ip);

  // The JSON parser: an empty body is no body (DELETE and body-less POSTs carry the content type
  // too), and nesting is limited before parsing, so no message about a body can overflow the stack.
  app.removeContentTypeParser('application/json');
  app.addContentTypeParser('application/json', { parseAs: 'string' }, (_req, body, done) => {
    try {
      done(null, parseJsonBody(body as string));
    } catch (e) {
      done(e as Error, undefined);
    }
  });

  // Steps 1–3 of access.ts: Host, Origin, content type; before the body is read.
  const policy = deps.originPolicy;
  if (policy) {
    app.addHook('onRequest', async (req) => {
      const host = req.headers.host;
      if (!policy.hostAllowed(host)) {
        refuse(req, 'host');
        throw new HttpError('ERR_HTTP_HOST_REFUSED', { host: shown(host) });
      }
      if (READ_ONLY_METHODS.has(req.method)) return;
      const origin = req.headers.origin;
      if (!policy.originAllowed(origin, host)) {
        refuse(req, 'origin');
        throw new HttpError('ERR_HTTP_ORIGIN_REFUSED', { origin: shown(origin) });
      }
      const type = (req.headers['content-type'] ?? '').split(';')[0].trim().toLowerCase();
      if (type !== 'application/json') {
        refuse(req, 'contentType');
        throw new HttpError('ERR_HTTP_UNSUPPORTED_MEDIA_TYPE', { method: req.method, url: req.url.split('?')[0] });
      }
    });
  }

  // Step 4: the token, with failed attempts limited per client IP; the right token always passes.
  if (deps.token !== undefined && deps.token !== null) {
    if (typeof deps.token !== 'string' || deps.token.length === 0 || /\s/.test(deps.token)) throw new RangeError('token must be a non-empty string without whitespace');
    const digest = createHash('sha256').update(deps.token).digest();
    const closedReads = deps.openStatus === false;
    const failures = deps.authFailures ?? new AuthFailureLimiter();
    // onRequest: refused before the body is read or parsed.
    app.addHook('onRequest', async (req, reply) => {
      if (READ_ONLY_METHODS.has(req.method)) {
        // The matched route's pattern, not the raw URL (which may be percent-encoded); a request
        // that matches no route counts as under /api. /metrics is guarded like status (issue 16).
        const route = req.routeOptions.url;
        const open = route !== undefined && route !== '/api' && !route.startsWith('/api/') && route !== METRICS_PATH;
        if (!closedReads || req.method === 'OPTIONS' || open) return;
      }
      if (tokenMatches(req.headers.authorization, digest)) return;
      const retryS = failures.fail(req.ip);
      if (retryS > 0) {
        refuse(req, 'authLimited');
        void reply.header('Retry-After', String(retryS));
        throw new HttpError('ERR_HTTP_AUTH_LIMITED', { burst: failures.burst, perS: failures.perS, retryS });
      }
      refuse(req, 'unauthorized');
      void reply.header('WWW-Authenticate', 'Bearer realm="nullsteer"');
      throw new HttpError('ERR_HTTP_UNAUTHORIZED', { method: req.method, url: req.url.split('?')[0] });
    });
  }

  // Step 5: the control rate, counted only for requests that got this far (authorised ones).
  const rl = deps.rateLimit === undefined ? DEFAULT_RATE_LIMIT : deps.rateLimit;
  if (rl && rl.perS > 0) {
    if (!(rl.perS > 0 && Number.isFinite(rl.perS)) || !(Number.isInteger(rl.burst) && rl.burst >= 1)) throw new RangeError('rateLimit needs perS > 0 and an integer burst ≥ 1');
    const buckets = tokenBuckets(rl.perS, rl.burst, 'now' in rl && rl.now ? rl.now : () => performance.now());
    app.addHook('onRequest', async (req, reply) => {
      if (READ_ONLY_METHODS.has(req.method)) return;
      const waitS = buckets.take(req.ip);
      if (waitS === 0) return;
      const retryS = Math.max(1, Math.ceil(waitS));
      refuse(req, 'rateLimited');
      void reply.header('Retry-After', String(retryS));
      throw new HttpError('ERR_HTTP_RATE_LIMITED', { perS: rl.perS, burst: rl.burst, retryS });
    });
  }

  app.setNotFoundHandler((req, reply) => {
    const e = new HttpError('ERR_HTTP_NOT_FOUND', { method: req.method, url: req.url.split('?')[0] });
    void reply.code(e.statusCode).send(e.toJSON());
  });

  app.setErrorHandler((err: Error & { statusCode?: number; code?: string; validation?: unknown }, req, reply) => {
    let e: HttpError;
    if (err instanceof HttpError) e = err;
    else if (err.validation) e = new HttpError('ERR_HTTP_VALIDATION', { detail: err.message });
    else if (err.code === 'FST_ERR_CTP_BODY_TOO_LARGE') e = new HttpError('ERR_HTTP_BODY_TOO_LARGE', { limit: BODY_LIMIT_BYTES });
    else if (err.code === 'FST_ERR_CTP_INVALID_JSON_BODY' || err.code === 'FST_ERR_CTP_EMPTY_JSON_BODY') e = new HttpError('ERR_HTTP_BAD_BODY', { detail: `request body is not valid JSON: ${err.message}` });
    else if (err.statusCode && err.statusCode >= 400 && err.statusCode < 500) e = new HttpError('ERR_HTTP_VALIDATION', { detail: err.message });
    else {
      req.log.error(err);
      e = new HttpError('ERR_HTTP_INTERNAL');
    }
    void reply.code(e.statusCode).send(e.toJSON());
  });

  // Every request runs as its client, so changes deep below the routes are journaled with who made them.
  app.addHook('onRequest', (req, _reply, done) => runAs(actorOf(req.ip, req.headers['user-agent']), done));

  app.register(statusRoutes(deps.status), { prefix: '/api' });

  // Parameter changes from any route (processing, presets, comparison) go through one queue.
  const serial = createSerial(undefined, deps.serialStats);
  if (deps.processing) app.register(processingRoutes(deps.processing, serial), { prefix: '/api' });
  if (deps.session) app.register(sessionRoutes(deps.session, serial), { prefix: '/api' });
  if (deps.compare) app.register(compareRoutes(deps.compare, serial), { prefix: '/api' });
  if (deps.beams) app.register(beamsRoutes(deps.beams), { prefix: '/api' });
  if (deps.channels) app.register(channelsRoutes(deps.channels), { prefix: '/api' });
  if (deps.input) app.register(inputRoutes(deps.input), { prefix: '/api' });
  if (deps.recording) app.register(recordingRoutes(deps.recording), { prefix: '/api' });
  if (deps.landmarks) app.register(landmarksRoutes(deps.landmarks), { prefix: '/api' });
  if (deps.levels) app.register(levelsRoutes(deps.levels), { prefix: '/api' });
  if (deps.rules) app.register(rulesRoutes(deps.rules), { prefix: '/api' });
  if (deps.sectors) app.register(sectorsRoutes(deps.sectors), { prefix: '/api' });
  if (deps.arrayCheck) app.register(arrayCheckRoutes(deps.arrayCheck), { prefix: '/api' });
  if (deps.clipsDir) app.register(clipsRoutes(deps.clipsDir), { prefix: '/api' });
  if (deps.metrics) app.register(metricsRoutes(deps.metrics));
  if (deps.staticDir) app.register(staticRoutes(deps.staticDir));
  return app;
}
