/**
 * UDP ingest: one datagram is one frame (the own wire format, {@link startUdpIngest}) or one RTP
 * packet (rtp/rtp-receiver.ts); both receive through {@link startUdpReceiver}.
 *
 * A receive thread (./udp-receiver.mjs) owns the socket and copies each datagram, stamped with its
 * arrival time, into a shared queue; this thread takes them from the queue and hands them to a
 * {@link DatagramHandler} (the IngestHub, an RTP stream). A multicast socket binds the group's
 * address and port and joins the group (source-specific when sources are given) on its thread. The receive thread does nothing else, so the socket is drained whenever the kernel
 * has a datagram, however long the service's own thread is busy (a garbage collection, a spectrum
 * row, an HTTP request): a stall here shows as a longer queue, not as datagrams lost in the kernel.
 * Arrival times come from the receive thread, so the sequencer's hold times and wall-clock bounds
 * see when frames arrived, not when they were processed.
 *
 * Queues and policies: the kernel's receive buffer (SO_RCVBUF, `ingest.udp.receiveBufferBytes`; the
 * kernel may grant less, Linux caps it at net.core.rmem_max) — when full the kernel drops, and the
 * socket's drop count is read from /proc/net/udp(6) into status (`kernelDrops`, null where the
 * system does not report it); then the shared queue (`ingest.udp.queueBytes`) — when full a
 * datagram is dropped and counted `queue_full`.
 *
 * Queue layout (SharedArrayBuffer, byte ring; the ring's four control words in a separate Int32Array:
 * head, tail, sleeping, dropped). A record is 4-byte aligned: u32 size (0 = wrap to the start),
 * u16 kind (1 datagram, 2 remote address), u16 remote id, f64 arrival (ms on the receive thread's
 * performance clock), u32 length, then the bytes. A remote-address record (UTF-8 "address:port")
 * comes before the first datagram that uses its id. Head is written only by the receive thread,
 * tail only by this one; one word always stays empty so that head === tail means empty.
 */
import { readFileSync } from 'node:fs';
import { Worker } from 'node:worker_threads';
import type { IngestHub } from './ingest-hub.ts';
import { DROPPED, HEAD, KIND_DATAGRAM, KIND_REMOTE, RECORD_HEADER, SLEEPING, TAIL } from './udp-queue.mjs';

const RECEIVER = new URL('./udp-receiver.mjs', import.meta.url);
/** Datagrams handled before this thread lets timers and sockets run again. */
const SLICE = 256;
/** Longest wait for the receive thread's doorbell before the queue is looked at anyway, ms. */
const IDLE_CHECK_MS = 100;

export interface UdpIngestOptions {
  /** Requested kernel receive buffer, bytes. */
  receiveBufferBytes: number;
  /** Shared queue between the receive thread and this one, bytes (≥ 65 536 + 24). */
  queueBytes: number;
}

/** A multicast group to join instead of binding a unicast address. */
export interface MulticastJoin {
  /** Group address (IPv4 224.0.0.0/4 or IPv6 ff00::/8); the socket binds it with the port. */
  group: string;
  /** Sources of a source-specific join (RFC 4604); empty: any source. */
  sources: string[];
  /** Local interface address to join on; absent: the kernel's choice by route. */
  interfaceAddress?: string;
}

export interface UdpReceiverOptions extends UdpIngestOptions {
  multicast?: MulticastJoin | null;
}

/** Where the drain hands datagrams: the IngestHub, an RTP stream. */
export interface DatagramHandler {
  /** One datagram; the bytes are a view into the shared queue, valid only during the call. */
  receive(bytes: Uint8Array, remote: string, arrivalMs: number): void;
  /** `count` datagrams were dropped because the shared queue was full. */
  refuse(count: number): void;
  /** Runs `fn`, which hands over several datagrams at once. */
  batch(fn: () => void): void;
}

/** The shared queue's size for a requested one: at least 4 KiB, a multiple of 4 bytes. */
export function queueCapacity(queueBytes: number): number {
  return Math.max(4096, queueBytes) & ~3;
}

export interface UdpKernelStats {
  /** Datagrams the kernel dropped for this socket (receive buffer full), since it was opened. */
  drops: number;
  /** Bytes waiting in the socket's receive buffer now. */
  queuedBytes: number;
}

