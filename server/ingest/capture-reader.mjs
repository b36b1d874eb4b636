// The capture thread (see capture.ts for the design): runs the capture command, reads its standard
// output into the shared queue (capture-queue.mjs) and its standard error into status lines, and
// starts the command again with back-off when it ends or cannot start. It does nothing else, so the
// command's pipe is read whenever the command writes, however busy the service's thread is: a stall
// there shows as dropped records (counted, then zeros of the same length), never as a blocked
// command. Plain JavaScript: a worker does not inherit the tsx loader.
import { spawn } from 'node:child_process';
import { StringDecoder } from 'node:string_decoder';
import { parentPort, workerData } from 'node:worker_threads';
import {
  CaptureQueue,
  CTRL_BYTES_DISCARDED,
  CTRL_BYTES_READ,
  CTRL_FRAMES_READ,
  CTRL_LAST_DATA_MS,
  CTRL_STARTS,
  RECORD_HEADER,
  SIG_BELL,
  SIG_SLEEPING,
  SIG_STATUS_PENDING,
} from './capture-queue.mjs';

const { command, frameBytes, recordFrames, restartMinMs, restartMaxMs, killGraceMs, longRunMs, ring, ctrl, sig } = workerData;
const queue = new CaptureQueue(ring, ctrl, frameBytes);
const bytes = queue.bytes;
const counters = new BigInt64Array(ctrl);
const signals = new Int32Array(sig);

/** Standard-error lines kept, and their length at most (characters). */
const STDERR_LINES = 20;
const STDERR_LINE_CHARS = 200;
/** Exits kept in status. */
const EXITS_KEPT = 10;
/** After the command's exit, how long its pipes may stay open (a leftover child holding them), ms. */
const CLOSE_AFTER_EXIT_MS = 2000;
/** A status message not sent because one was in flight is tried again after this, ms. */
const STATUS_RETRY_MS = 100;
/** Command output that starts like a file with a header instead of raw PCM. */
const HEADER_MAGICS = ['RIFF', 'RF64', 'FORM', '.snd', 'fLaC', 'OggS'];

let phase = 'starting';
let child = null;
let pid = null;
/** The command has started and has not been reaped yet (its pid is still its own). */
let leaderAlive = false;
let stopping = false;
let restartTimer = null;
let killTimer = null;
let nextWaitMs = restartMinMs;
let restartDelayMs = null;
let nextStartAtMs = null;
let startFailures = 0;
let error = null;
let exitCount = 0;
const exits = [];
let formatWarning = null;

// Partial sample frame carried from one read to the next (a frame is never split across records).
const carry = new Uint8Array(frameBytes);
let carryLen = 0;
let framesRead = Number(Atomics.load(counters, CTRL_FRAMES_READ));
let run = 0;
let runBytes = 0;

const stderrLines = [];
let stderrCount = 0;
let overruns = 0;
let partialLine = '';
let stderrDecoder = new StringDecoder('utf8');

let statusDirty = false;
let statusTimer = null;

function snapshot() {
  return {
    type: 'status',
    phase,
    pid,
    restartDelayMs,
    nextStartAtMs,
    startFailures,
    error,
    exitCount,
    exits: exits.slice(),
    stderr: stderrLines.slice(),
    stderrLines: stderrCount,
    overruns,
    formatWarning,
  };
}

/** Tell the service's thread; at most one status message in flight, later changes follow it. */
function report() {
  if (Atomics.compareExchange(signals, SIG_STATUS_PENDING, 0, 1) === 0) {
    statusDirty = false;
    parentPort.postMessage(snapshot());
  } else {
    statusDirty = true;
    statusTimer ??= setTimeout(() => {
      statusTimer = null;
      if (statusDirty) report();
    }, STATUS_RETRY_MS);
  }
}

function ringBell() {
  if (Atomics.load(signals, SIG_SLEEPING) === 1) {
    Atomics.store(signals, SIG_SLEEPING, 0);
    Atomics.add(signals, SIG_BELL, 1);
    Atomics.notify(signals, SIG_BELL);
  }
}

