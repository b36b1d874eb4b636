/**
 * Beam frames to a UDP subscriber on 127.0.0.1 over 60 s of simulated input (the engine run offline,
 * faster than real time): no sequence gaps, contiguous sample indices, every sample delivered.
 * WebSocket listeners of the beam audio under the dashboard's slow-client policy: listeners that
 * stop reading are queued, dropped for and closed with 1013, and neither slow down nor lock out a
 * listener that reads.
 */
import { createSocket } from 'node:dgram';
import { createServer, type Server } from 'node:http';
import type { Socket } from 'node:net';
import { describe, expect, it } from 'vitest';
import WebSocket from 'ws';
import { LIVE_ERRORS } from '../../server/http/hub.ts';
import { loadGeometry } from '../../server/config/array-file.ts';
import { Engine } from '../../server/engine/engine.ts';
import { SceneSimulator } from '../../server/ingest/simulator.ts';
import { BeamStreamOut } from '../../server/outputs/stream-out.ts';
import { decodeFrame, maxSamplesPerFrame } from '../../shared/frame.ts';

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

  it('16 listeners that stop reading are closed with 1013 and do not block one that reads: it gets every frame in order', { timeout: 60_000 }, async () => {
    const STALLED = 16;
    const BEAMS = 8;
    const HOP = 256;
    const out = new BeamStreamOut({ sampleRateHz: 48000, streamId: 9, udpTarget: null, path: '/audio', maxClients: STALLED + 1, queueFrames: 32, maxBufferedBytes: 65536, slowClientTimeoutMs: 500 });
    const server: Server = createServer((_req, res) => res.writeHead(404).end());
    server.on('upgrade', (req, socket, head) => {
      if (!out.handleUpgrade(req, socket, head)) socket.destroy();
    });
    await new Promise<void>((r) => server.listen(0, '127.0.0.1', () => r()));
    const url = `ws://127.0.0.1:${(server.address() as { port: number }).port}/audio`;
    const peers: WebSocket[] = [];
    /** A listener: frames as (sequence, first sample, samples), and how it was closed. */
    const listen = (read: boolean) => {
      const ws = new WebSocket(url);
      peers.push(ws);
      const l = { ws, frames: [] as { seq: number; first: number; n: number; ch: number }[], close: null as { code: number; reason: string } | null, refused: 0 };
      ws.on('message', (m: Buffer) => {
        const r = decodeFrame(new Uint8Array(m.buffer, m.byteOffset, m.byteLength));
        if (r.ok) l.frames.push({ seq: r.frame.sequence, first: r.frame.firstSample, n: r.frame.samplesPerChannel, ch: r.frame.channels });
      });
      ws.on('close', (code, reason) => (l.close = { code, reason: String(reason) }));
      ws.on('error', () => {});
      const opened = new Promise<boolean>((r) => {
        ws.once('open', () => {
          if (!read) (ws as unknown as { _socket: Socket })._socket.pause();
          r(true);
        });
        ws.once('unexpected-response', (req, res) => {
          l.refused = res.statusCode ?? -1;
          req.destroy();
          r(false);
        });
        ws.once('close', () => r(false));
      });
      return { l, opened };
    };
    /** Let the readers take what was sent until each lags by at most `lag` frames (bounded: 20 s). */
    const catchUp = async (lag: number, ...ls: { l: { frames: unknown[] }; from: number }[]) => {
      const until = Date.now() + 20_000;
      await new Promise((r) => setImmediate(r));
      while (ls.some(({ l, from }) => out.frames - from - l.frames.length > lag) && Date.now() < until) await new Promise((r) => setImmediate(r));
    };
    let hops = 0;
    const sendHop = () => {
      const data = new Float32Array(BEAMS * HOP);
      for (let b = 0; b < BEAMS; b++) for (let i = 0; i < HOP; i++) data[b * HOP + i] = Math.sin(0.01 * (hops * HOP + i) + b);
      out.send({ sampleIndex: hops * HOP, frames: HOP, ids: Array.from({ length: BEAMS }, (_, b) => b + 1), data });
      hops++;
    };
    const reader = listen(true);
    try {
      expect(await reader.opened).toBe(true);
      const stalled = Array.from({ length: STALLED }, () => listen(false));
      expect(await Promise.all(stalled.map((s) => s.opened))).toEqual(Array(STALLED).fill(true));
      const extra = listen(true);
      expect(await extra.opened).toBe(false);
      expect(extra.l.refused).toBe(503); // beyond maxClients

      // Audio until every stalled listener has been closed; the reader is never let fall behind by
      // more than 64 frames, so what it misses could only be the server's doing.
      const giveUp = Date.now() + 30_000;
      while (out.stats().wsClosedSlow < STALLED && Date.now() < giveUp) {
        sendHop();
        await catchUp(64, { l: reader.l, from: 0 });
      }
      expect(out.stats()).toMatchObject({ wsClosedSlow: STALLED, wsRefused: 1, subscribers: 1 });
      const dropped = out.stats().wsDropped;
      expect(dropped).toBeGreaterThan(0);

      // The stalled ones read again and see their 1013; their places are free for new listeners.
      for (const s of stalled) (s.l.ws as unknown as { _socket: Socket })._socket.resume();
      for (let k = 0; k < 2000 && stalled.some((s) => s.l.close === null); k++) await new Promise((r) => setTimeout(r, 5));
      for (const s of stalled) expect(s.l.close).toEqual({ code: 1013, reason: LIVE_ERRORS.ERR_LIVE_SLOW_CLIENT.reason });
      const late = listen(true);
      expect(await late.opened).toBe(true);
      const lateFrom = out.frames;
      for (let k = 0; k < 50; k++) {
        sendHop();
        await catchUp(64, { l: reader.l, from: 0 }, { l: late.l, from: lateFrom });
      }
      await catchUp(0, { l: reader.l, from: 0 }, { l: late.l, from: lateFrom });

      // The reader: every frame sent, sequence 0, 1, 2 … and sample indices without a hole.
      const per = maxSamplesPerFrame(BEAMS, 'float32');
      const framesPerHop = Math.ceil(HOP / per);
      expect(out.frames).toBe(hops * framesPerHop);
      const check = (frames: { seq: number; first: number; n: number; ch: number }[], fromSeq: number, fromSample: number) => {
        frames.forEach((f, i) => {
          if (f.seq !== fromSeq + i) throw new Error(`frame ${i}: sequence ${f.seq}, expected ${fromSeq + i}`);
        });
        let next = fromSample;
        for (const f of frames) {
          expect(f.first).toBe(next);
          expect(f.ch).toBe(BEAMS);
          next += f.n;
        }
        return next;
      };
      expect(reader.l.frames).toHaveLength(out.frames);
      expect(check(reader.l.frames, 0, 0)).toBe(hops * HOP);
      expect(late.l.frames).toHaveLength(out.frames - lateFrom);
      expect(check(late.l.frames, lateFrom, (hops - 50) * HOP)).toBe(hops * HOP);
      // The stalled ones got a prefix of the stream, in order, with the drops in between.
      for (const s of stalled) {
        for (let i = 1; i < s.l.frames.length; i++) expect(s.l.frames[i].seq).toBeGreaterThan(s.l.frames[i - 1].seq);
      }
      const st = out.stats();
      expect(st).toMatchObject({ subscribers: 2, wsClosedSlow: STALLED, wsRefused: 1 });
      expect(st.wsDropped).toBe(dropped);
      console.log(`beam audio: ${hops} hops (${out.frames} frames) to 1 reader, all in order; ${STALLED} stalled listeners closed 1013 with ${dropped} frames dropped for them; 1 refused (503)`);
    } finally {
      for (const p of peers) p.terminate();
      await out.close();
      await new Promise<void>((r) => server.close(() => r()));
    }
  });
});
