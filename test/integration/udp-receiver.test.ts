/**
 * The UDP receive thread and its queue (server/ingest/udp.ts) on 127.0.0.1, without the rest of the
 * service: datagrams reach the hub in order with their sender's address, the kernel's figures for the
 * socket are read, and a receive thread that ends unasked is replaced on the same port.
 */
import { createSocket, type Socket } from 'node:dgram';
import { afterEach, describe, expect, it } from 'vitest';
import { encodeFrame } from '../../shared/frame.ts';
import type { Block } from '../../shared/types.ts';
import { IngestHub } from '../../server/ingest/ingest-hub.ts';
import { DEFAULT_SEQUENCER_OPTIONS } from '../../server/ingest/sequencer.ts';
import { startUdpIngest, type UdpIngest } from '../../server/ingest/udp.ts';
import { waitFor } from '../helpers/service.ts';

const M = 2;
const N = 100;
const FS = 48000;

let udp: UdpIngest | null = null;
let tx: Socket | null = null;
afterEach(async () => {
  tx?.close();
  tx = null;
  await udp?.close();
  udp = null;
});

function frame(k: number): Uint8Array {
  const x = new Float32Array(M * N);
  for (let i = 0; i < x.length; i++) x[i] = Math.fround(((k * N * M + i) % 1000) / 1000);
  return encodeFrame({ streamId: 3, sequence: k, firstSample: k * N, sampleRateHz: FS, channels: M, samplesPerChannel: N, encoding: 'float32' }, x);
}

async function sendAll(from: number, to: number): Promise<void> {
  for (let k = from; k < to; k++) await new Promise<void>((r, j) => tx!.send(frame(k), udp!.port, '127.0.0.1', (e) => (e ? j(e) : r())));
}

describe('UDP receive thread', () => {
  it('delivers datagrams in order with their sender, reports the kernel figures, and survives the thread ending', async () => {
    const blocks: Block[] = [];
    const hub = new IngestHub({ sampleRateHz: FS, channels: M, encodings: ['float32'], maxFloatLevelDbfs: 60, streamId: null, maxStreams: 4, sequencer: DEFAULT_SEQUENCER_OPTIONS }, (b) => blocks.push(b));
    udp = await startUdpIngest(hub, '127.0.0.1', 0, { receiveBufferBytes: 1 << 20, queueBytes: 1 << 20 });
    tx = createSocket('udp4');
    await new Promise<void>((r) => tx!.bind(0, '127.0.0.1', () => r()));
    await sendAll(0, 300);
    await waitFor(() => hub.messages === 300, 5000, '300 datagrams');
    hub.flush();
    const st = hub.status()[0];
    expect(st).toMatchObject({ framesAccepted: 300, framesLost: 0, framesReordered: 0, remote: `127.0.0.1:${tx.address().port}` });
    // The kernel's view of the socket (Linux /proc/net/udp): nothing dropped, nothing left queued.
    expect(udp.kernel()).toEqual({ drops: 0, queuedBytes: 0 });
    expect(udp.queueDrops).toBe(0);

    await udp.killReceiver();
    await waitFor(() => udp!.receiverRestarts === 1, 5000, 'a new receive thread');
    // The new thread listens on the same port; a datagram sent before it bound may be lost
    // (ICMP port unreachable), so send until the first one arrives.
    let k = 300;
    await waitFor(
      async () => {
        await sendAll(k, k + 1);
        k++;
        return hub.messages > 300;
      },
      5000,
      'the new receive thread',
    );
    await sendAll(k, k + 100);
    await waitFor(() => hub.status()[0].framesAccepted >= 400, 5000, 'the frames after the restart');
    hub.flush();
    const after = hub.status()[0];
    // Positions decide placement: frames lost while no thread listened become a counted gap.
    expect(after.framesAccepted + after.framesLost).toBe(k + 100);
    let next = 0;
    for (const b of blocks) {
      expect(b.sampleIndex).toBe(next);
      next += b.frames;
    }
    expect(next).toBe((k + 100) * N);
  });
});
