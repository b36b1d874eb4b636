/**
 * UDP ingest: one datagram is one frame. Bytes go to the IngestHub untouched; the socket's kernel
 * receive buffer (SO_RCVBUF) is the only queue, sized by config ingest.udp.receiveBufferBytes.
 */
import { createSocket, type Socket } from 'node:dgram';
import type { IngestHub } from './ingest-hub.ts';

export interface UdpIngest {
  readonly port: number;
  /** Receive buffer size the kernel granted (it may cap the request). */
  readonly receiveBufferBytes: number;
  close(): Promise<void>;
}

export async function startUdpIngest(hub: IngestHub, host: string, port: number, receiveBufferBytes: number): Promise<UdpIngest> {
  const socket: Socket = createSocket({ type: host.includes(':') ? 'udp6' : 'udp4', recvBufferSize: receiveBufferBytes });
  socket.on('message', (msg, rinfo) => {
    hub.receive(new Uint8Array(msg.buffer, msg.byteOffset, msg.byteLength), 'udp', `${rinfo.address}:${rinfo.port}`);
  });
  await new Promise<void>((resolve, reject) => {
    socket.once('error', reject);
    socket.bind(port, host, () => {
      socket.off('error', reject);
      resolve();
    });
  });
  // After binding, a socket error (rare for UDP) must not crash the server: keep listening.
  socket.on('error', (err) => {
    process.emitWarning(`UDP ingest socket error: ${err.message}`);
  });
  let granted = receiveBufferBytes;
  try {
    granted = socket.getRecvBufferSize();
  } catch {
    /* not all platforms report it */
  }
  return {
    port: socket.address().port,
    receiveBufferBytes: granted,
    close: () => new Promise<void>((resolve) => socket.close(() => resolve())),
  };
}