export interface UdpIngest {
  readonly port: number;
  /** Receive buffer size the kernel granted (it may cap the request). */
  readonly receiveBufferBytes: number;
  /** The kernel's counts for the socket (Linux /proc/net/udp, udp6), or null where not available. */
  kernel(): UdpKernelStats | null;
  /** Datagrams dropped because the shared queue was full (also counted as `queue_full` in the hub). */
  readonly queueDrops: number;
  /** Bytes waiting in the shared queue now. */
  readonly queuedBytes: number;
  /** Receive threads started again after one ended unasked. */
  readonly receiverRestarts: number;
  /** Test hook: end the receive thread from outside (a crash, not a close); a new one takes over. */
  killReceiver(): Promise<void>;
  close(): Promise<void>;
}

/** The socket's line in /proc/net/udp or udp6 (Linux): by inode once known, else by local port. */
function procUdpLine(port: number, inode: string | null): string[] | null {
  const hexPort = `:${port.toString(16).toUpperCase().padStart(4, '0')}`;
  for (const file of ['/proc/net/udp', '/proc/net/udp6']) {
    let text: string;
    try {
      text = readFileSync(file, 'utf8');
    } catch {
      continue;
    }
    const lines = text.split('\n');
    for (let i = 1; i < lines.length; i++) {
      // sl local_address rem_address st tx_queue:rx_queue tr:tm->when retrnsmt uid timeout inode ref pointer drops
      const f = lines[i].trim().split(/\s+/);
      if (f.length < 13) continue;
      if (inode !== null ? f[9] === inode : f[1].endsWith(hexPort)) return f;
    }
  }
  return null;
}

interface Started {
  worker: Worker;
  port: number;
  receiveBufferBytes: number;
  /** Add to a receive-thread timestamp to get this thread's performance.now() time. */
  offsetMs: number;
}

/** Own-format frames over UDP into the IngestHub. */
export function startUdpIngest(hub: IngestHub, host: string, port: number, opts: UdpIngestOptions): Promise<UdpIngest> {
  const detail = `the UDP receive queue (ingest.udp.queueBytes = ${queueCapacity(opts.queueBytes)} bytes) was full`;
  return startUdpReceiver(
    {
      receive: (bytes, remote, arrivalMs) => hub.receive(bytes, 'udp', remote, arrivalMs),
      refuse: (count) => hub.refuse('queue_full', detail, 'udp', performance.now(), count),
      batch: (fn) => hub.batch(fn),
    },
    host,
    port,
    opts,
  );
}

/**
 * A UDP socket on its own receive thread, drained into `handler` on this thread.
 * @param host address to bind (unicast); ignored for binding when `opts.multicast` is given
 * @param port 0 = any free port
 */
