/**
 * UDP ingest under load (issue 12, item 5): a sender in its own process offers ring-24 int16 frames
 * (24 channels, 30 samples, 1 472 bytes: the MTU-sized frames of docs/wire-format.md) at 10× real
 * time. Whatever this machine's load does to the rates, every frame sent must be accounted for:
 *
 *   sent = read by the server + dropped by the kernel            (the kernel's count, /proc/net/udp)
 *   read = Σ the ingest-wide reasons + Σ per stream (accepted + duplicated + late + refused by reason)
 *   sent = accepted + framesLost (sequence numbers in zero-filled gaps and resync skips)
 *               + the frames after the last one that arrived (the tail: only the kernel saw them)
 *
 * and the timeline holds exactly the accepted samples plus the zero-filled ones. No rate or timing
 * is asserted: the comparison of 2×, 4× and 10× is in `npm run bench -- --ingest`.
 */
import { spawn } from 'node:child_process';
import { fileURLToPath } from 'node:url';
import { afterEach, describe, expect, it } from 'vitest';
import type { Block } from '../../shared/types.ts';
import type { Service } from '../../server/service.ts';
import { collectBlocks, getStatus, startTestService, waitFor } from '../helpers/service.ts';

const SENDER = fileURLToPath(new URL('../../bench/udp-sender.ts', import.meta.url));
const RING24 = fileURLToPath(new URL('../../config/arrays/ring-24.json', import.meta.url));

let svc: Service | null = null;
afterEach(async () => {
  await svc?.close();
  svc = null;
});

function runSender(port: number, channels: number, speed: number, seconds: number): Promise<{ sent: number; samplesPerFrame: number }> {
  const child = spawn(process.execPath, ['--import', 'tsx', SENDER, '127.0.0.1', String(port), String(channels), String(speed), String(seconds)], { stdio: ['ignore', 'pipe', 'pipe'] });
  let out = '';
  let err = '';
  child.stdout.on('data', (d) => (out += d));
  child.stderr.on('data', (d) => (err += d));
  const killer = setTimeout(() => child.kill('SIGKILL'), 60_000);
  return new Promise((resolve, reject) =>
    child.on('exit', (code) => {
      clearTimeout(killer);
      if (code !== 0) reject(new Error(`sender exited with ${code}: ${err}`));
      else resolve(JSON.parse(out.trim().split('\n').pop()!));
    }),
  );
}

const sum = (o: Record<string, number>) => Object.values(o).reduce((a, b) => a + b, 0);

describe('UDP ingest at 10× real time from another process', () => {
  it('accounts for every frame sent: read or dropped by the kernel, and every lost frame under a reason', async () => {
    svc = await startTestService({ array: { file: RING24 } });
    const blocks: Block[] = collectBlocks(svc);
    const { sent, samplesPerFrame: n } = await runSender(svc.udpPort!, 24, 10, 1.5);
    expect(n).toBe(30); // (1472 − 32) / (24 · 2), docs/wire-format.md "Sizes"
    expect(sent).toBe(Math.floor((1.5 * 10 * 48000) / 30)); // 24 000 frames
    await checkAccounts(svc, blocks, sent, n, '10×');
  }, 90_000);

  it('a stalled service thread loses frames only to the full queue, each counted, and the stream carries on', async () => {
    // The receive thread keeps reading while this thread is stalled; its queue (1 MiB, about 700
    // frames) fills and the rest are refused as queue_full. The stall lasts until that happened.
    svc = await startTestService({ array: { file: RING24 }, ingest: { udp: { queueBytes: 1 << 20 } } });
    const blocks: Block[] = collectBlocks(svc);
    const sender = runSender(svc.udpPort!, 24, 10, 2);
    await waitFor(() => svc!.hub!.messages > 500, 20_000, 'the first frames');
    const until = Date.now() + 10_000;
    let checked = 0;
    while (Date.now() < until) {
      if (++checked % 4096 === 0 && (svc.status() as any).listeners.udp.queueDrops > 0) break;
    }
    const { sent, samplesPerFrame: n } = await sender;
    const st = await checkAccounts(svc, blocks, sent, n, 'stalled');
    expect(st.ingest.rejected.queue_full).toBeGreaterThan(0);
    expect(st.streams[0].framesAccepted).toBeGreaterThan(500);
  }, 90_000);
});

/** The identities of the file's header, checked on the service's status and published blocks. */
async function checkAccounts(svc: Service, blocks: Block[], sent: number, n: number, label: string): Promise<any> {
  // Wait until every datagram is either read or counted by the kernel (bounded), then release the reorder window.
  let st: any;
  await waitFor(
    async () => {
      st = await getStatus(svc);
      return st.ingest.messages + (st.listeners.udp.kernelDrops ?? 0) >= sent;
    },
    30_000,
    'every datagram read or dropped',
  );
  svc.hub!.flush();
  st = await getStatus(svc);
  const udp = st.listeners.udp;
  const s = st.streams[0];
  const read = st.ingest.messages;
  console.log(
    `[ingest ${label}] sent ${sent}, read ${read}, kernel drops ${udp.kernelDrops}, queue_full ${st.ingest.rejected.queue_full}; ` +
      `accepted ${s.framesAccepted}, lost ${s.framesLost}, gaps ${s.gaps} (${s.gapSamples} samples), resyncs ${s.resyncs}, rejected ${JSON.stringify(Object.fromEntries(Object.entries(s.rejected).filter(([, v]) => v)))}`,
  );
  // 1. The kernel reports the socket's drops on Linux; sent = read + dropped in the kernel.
  expect(typeof udp.kernelDrops).toBe('number');
  expect(read + udp.kernelDrops).toBe(sent);
  // 2. Everything read is in exactly one counter.
  expect(st.streams).toHaveLength(1);
  expect(sum(st.ingest.rejected) + s.framesAccepted + s.framesDuplicated + s.framesLate + sum(s.rejected)).toBe(read);
  // 3. Every sequence number is accepted, counted lost (in a gap or skipped by a resync), or
  //    after the last frame that arrived (the tail, which only the kernel's count holds).
  expect(s.firstSample).toBe(0); // the sender starts at sample 0 with sequence 0
  const tail = sent - (s.nextSample - s.firstSample) / n;
  expect(tail).toBeGreaterThanOrEqual(0);
  expect(s.framesAccepted + s.framesLost + tail).toBe(sent);
  expect(s.framesDuplicated).toBe(0); // loopback neither duplicates nor reorders
  // 4. The timeline is the accepted samples plus the zeros: contiguous between discontinuities.
  expect(st.timeline.samples).toBe(s.samplesAccepted + s.gapSamples);
  expect(st.timeline.discontinuities).toBe(s.resyncs);
  let next = blocks[0].sampleIndex;
  for (const b of blocks) {
    if (!b.discontinuity) expect(b.sampleIndex).toBe(next);
    next = b.sampleIndex + b.frames;
  }
  expect(s.framesAccepted).toBeGreaterThan(0);
  return st;
}
