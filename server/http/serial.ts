/**
 * One queue for the REST calls that change processing parameters (processing, presets applied,
 * the comparison chain): each runs after every one queued before it, so two concurrent changes
 * cannot undo each other; a failure does not block the ones after.
 *
 * Deadline per change (`deadlineMs` from when it was queued): a change still waiting when it passes
 * is not run and is answered 503 ERR_HTTP_CHANGE_TIMEOUT; one still running is answered so too, and
 * the queue moves on (the engine orders its own re-plans, and bounds each one; see engine.ts). So
 * no request waits forever behind one that does not finish.
 */
import { HttpError } from './errors.ts';

export type Serial = <T>(fn: () => Promise<T>) => Promise<T>;

/** Longest a parameter change may wait and run, ms (the engine gives a re-plan 20 s). */
export const CHANGE_DEADLINE_MS = 30_000;

export interface SerialStats {
  /** Changes answered 503 because their deadline passed (waiting or running). */
  timedOut: number;
}

export function createSerial(deadlineMs = CHANGE_DEADLINE_MS, stats: SerialStats = { timedOut: 0 }): Serial {
  let queue: Promise<unknown> = Promise.resolve();
  return <T>(fn: () => Promise<T>): Promise<T> => {
    const queuedAt = performance.now();
    const within = deadlineMs >= 1000 ? `${(deadlineMs / 1000).toFixed(0)} s` : `${deadlineMs} ms`;
    let timer: NodeJS.Timeout | undefined;
    const deadline = new Promise<never>((_, reject) => {
      timer = setTimeout(() => {
        stats.timedOut++;
        reject(new HttpError('ERR_HTTP_CHANGE_TIMEOUT', { detail: `the change was not applied within ${within} (it waited behind earlier changes or is still being applied); check GET /api/processing and the journal` }));
      }, deadlineMs);
    });
    const run = queue.then(() => (performance.now() - queuedAt >= deadlineMs ? deadline : fn()));
    const answered = Promise.race([run, deadline]).finally(() => clearTimeout(timer));
    queue = answered.catch(() => undefined);
    // A run that outlives its deadline must not surface later as an unhandled rejection.
    run.catch(() => undefined);
    deadline.catch(() => undefined);
    return answered;
  };
}
