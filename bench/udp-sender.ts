/**
 * A load sender for the ingest benchmark, run as its own process (`node --import tsx
 * bench/udp-sender.ts HOST PORT CHANNELS SPEED SECONDS [ENCODING] [SAMPLE_RATE]`): MTU-sized frames
 * (1 472 bytes at most) of a contiguous stream, sequence +1 and firstSample +n per frame, paced at
 * SPEED × real time for SECONDS of wall time. Prints one JSON line when done: frames sent, send
 * errors, wall seconds.
 *
 * Frames are built once (one second of signal, then the header is rewritten in place) in a ring of
 * buffers, so the sender spends its time on the socket, not on encoding; a buffer is reused only
 * after its send completed.
 */
import { createSocket } from 'node:dgram';
import { encodeFrame, maxSamplesPerFrame, SAMPLE_ENCODINGS, type SampleEncoding } from '../shared/frame.ts';

const [host, portText, channelsText, speedText, secondsText, encodingText = 'int16', rateText = '48000'] = process.argv.slice(2);
const port = Number(portText);
const channels = Number(channelsText);
const speed = Number(speedText);
const seconds = Number(secondsText);
const encoding = encodingText as SampleEncoding;
const fs = Number(rateText);
if (!host || !(port > 0) || !(channels >= 1) || !(speed > 0) || !(seconds > 0) || !SAMPLE_ENCODINGS.includes(encoding) || !(fs > 0)) {
  console.error('usage: udp-sender.ts HOST PORT CHANNELS SPEED SECONDS [int16|int24|int32|float32] [RATE]');
  process.exit(2);
}

const n = maxSamplesPerFrame(channels, encoding);
const RING = 4096;
/** Distinct payloads: about one second of signal (a tone per channel plus a little noise). */
const cycle = Math.max(1, Math.round(fs / n));
const x = new Float32Array(channels * n);
const payloads: Uint8Array[] = [];
let seed = 12345;
for (let k = 0; k < Math.min(cycle, RING); k++) {
  for (let i = 0; i < n; i++) {
    for (let c = 0; c < channels; c++) {
      seed = (seed * 1103515245 + 12345) >>> 0;
      x[i * channels + c] = 0.3 * Math.sin(2 * Math.PI * (500 + 37 * c) * ((k * n + i) / fs)) + 0.01 * (seed / 2 ** 32 - 0.5);
    }
  }
  payloads.push(encodeFrame({ streamId: 1, sequence: 0, firstSample: 0, sampleRateHz: fs, channels, samplesPerChannel: n, encoding }, x));
}
const ring = Array.from({ length: RING }, (_, k) => Buffer.from(payloads[k % payloads.length]));
const framesPerS = (fs * speed) / n;

const socket = createSocket('udp4');
let sent = 0;
let done = 0;
let errors = 0;
const onSent = (e: Error | null) => {
  done++;
  if (e) errors++;
};

function frameAt(k: number): Buffer {
  const b = ring[k % RING];
  b.writeUInt32LE(k >>> 0, 12);
  b.writeBigUInt64LE(BigInt(k * n), 16);
  return b;
}

const t0 = performance.now();
const endMs = t0 + seconds * 1000;
await new Promise<void>((resolve) => {
  const step = () => {
    const now = performance.now();
    const due = Math.min(Math.floor(((now - t0) / 1000) * framesPerS), Math.floor(seconds * framesPerS));
    // Never more sends in flight than the ring holds (a buffer is rewritten only once its send is done).
    while (sent < due && sent - done < RING - 1) socket.send(frameAt(sent++), port, host, onSent);
    if (now >= endMs && sent >= Math.floor(seconds * framesPerS)) resolve();
    else if (sent < due) setImmediate(step); // waiting for sends to complete
    else setTimeout(step, 1); // caught up: sleep (a busy loop would take a core from the server)
  };
  step();
});
while (done < sent) await new Promise((r) => setTimeout(r, 1));
const wallS = (performance.now() - t0) / 1000;
socket.close();
console.log(JSON.stringify({ sent, errors, wallS, samplesPerFrame: n, framesPerS }));
