/**
 * Who is making the current request, for the parameter journal: set by an onRequest hook (app.ts)
 * in an AsyncLocalStorage, so the controllers deep below the routes can name the client without
 * every interface carrying it.
 */
import { AsyncLocalStorage } from 'node:async_hooks';
import type { Actor } from '../session/journal.ts';

const store = new AsyncLocalStorage<Actor>();

/** The server itself (start-up, timers) when no request is in progress. */
export const SERVER_ACTOR: Actor = { remote: 'server', agent: null };

export function runAs<T>(actor: Actor, fn: () => T): T {
  return store.run(actor, fn);
}

export function currentActor(): Actor {
  return store.getStore() ?? SERVER_ACTOR;
}

/** An actor from a request's peer address and User-Agent (cut at 120 characters). */
export function actorOf(ip: string, userAgent: string | undefined): Actor {
  const agent = typeof userAgent === 'string' && userAgent.length > 0 ? userAgent.slice(0, 120) : null;
  return { remote: ip, agent };
}
