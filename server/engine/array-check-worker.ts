/**
 * The array check's thread: one message in (the samples, transferred, and the check's options), one
 * out (the result or the error as data), then it exits. Keeps the O(M·bins·frames) analysis off the
 * server's thread, where sockets, the engine's front end and HTTP run.
 */
import { parentPort, workerData } from 'node:worker_threads';
import { checkArray, type ArrayCheckInput } from '../dsp/array-check.ts';

const input = workerData as ArrayCheckInput;
try {
  parentPort!.postMessage({ type: 'result', result: checkArray(input) });
} catch (e) {
  parentPort!.postMessage({ type: 'error', message: e instanceof Error ? e.message : String(e), range: e instanceof RangeError });
}
