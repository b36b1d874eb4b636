/**
 * `nullsteer site`: run the site service (server/site/site-service.ts) for one site.
 */
import { fileURLToPath } from 'node:url';
import { SITE_NAME } from '../../shared/site.ts';
import { processIo } from '../main.ts';
import { FlagError, parseFlags, USAGE_EXIT_CODE } from './flag-suggest.ts';
import { DEFAULT_PLAN, loadPlan, PlanError, type SitePlan } from '../site/plan-file.ts';

export const SITE_USAGE = `usage: nullsteer site --nats URL --site SITE --http-port P [--plan plan.json] [--host H] [--token T]
  Runs the site service: listens to every node of SITE on the NATS broker, locates the sources they
  hear per window on UTC, and serves the site page at http://H:P/.
  --nats             the broker, nats://HOST:PORT
  --site             the site's name (1–32 letters, digits, _ or -)
  --http-port        the site page's port, 1–65535 (0: any free port)
  --plan             plan.json: the site plan drawn under the arrays (default: 100 m × 100 m around 0)
  --host             address to bind (default 127.0.0.1)
  --token            the broker's token (default: the NULLSTEER_NATS_TOKEN environment variable)
  --window-s         window length, seconds, 0.1–10 (default 0.5)
  --offline-after-s  a node not heard from this long is offline, seconds, 0.5–60 (default 3)`;

const OPTIONS = {
  nats: { type: 'string' },
  site: { type: 'string' },
  'http-port': { type: 'string' },
  plan: { type: 'string' },
  host: { type: 'string' },
  token: { type: 'string' },
  'window-s': { type: 'string' },
  'offline-after-s': { type: 'string' },
  help: { type: 'boolean', short: 'h' },
} as const;

export interface SiteArgs {
  natsUrl: string;
  site: string;
  httpPort: number;
  planFile: string | null;
  host: string;
  token: string | null;
  windowS: number;
  offlineAfterS: number;
  help: boolean;
}

function numberFlag(name: string, v: string | undefined, min: number, max: number, def: number): number {
  if (v === undefined) return def;
  const n = Number(v);
  if (v.trim() === '' || !Number.isFinite(n) || n < min || n > max) throw new FlagError(`--${name} ${JSON.stringify(v.slice(0, 64))}: must be a number in ${min}–${max}`);
  return n;
}

/** Parse the flags; throws FlagError with a one-line message. */
export function parseSiteArgs(argv: string[], env: NodeJS.ProcessEnv = {}): SiteArgs {
  const { values, positionals } = parseFlags(argv, OPTIONS, true);
  if (values.help === true) return { natsUrl: '', site: '', httpPort: 0, planFile: null, host: '', token: null, windowS: 0, offlineAfterS: 0, help: true };
  if (positionals.length > 0) throw new FlagError(`unexpected argument ${JSON.stringify(positionals[0].slice(0, 64))}`);
  const nats = values.nats;
  if (nats === undefined) throw new FlagError('--nats URL is required (e.g. nats://127.0.0.1:4222)');
  if (!/^nats:\/\/(\[[0-9A-Fa-f:.]+\]|[A-Za-z0-9.-]+)(:\d{1,5})?$/.test(nats)) throw new FlagError(`--nats ${JSON.stringify(nats.slice(0, 64))}: must be nats://host:port`);
  const site = values.site;
  if (site === undefined) throw new FlagError('--site SITE is required');
  if (!SITE_NAME.test(site)) throw new FlagError(`--site ${JSON.stringify(site.slice(0, 64))}: 1–32 letters, digits, _ or -`);
  if (values['http-port'] === undefined) throw new FlagError('--http-port P is required');
  const httpPort = numberFlag('http-port', values['http-port'], 0, 65535, 0);
  if (!Number.isInteger(httpPort)) throw new FlagError('--http-port: must be a whole number');
  const token = values.token ?? env.NULLSTEER_NATS_TOKEN ?? null;
  if (token !== null && !/^[\x21-\x7e]{1,256}$/.test(token)) throw new FlagError('--token: printable ASCII without spaces, at most 256 characters');
  return {
    natsUrl: nats,
    site,
    httpPort,
    planFile: values.plan ?? null,
    host: values.host ?? '127.0.0.1',
    token,
    windowS: numberFlag('window-s', values['window-s'], 0.1, 10, 0.5),
    offlineAfterS: numberFlag('offline-after-s', values['offline-after-s'], 0.5, 60, 3),
    help: false,
  };
}

export async function siteCommand(argv: string[]): Promise<number> {
  let args: SiteArgs;
  let plan: SitePlan = DEFAULT_PLAN;
  let planDir: string | null = null;
  try {
    args = parseSiteArgs(argv, processIo.env);
    if (args.planFile) ({ plan, dir: planDir } = loadPlan(args.planFile));
  } catch (e) {
    if (e instanceof FlagError || e instanceof PlanError) {
      processIo.err(`nullsteer site: ${e.message}\n${SITE_USAGE}`);
      return USAGE_EXIT_CODE;
    }
    throw e;
  }
  if (args.help) {
    processIo.out(SITE_USAGE);
    return 0;
  }
  const { createSiteService } = await import('../site/site-service.ts');
  const svc = await createSiteService({
    natsUrl: args.natsUrl,
    site: args.site,
    token: args.token,
    httpPort: args.httpPort,
    host: args.host,
    windowS: args.windowS,
    offlineAfterS: args.offlineAfterS,
    plan,
    planDir,
    staticDir: fileURLToPath(new URL('../../client/dist/', import.meta.url)),
  });
  processIo.out(`nullsteer site ${args.site}: listening to ${args.natsUrl}, site page at ${svc.url}`);
  await new Promise<void>((resolve) => {
    const stop = () => resolve();
    process.once('SIGINT', stop);
    process.once('SIGTERM', stop);
  });
  await svc.close();
  return 0;
}
