/**
 * Run by test/integration/rtp-receiver.test.ts INSIDE a network namespace it created (`unshare -rn`,
 * loopback up, 224.0.0.0/4 routed to lo): receives an RTP session on a multicast group with a
 * source-specific join, while two senders on the namespace's loopback send to the group, one from
 * the named source (127.0.0.1) and one from another address (127.0.0.2). Prints one JSON line.
 * Refuses to run outside a namespace of its own (its only interface must be lo).
 */
import { createSocket, type Socket } from 'node:dgram';
import { networkInterfaces } from 'node:os';
import { startRtpSession } from '../../server/ingest/rtp/rtp-receiver.ts';
import { RtpStream } from '../../server/ingest/rtp/rtp-stream.ts';
import { parseSessionSdp } from '../../server/ingest/rtp/sdp.ts';
import type { Block } from '../../shared/types.ts';
import { RtpTestStream } from './rtp-sender.ts';

const interfaces = Object.keys(networkInterfaces());
if (interfaces.some((i) => i !== 'lo')) {
  console.error(`not inside a test namespace (interfaces: ${interfaces.join(', ')}): refusing to send multicast`);
  process.exit(3);
}

// MCAST-TEST-NET 233.252.0.0/24 (RFC 5771), reachable only on this namespace's loopback.
const GROUP = '233.252.0.7';
const desc = parseSessionSdp(
  ['v=0', 'o=- 1 1 IN IP4 127.0.0.1', 's=namespace unit', `c=IN IP4 ${GROUP}/1`, 't=0 0', 'm=audio 5004 RTP/AVP 96', 'a=rtpmap:96 L24/48000/2', 'a=ptime:0.125', `a=source-filter: incl IN IP4 ${GROUP} 127.0.0.1`, ''].join('\r\n'),
  'ns-unit',
);
const blocks: Block[] = [];
const stream = new RtpStream(desc, { jitterMs: 1000, sampleRateHz: 48000 }, (b) => blocks.push(b));
const session = await startRtpSession(desc, stream, { host: '127.0.0.1', receiveBufferBytes: 1 << 20, queueBytes: 1 << 20 });
// The same group on another port without a source filter: any-source join, both senders arrive.
const anyDesc = parseSessionSdp(
  ['v=0', 'o=- 1 1 IN IP4 127.0.0.1', 's=namespace unit, any source', `c=IN IP4 ${GROUP}/1`, 't=0 0', 'm=audio 5006 RTP/AVP 96', 'a=rtpmap:96 L24/48000/2', 'a=ptime:0.125', ''].join('\r\n'),
  'ns-any',
);
const anyStream = new RtpStream(anyDesc, { jitterMs: 1000, sampleRateHz: 48000 }, () => {});
const anySession = await startRtpSession(anyDesc, anyStream, { host: '127.0.0.1', receiveBufferBytes: 1 << 20, queueBytes: 1 << 20 });

async function sender(address: string): Promise<Socket> {
  const s = createSocket('udp4');
  await new Promise<void>((r) => s.bind(0, address, () => r()));
  s.setMulticastInterface('127.0.0.1');
  s.setMulticastLoopback(true);
  s.setMulticastTTL(1);
  return s;
}
const named = await sender('127.0.0.1');
const other = await sender('127.0.0.2');
const good = new RtpTestStream({ channels: 2, encoding: 'L24', samplesPerPacket: 6, payloadType: 96, ssrc: 0x6d630001, firstSequence: 1, firstTimestamp: 600 }, 300, 31);
const stray = new RtpTestStream({ channels: 2, encoding: 'L24', samplesPerPacket: 6, payloadType: 96, ssrc: 0x6d630002, firstSequence: 1, firstTimestamp: 900_000 }, 300, 32);
const send = (s: Socket, bytes: Uint8Array) =>
  Promise.all([desc.port, anyDesc.port].map((port) => new Promise<void>((r, j) => s.send(bytes, port, GROUP, (e) => (e ? j(e) : r())))));
const until = Date.now() + 20000;
for (let k = 0; k < 300; k++) {
  // Paced by the receiver's count (the named source's packets only reach it), so no buffer fills.
  while ((stream.status().datagrams < k - 50 || anyStream.status().datagrams < 2 * k - 100) && Date.now() < until) await new Promise((r) => setTimeout(r, 5));
  await send(other, stray.packet(k));
  await send(named, good.packet(k));
}
while ((stream.status().packets < 300 || anyStream.status().datagrams < 600) && Date.now() < until) {
  stream.tick(performance.now());
  anyStream.tick(performance.now());
  await new Promise((r) => setTimeout(r, 10));
}
// Give stray datagrams that might still be in flight a moment to show up in the count.
await new Promise((r) => setTimeout(r, 200));
stream.flush();
const st = stream.status();
let bitExact = blocks.length > 0;
let frames = 0;
for (const b of blocks) {
  for (let i = 0; i < b.frames; i++) for (let c = 0; c < 2; c++) if (b.data[c * b.frames + i] !== good.sample(b.sampleIndex - 600 + i, c) / 2 ** 23) bitExact = false;
  frames += b.frames;
}
named.close();
other.close();
await session.close();
anyStream.flush();
const any = anyStream.status();
await anySession.close();
console.log(JSON.stringify({ joined: true, packets: st.packets, datagrams: st.datagrams, lost: st.lost, ssrc: st.ssrc, bitExact, frames, rejected: st.rejected, any: { datagrams: any.datagrams, packets: any.packets, probation: any.rejected.probation } }));
