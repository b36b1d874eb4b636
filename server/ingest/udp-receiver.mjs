// The UDP receive thread (see udp.ts for the design and the record layout). It only moves datagrams
// from the socket into the shared queue and stamps their arrival time, so it is ready whenever the
// kernel has one, whatever the service's thread is busy with (a garbage collection, a spectrum row,
// an HTTP request). Plain JavaScript: a worker does not inherit the tsx loader, and this file needs
// nothing from the TypeScript sources; the queue's layout comes from udp-queue.mjs, as udp.ts's does.
import { createSocket } from 'node:dgram';
import { parentPort, workerData } from 'node:worker_threads';
import { DROPPED, HEAD, KIND_DATAGRAM, KIND_REMOTE, MAX_REMOTES, RECORD_HEADER, SLEEPING, TAIL } from './udp-queue.mjs';


/** multicast: null, or { group, sources: string[], interfaceAddress?: string } (udp.ts MulticastJoin). */
const { host, port, receiveBufferBytes, queue, ctrl, multicast } = workerData;
const bytes = new Uint8Array(queue);
const view = new DataView(queue);
const c = new Int32Array(ctrl);
const cap = bytes.byteLength;
const encoder = new TextEncoder();

/** Remote address → port → id, announced in the queue before first use; cleared when full. */
let remotes = new Map();
let remoteCount = 0;

/**
 * Room for `need` bytes at the head: returns where the record goes (wrapping to 0 with a size-0
 * marker when the end is too close), or −1 when the reader has not freed enough.
 */
function reserve(need) {
  const head = Atomics.load(c, HEAD);
  const tail = Atomics.load(c, TAIL);
  const free = (tail - head - 4 + cap) % cap; // one word stays empty: head === tail means empty
  if (head + need <= cap) return need <= free ? head : -1;
  if (cap - head + need > free) return -1;
  if (cap - head >= 4) view.setUint32(head, 0, true);
  return 0;
}

function publish(at, size) {
  Atomics.store(c, HEAD, (at + size) % cap);
  if (Atomics.load(c, SLEEPING) === 1) {
    Atomics.store(c, SLEEPING, 0);
    Atomics.notify(c, HEAD);
  }
}

function remoteId(address, rport) {
  let byPort = remotes.get(address);
  let id = byPort?.get(rport);
  if (id !== undefined) return id;
  if (remoteCount === MAX_REMOTES) {
    remotes = new Map();
    remoteCount = 0;
    byPort = undefined;
  }
  id = remoteCount++;
  const text = encoder.encode(`${address}:${rport}`);
  const size = (RECORD_HEADER + text.byteLength + 3) & ~3;
  const at = reserve(size);
  if (at < 0) return -1;
  view.setUint32(at, size, true);
  view.setUint16(at + 4, KIND_REMOTE, true);
  view.setUint16(at + 6, id, true);
  view.setFloat64(at + 8, 0, true);
  view.setUint32(at + 16, text.byteLength, true);
  bytes.set(text, at + RECORD_HEADER);
  publish(at, size);
  if (!byPort) remotes.set(address, (byPort = new Map()));
  byPort.set(rport, id);
  return id;
}

const bindAddress = multicast ? multicast.group : host;
// A multicast group may have other listeners on this machine (another session, another program).
const socket = createSocket({ type: bindAddress.includes(':') ? 'udp6' : 'udp4', recvBufferSize: receiveBufferBytes, reuseAddr: Boolean(multicast) });
socket.on('message', (msg, rinfo) => {
  const arrivalMs = performance.now();
  const id = remoteId(rinfo.address, rinfo.port);
  const size = (RECORD_HEADER + msg.byteLength + 3) & ~3;
  const at = id < 0 ? -1 : reserve(size);
  if (at < 0) {
    Atomics.add(c, DROPPED, 1);
    return;
  }
  view.setUint32(at, size, true);
  view.setUint16(at + 4, KIND_DATAGRAM, true);
  view.setUint16(at + 6, id, true);
  view.setFloat64(at + 8, arrivalMs, true);
  view.setUint32(at + 16, msg.byteLength, true);
  bytes.set(msg, at + RECORD_HEADER);
  publish(at, size);
});

let bound = false;
socket.on('error', (err) => {
  if (!bound) parentPort.postMessage({ type: 'bind-error', message: err.message, code: err.code ?? null });
  else parentPort.postMessage({ type: 'warning', message: err.message });
});
/** Join the group: once per source for a source-specific join, else any source. */
function join() {
  const iface = multicast.interfaceAddress;
  if (multicast.sources.length === 0) socket.addMembership(multicast.group, iface);
  else for (const source of multicast.sources) socket.addSourceSpecificMembership(source, multicast.group, iface);
}

socket.bind(port, bindAddress, () => {
  if (multicast) {
    try {
      join();
    } catch (err) {
      parentPort.postMessage({ type: 'bind-error', message: `joining multicast group ${multicast.group}: ${err.message}`, code: err.code ?? null });
      socket.close();
      return;
    }
  }
  bound = true;
  let granted = receiveBufferBytes;
  try {
    granted = socket.getRecvBufferSize();
  } catch {
    // not every platform reports it
  }
  parentPort.postMessage({ type: 'listening', port: socket.address().port, receiveBufferBytes: granted, timeOrigin: performance.timeOrigin });
});

parentPort.on('message', (m) => {
  if (m?.type === 'close') {
    socket.close(() => {
      parentPort.postMessage({ type: 'closed' });
      parentPort.close();
    });
  }
});