export async function startUdpReceiver(handler: DatagramHandler, host: string, port: number, opts: UdpReceiverOptions): Promise<UdpIngest> {
  const cap = queueCapacity(opts.queueBytes);
  const queue = new SharedArrayBuffer(cap);
  const ctrl = new SharedArrayBuffer(4 * 4);
  const bytes = new Uint8Array(queue);
  const view = new DataView(queue);
  const c = new Int32Array(ctrl);
  const decoder = new TextDecoder();
  const remotes: string[] = [];
  let closing = false;
  let restarts = 0;
  let dropsSeen = 0;

  const spawn = (bindPort: number) =>
    new Promise<Started>((resolve, reject) => {
      const worker = new Worker(RECEIVER, { workerData: { host, port: bindPort, receiveBufferBytes: opts.receiveBufferBytes, queue, ctrl, multicast: opts.multicast ?? null } });
      const fail = (e: Error) => {
        void worker.terminate();
        reject(e);
      };
      worker.once('error', fail);
      worker.on('message', function first(m: { type: string; message?: string; code?: string | null; port?: number; receiveBufferBytes?: number; timeOrigin?: number }) {
        if (m.type === 'bind-error') {
          worker.off('message', first);
          fail(Object.assign(new Error(m.message), { code: m.code ?? undefined }));
        } else if (m.type === 'listening') {
          worker.off('message', first);
          worker.off('error', fail);
          resolve({ worker, port: m.port!, receiveBufferBytes: m.receiveBufferBytes!, offsetMs: m.timeOrigin! - performance.timeOrigin });
        }
      });
    });

  let current = await spawn(port);
  const boundPort = current.port;
  const found = procUdpLine(boundPort, null);
  const inode = found ? found[9] : null;

  /** Receive-thread warnings, and a new receive thread when one ends unasked (same port). */
  const watch = (s: Started) => {
    s.worker.on('message', (m: { type: string; message?: string }) => {
      if (m.type === 'warning') process.emitWarning(`UDP ingest socket error: ${m.message}`);
    });
    s.worker.on('error', (e) => process.emitWarning(`UDP receive thread failed: ${e.message}`));
    s.worker.on('exit', () => {
      if (closing || current !== s) return;
      restarts++;
      spawn(boundPort).then(
        (next) => {
          if (closing) {
            void next.worker.terminate();
            return;
          }
          current = next;
          watch(next);
        },
        (e: Error) => process.emitWarning(`UDP receive thread could not restart on port ${boundPort}: ${e.message}`),
      );
    });
  };
  watch(current);

  /** Hand every complete record to the handler, at most SLICE datagrams; returns whether the queue is empty. */
  const drainSlice = (): boolean => {
    const dropped = Atomics.load(c, DROPPED);
    if (dropped !== dropsSeen) {
      handler.refuse(dropped - dropsSeen);
      dropsSeen = dropped;
    }
    let tail = Atomics.load(c, TAIL);
    for (let n = 0; n < SLICE; ) {
      const head = Atomics.load(c, HEAD);
      if (tail === head) return true;
      const size = cap - tail >= 4 ? view.getUint32(tail, true) : 0;
      if (size === 0) {
        tail = 0;
        Atomics.store(c, TAIL, tail);
        continue;
      }
      const kind = view.getUint16(tail + 4, true);
      const id = view.getUint16(tail + 6, true);
      const length = view.getUint32(tail + 16, true);
      if (kind === KIND_REMOTE) {
        remotes[id] = decoder.decode(bytes.subarray(tail + RECORD_HEADER, tail + RECORD_HEADER + length));
      } else if (kind === KIND_DATAGRAM) {
        // The handler reads the bytes in place and keeps nothing of them past this call.
        handler.receive(bytes.subarray(tail + RECORD_HEADER, tail + RECORD_HEADER + length), remotes[id] ?? 'unknown', view.getFloat64(tail + 8, true) + current.offsetMs);
        n++;
      }
      tail = (tail + size) % cap;
      Atomics.store(c, TAIL, tail);
    }
    return Atomics.load(c, TAIL) === Atomics.load(c, HEAD);
  };

  let stopped: () => void = () => {};
  const done = new Promise<void>((r) => (stopped = r));
  let empty = false;
  const slice = () => {
    empty = drainSlice();
  };
  void (async () => {
    for (;;) {
      handler.batch(slice);
      if (closing && empty) break;
      if (!empty) {
        await new Promise<void>((r) => setImmediate(r));
        continue;
      }
      // Nothing waiting: ring the doorbell for the receive thread, then look once more before sleeping.
      Atomics.store(c, SLEEPING, 1);
      const head = Atomics.load(c, HEAD);
      if (head === Atomics.load(c, TAIL)) {
        const w = Atomics.waitAsync(c, HEAD, head, IDLE_CHECK_MS);
        if (w.async) await w.value;
      }
      Atomics.store(c, SLEEPING, 0);
    }
    stopped();
  })();

  return {
    port: boundPort,
    receiveBufferBytes: current.receiveBufferBytes,
    kernel() {
      const f = procUdpLine(boundPort, inode);
      if (!f) return null;
      return { drops: Number(f[12]), queuedBytes: parseInt(f[4].split(':')[1] ?? '0', 16) };
    },
    get queueDrops() {
      return Atomics.load(c, DROPPED);
    },
    get queuedBytes() {
      return (Atomics.load(c, HEAD) - Atomics.load(c, TAIL) + cap) % cap;
    },
    get receiverRestarts() {
      return restarts;
    },
    async killReceiver() {
      await current.worker.terminate();
    },
    async close() {
      if (closing) return done;
      closing = true;
      const w = current.worker;
      await new Promise<void>((resolve) => {
        const t = setTimeout(() => void w.terminate().then(() => resolve()), 2000);
        w.once('exit', () => {
          clearTimeout(t);
          resolve();
        });
        w.postMessage({ type: 'close' });
      });
      // Wake the drain loop: it takes what is left in the queue, then ends.
      Atomics.notify(c, HEAD);
      await done;
    },
  };
}