/**
 * Signal the command's process group (it was started as its leader). `leaderAlive`: the leader has
 * not been reaped yet, so its pid is still its own and may be signalled alone if the group send fails.
 */
function killGroup(target, signal, leaderAlive) {
  if (target === null) return;
  try {
    process.kill(-target, signal);
  } catch {
    if (!leaderAlive) return;
    try {
      process.kill(target, signal);
    } catch {
      // already gone
    }
  }
}

function onData(chunk) {
  const len = chunk.length;
  Atomics.add(counters, CTRL_BYTES_READ, BigInt(len));
  Atomics.store(counters, CTRL_LAST_DATA_MS, BigInt(Date.now()));
  if (runBytes === 0 && len >= 4) {
    const magic = String.fromCharCode(chunk[0], chunk[1], chunk[2], chunk[3]);
    if (HEADER_MAGICS.includes(magic)) {
      formatWarning = `the command's output starts with a "${magic}" file header, not raw PCM: its bytes are read as samples (for arecord add -t raw)`;
      report();
    }
  }
  runBytes += len;
  let frames = Math.floor((carryLen + len) / frameBytes);
  let src = 0;
  while (frames > 0) {
    const n = Math.min(recordFrames, frames);
    const payload = n * frameBytes;
    let dst = queue.reserve(payload) + RECORD_HEADER;
    let need = payload;
    if (carryLen > 0) {
      bytes.set(carry.subarray(0, carryLen), dst);
      dst += carryLen;
      need -= carryLen;
      carryLen = 0;
    }
    bytes.set(chunk.subarray(src, src + need), dst);
    src += need;
    // The count first: a thread ended between the two leaves a gap (zeros), never a repeated index.
    const sampleIndex = framesRead;
    framesRead += n;
    Atomics.store(counters, CTRL_FRAMES_READ, BigInt(framesRead));
    queue.publish(run, sampleIndex, n);
    frames -= n;
  }
  if (src < len) {
    carry.set(chunk.subarray(src), carryLen);
    carryLen += len - src;
  }
  ringBell();
}

function addLine(raw) {
  // Control characters out (a terminal's colours, progress returns), one line, bounded.
  const line = raw.replace(/[\u0000-\u0008\u000b-\u001f\u007f]/g, '').trim();
  if (line === '') return;
  stderrCount++;
  // ALSA's arecord reports "overrun!!! (at least N ms long)" (wording from memory); count any such line.
  if (/overrun/i.test(line)) overruns++;
  stderrLines.push(line.length > STDERR_LINE_CHARS ? `${line.slice(0, STDERR_LINE_CHARS - 1)}…` : line);
  if (stderrLines.length > STDERR_LINES) stderrLines.shift();
}

function onStderr(chunk) {
  const parts = stderrDecoder.write(chunk).split(/\r\n|\r|\n/);
  for (let i = 0; i < parts.length; i++) {
    if (partialLine.length < STDERR_LINE_CHARS + 1) partialLine += parts[i].slice(0, STDERR_LINE_CHARS + 1 - partialLine.length);
    if (i < parts.length - 1) {
      addLine(partialLine);
      partialLine = '';
    }
  }
  if (parts.length > 1) report();
}

function describe(e) {
  const name = command[0];
  switch (e?.code) {
    case 'ENOENT':
      return `command not found: ${name}`;
    case 'EACCES':
      return `command not allowed to run (permission denied): ${name}`;
    default:
      return `command could not start: ${name}: ${String(e?.message ?? e).split('\n')[0]}`;
  }
}

function scheduleStart(failedToStart, runMs) {
  // Back-off: the first wait is restartMinMs, doubled after each exit of a run shorter than
  // longRunMs (a failed start counts as one), up to restartMaxMs; a long run resets it.
  if (runMs >= longRunMs) nextWaitMs = restartMinMs;
  const waitMs = nextWaitMs;
  if (runMs < longRunMs) nextWaitMs = Math.min(restartMaxMs, nextWaitMs * 2);
  phase = failedToStart ? 'failed' : 'restarting';
  restartDelayMs = waitMs;
  nextStartAtMs = Date.now() + waitMs;
  restartTimer = setTimeout(() => {
    restartTimer = null;
    start();
  }, waitMs);
  report();
}

