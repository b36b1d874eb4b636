/**
 * One queue for the REST calls that change processing parameters (processing, presets applied,
 * the comparison chain): each runs after every one queued before it, so two concurrent changes
 * cannot undo each other; a failure does not block the ones after.
 */
export type Serial = <T>(fn: () => Promise<T>) => Promise<T>;

export function createSerial(): Serial {
  let queue: Promise<unknown> = Promise.resolve();
  return <T>(fn: () => Promise<T>): Promise<T> => {
    const p = queue.then(fn);
    queue = p.catch(() => undefined);
    return p;
  };
}
