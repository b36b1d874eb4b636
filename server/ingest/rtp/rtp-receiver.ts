/**
 * One RTP session's socket: bound to the SDP's port, on a receive thread of its own (../udp.ts,
 * startUdpReceiver), drained into the session's RtpStream on this thread in batches.
 *
 * Unicast: the socket binds the configured host (e.g. 127.0.0.1) and the port. Multicast (the
 * SDP's `c=` is a group): the socket binds the group's address and the port (Linux then delivers
 * only that group's datagrams to it) and joins the group on the interface of the configured host
 * (the kernel's choice by route when the host is a wildcard), source-specific (one join per
 * source, RFC 4604) when the SDP has `a=source-filter: incl`.
 *
 * Queues and policies: the kernel's receive buffer (`receiveBufferBytes`; full: the kernel drops,
 * read back as `kernel().drops`), then the shared queue between the threads (`queueBytes`; full: the
 * packet is dropped and counted `queue_full` in the stream's rejects and `queueDrops`).
 * The caller ticks the stream (`stream.tick(performance.now())` every few ms) for the jitter buffer.
 */
import { startUdpReceiver, type UdpIngest, queueCapacity } from '../udp.ts';
import type { RtpStream } from './rtp-stream.ts';
import type { RtpSessionDescription } from './sdp.ts';

export interface RtpSessionOptions {
  /** Local address: bound for unicast; the interface joined on for multicast (a wildcard: any). */
  host: string;
  /** Override of the SDP's port (tests: 0 = any free port). */
  port?: number;
  /** Requested kernel receive buffer, bytes (ingest.rtp.receiveBufferBytes). */
  receiveBufferBytes: number;
  /** Queue between the receive thread and this one, bytes (ingest.rtp.queueBytes). */
  queueBytes: number;
}

/** A running session's socket: the UDP receiver's figures (udp.ts), without its test hook. */
export type RtpSession = Omit<UdpIngest, 'killReceiver'>;

const WILDCARDS = new Set(['0.0.0.0', '::', '']);

/**
 * Receive an RTP session into its stream.
 * @param desc the session's SDP (parseSessionSdp)
 * @param stream the RtpStream built from the same description
 * @throws (rejects) when the port cannot be bound or the group not joined (the error names the session)
 */
export async function startRtpSession(desc: RtpSessionDescription, stream: RtpStream, opts: RtpSessionOptions): Promise<RtpSession> {
  const port = opts.port ?? desc.port;
  const detail = `the RTP receive queue (ingest.rtp.queueBytes = ${queueCapacity(opts.queueBytes)} bytes) was full`;
  let udp: UdpIngest;
  try {
    udp = await startUdpReceiver(
      {
        receive: (bytes, remote, arrivalMs) => stream.receive(bytes, arrivalMs, remote),
        refuse: (count) => stream.refuse('queue_full', count, detail),
        batch: (fn) => stream.batch(fn),
      },
      opts.host,
      port,
      {
        receiveBufferBytes: opts.receiveBufferBytes,
        queueBytes: opts.queueBytes,
        multicast: desc.multicast ? { group: desc.connectionAddress, sources: desc.sourceFilter, interfaceAddress: WILDCARDS.has(opts.host) ? undefined : opts.host } : null,
      },
    );
  } catch (e) {
    const where = desc.multicast ? `group ${desc.connectionAddress} port ${port}${desc.sourceFilter.length > 0 ? ` from ${desc.sourceFilter.join(', ')}` : ''}` : `${opts.host} port ${port}`;
    throw Object.assign(new Error(`RTP session "${desc.name}": cannot receive on ${where}: ${(e as Error).message}`), { code: (e as { code?: string }).code });
  }
  return {
    port: udp.port,
    receiveBufferBytes: udp.receiveBufferBytes,
    kernel: () => udp.kernel(),
    get queueDrops() {
      return udp.queueDrops;
    },
    get queuedBytes() {
      return udp.queuedBytes;
    },
    get receiverRestarts() {
      return udp.receiverRestarts;
    },
    close: () => udp.close(),
  };
}
