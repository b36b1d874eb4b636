/**
 * Beam frames to a UDP subscriber on 127.0.0.1 over 60 s of simulated input (the engine run offline,
 * faster than real time): no sequence gaps, contiguous sample indices, every sample delivered.
 */
import { createSocket } from 'node:dgram';
import { describe, expect, it } from 'vitest';
import { loadGeometry } from '../../server/config/array-file.ts';
import { Engine } from '../../server/engine/engine.ts';
import { SceneSimulator } from '../../server/ingest/simulator.ts';
import { BeamStreamOut } from '../../server/outputs/stream-out.ts';
import { decodeFrame } from '../../shared/frame.ts';

const ARRAYS = new URL('../../config/arrays/', import.meta.url).pathname;

describe('beam stream out', () => {
  it('60 s of simulated input reach a UDP subscriber with no sequence gap', { timeout: 120_000 }, async () => {
    const g = await loadGeometry(`${ARRAYS}line-8.json`);
    const sub = createSocket({ type: 'udp4', recvBufferSize: 8 << 20 });
    await new Promise<void>((r) => sub.bind(0, '127.0.0.1', () => r()));
    const seqs: number[] = [];
    let samples = 0;
    let next = -1;
    let contiguous = true;
    sub.on('message', (m) => {
      const r = decodeFrame(new Uint8Array(m.buffer, m.byteOffset, m.byteLength));
      if (!r.ok) return;
      seqs.push(r.frame.sequence);
      if (next >= 0 && r.frame.firstSample !== next) contiguous = false;
      next = r.frame.firstSample + r.frame.samplesPerChannel;
      samples += r.frame.samplesPerChannel;
    });
    const out = new BeamStreamOut({ sampleRateHz: 48000, streamId: 9, udpTarget: `127.0.0.1:${sub.address().port}`, path: '/unused' });
    const engine = await Engine.create({
      geometry: g,
      sampleRateHz: 48000,
      params: { lambda: 0.99, loading: { mode: 'relative', ratio: 0.01 }, bandHz: [300, 4000], grid: { azimuthDeg: { startDeg: 0, stopDeg: 180, stepDeg: 2 } }, methods: ['mvdr'], spectrumRateHz: 10, normalise: false, fftSize: 512 },
      workers: 2,
      speedOfSoundMps: 343.2,
      onRow: () => {},
      onBeamAudio: (h) => out.send(h),
      shedding: false,
    });
    try {
      engine.addBeam(90, 0, 'mvdr');
      const sim = new SceneSimulator({ geometry: g, sampleRateHz: 48000, blockFrames: 4800, seed: 5 });
      const seconds = 60;
      for (let k = 0; k < seconds * 10; k++) {
        await engine.pushAsync(sim.next());
        // Let the subscriber read: a loopback socket buffer holds only ~100 datagrams (net.core.rmem_max).
        await new Promise((r) => setTimeout(r, 2));
      }
      await engine.drain();
      await new Promise((r) => setTimeout(r, 300));
      // Hops of N = 512 over L + 256 primed samples, less the primer hop (before sample 0, not sent).
      const hops = Math.floor((seconds * 48000 + 256 - 512) / 256);
      expect(seqs.length).toBe(out.frames);
      for (let k = 1; k < seqs.length; k++) expect(seqs[k]).toBe(seqs[k - 1] + 1);
      expect(contiguous).toBe(true);
      expect(samples).toBe(hops * 256);
      expect(samples).toBeGreaterThan(59.9 * 48000);
      expect(out.udpErrors).toBe(0);
    } finally {
      await engine.close();
      await out.close();
      sub.close();
    }
  });
});