function start() {
  if (stopping) return;
  run = Number(Atomics.add(counters, CTRL_STARTS, 1n)) + 1;
  phase = 'starting';
  nextStartAtMs = null;
  carryLen = 0;
  runBytes = 0;
  partialLine = '';
  stderrDecoder = new StringDecoder('utf8');
  Atomics.store(counters, CTRL_LAST_DATA_MS, 0n);
  const startedMs = performance.now();
  let spawned = false;
  let ended = false;
  let exitInfo = null;
  let closeTimer = null;
  let c;
  try {
    // No shell: argv as given. Its own process group, so stopping it also ends whatever it started.
    c = spawn(command[0], command.slice(1), { stdio: ['ignore', 'pipe', 'pipe'], detached: true });
  } catch (e) {
    startFailures++;
    error = { code: e?.code ?? null, message: describe(e) };
    scheduleStart(true, 0);
    return;
  }
  child = c;
  const finish = (code, signal) => {
    if (ended) return;
    ended = true;
    clearTimeout(closeTimer);
    child = null;
    pid = null;
    if (carryLen > 0) Atomics.add(counters, CTRL_BYTES_DISCARDED, BigInt(carryLen));
    carryLen = 0;
    const tail = stderrDecoder.end();
    if (tail) partialLine += tail.slice(0, STDERR_LINE_CHARS);
    if (partialLine) addLine(partialLine);
    partialLine = '';
    const runMs = performance.now() - startedMs;
    exitCount++;
    exits.push({ code, signal, runMs: Math.round(runMs), atMs: Date.now() });
    if (exits.length > EXITS_KEPT) exits.shift();
    if (stopping) {
      clearTimeout(killTimer);
      phase = 'stopped';
      parentPort.postMessage(snapshot());
      parentPort.postMessage({ type: 'stopped' });
      return;
    }
    scheduleStart(false, runMs);
  };
  c.on('spawn', () => {
    spawned = true;
    leaderAlive = true;
    pid = c.pid;
    phase = 'running';
    error = null;
    report();
  });
  c.on('error', (e) => {
    if (spawned || ended) return; // e.g. a kill that failed: the exit still comes
    ended = true;
    child = null;
    pid = null;
    startFailures++;
    error = { code: e?.code ?? null, message: describe(e) };
    if (stopping) {
      phase = 'stopped';
      parentPort.postMessage(snapshot());
      parentPort.postMessage({ type: 'stopped' });
      return;
    }
    scheduleStart(true, 0);
  });
  c.stdout.on('data', onData);
  c.stderr.on('data', onStderr);
  c.on('exit', (code, signal) => {
    if (!spawned) return;
    exitInfo = { code, signal };
    leaderAlive = false;
    // Whatever the command left running in its group would hold the device and the pipe.
    killGroup(c.pid, 'SIGKILL', false);
    closeTimer = setTimeout(() => {
      c.stdout.destroy();
      c.stderr.destroy();
      finish(code, signal);
    }, CLOSE_AFTER_EXIT_MS);
  });
  // After the pipes are drained: every byte the command wrote is in the queue before the run ends.
  c.on('close', (code, signal) => {
    if (!spawned) return;
    finish(exitInfo?.code ?? code, exitInfo?.signal ?? signal);
  });
}

parentPort.on('message', (m) => {
  if (m?.type !== 'stop' || stopping) return;
  stopping = true;
  clearTimeout(restartTimer);
  clearTimeout(statusTimer);
  if (child && pid !== null) {
    const target = pid;
    killGroup(target, 'SIGTERM', true);
    killTimer = setTimeout(() => killGroup(target, 'SIGKILL', leaderAlive), killGraceMs);
  } else if (child && pid === null) {
    // spawn() called, not yet running: the 'spawn' or 'error' event ends it.
    child.once('spawn', () => killGroup(child?.pid ?? null, 'SIGKILL', true));
  } else {
    phase = 'stopped';
    parentPort.postMessage(snapshot());
    parentPort.postMessage({ type: 'stopped' });
  }
});

start();
