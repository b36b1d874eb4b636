/**
 * The RTP load sender of bench/rtp.ts, run as its own process (`node --import tsx bench/rtp-sender.ts
 * PORTS CHANNELS SAMPLES_PER_PACKET PACKETS_PER_S SECONDS`, PORTS comma-separated): one L24 stream
 * per port on 127.0.0.1 (its own SSRC, sequence +1 and timestamp +SAMPLES_PER_PACKET per packet),
 * the streams interleaved, PACKETS_PER_S in all, paced for SECONDS of wall time. Prints one JSON
 * line when done: packets sent, send errors, wall seconds, CPU seconds.
 *
 * Packets are built once (a ring per stream; only the sequence number and timestamp are rewritten
 * in place) and each stream has a connected socket, so the sender spends its time in the kernel,
 * not on encoding or address look-ups. A buffer is reused only after its send completed.
 */
import { createSocket, type Socket } from 'node:dgram';
import { encodePcm, encodeRtpPacket } from '../test/helpers/rtp-sender.ts';

const [portsText, channelsText, spfText, rateText, secondsText] = process.argv.slice(2);
const ports = (portsText ?? '').split(',').map(Number);
const channels = Number(channelsText);
const n = Number(spfText);
const rate = Number(rateText);
const seconds = Number(secondsText);
if (ports.length === 0 || ports.some((p) => !(p > 0 && p < 65536)) || !(channels >= 1) || !(n >= 1) || !(rate > 0) || !(seconds > 0)) {
  console.error('usage: rtp-sender.ts PORT[,PORT…] CHANNELS SAMPLES_PER_PACKET PACKETS_PER_S SECONDS');
  process.exit(2);
}

const RING = 1024;
const S = ports.length;
/** A tone per channel: one payload per ring slot (about 1024·n samples of signal). */
const rings: Buffer[][] = ports.map((_, s) =>
  Array.from({ length: RING }, (_, k) => {
    const ints = new Int32Array(n * channels);
    for (let i = 0; i < n; i++) for (let c = 0; c < channels; c++) ints[i * channels + c] = Math.round(0.3 * 2 ** 23 * Math.sin((2 * Math.PI * (500 + 37 * c) * (k * n + i)) / 48000));
    return Buffer.from(encodeRtpPacket({ payloadType: 97, sequence: 0, timestamp: 0, ssrc: 0x5e000000 + s }, encodePcm(ints, 'L24')));
  }),
);

const sockets: Socket[] = [];
for (const port of ports) {
  const s = createSocket('udp4');
  await new Promise<void>((r) => s.bind(0, '127.0.0.1', () => r()));
  await new Promise<void>((r) => s.connect(port, '127.0.0.1', () => r()));
  sockets.push(s);
}

let sent = 0;
let done = 0;
let errors = 0;
const onSent = (e: Error | null) => {
  done++;
  if (e) errors++;
};
/** Packet j of the interleaved sequence: stream j mod S, its (j div S)-th packet. */
function packetAt(j: number): [Socket, Buffer] {
  const s = j % S;
  const k = Math.floor(j / S);
  const b = rings[s][k % RING];
  b.writeUInt16BE(k & 0xffff, 2);
  b.writeUInt32BE((k * n) >>> 0, 4);
  return [sockets[s], b];
}

const total = Math.floor(seconds * rate);
const cpu0 = process.cpuUsage();
const t0 = performance.now();
await new Promise<void>((resolve) => {
  const step = () => {
    const now = performance.now();
    const due = Math.min(Math.floor(((now - t0) / 1000) * rate), total);
    // Never more in flight than a ring holds per stream (a buffer is rewritten only once sent).
    while (sent < due && sent - done < (RING - 1) * S) {
      const [sock, b] = packetAt(sent++);
      sock.send(b, onSent);
    }
    if (sent >= total) resolve();
    else if (sent < due) setImmediate(step);
    else setTimeout(step, 1);
  };
  step();
});
while (done < sent) await new Promise((r) => setTimeout(r, 1));
const wallS = (performance.now() - t0) / 1000;
const cpu = process.cpuUsage(cpu0);
for (const s of sockets) s.close();
console.log(JSON.stringify({ sent, errors, wallS, cpuS: (cpu.user + cpu.system) / 1e6 }));
