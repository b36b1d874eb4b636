/**
 * Real inputs through the whole server (config → inputs → bus → engine and recorder):
 * - `source.kind capture` with a sox command: the raw recording equals sox's own output bit for
 *   bit (int32 carrying 24-bit samples, and int24), and a command that exits is started again
 *   (restart delay ≤ 1 s) with the new run flagged as a discontinuity;
 * - one RTP session (L24) described by an SDP file: the int24 recording equals the integers sent;
 * - a 32-channel scene sent as one own-format stream and as 4 × 8-channel members (two RTP
 *   sessions, two own-format streams; different first samples, interleaved and late delivery)
 *   gives the same spectra (≤ 1e-6 dB; the members' samples are the same 24-bit integers); then
 *   a member that stops is absent, its channels left out, and the others carry on.
 * Paced by the server's own counters (samples received), never by the test's clock.
 */
import { mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterEach, describe, expect, it, vi } from 'vitest';
import WebSocket from 'ws';
import { encodeFrame } from '../../shared/frame.ts';
import { decodeRow } from '../../shared/messages.ts';
import type { Service } from '../../server/service.ts';
import { hasCommand, pipelineToFile, shellCommand, startRawRecording } from '../helpers/pcm-pipe.ts';
import { renderPlaneWaves } from '../helpers/plane-waves.ts';
import { encodePcm, encodeRtpPacket, LoopbackSender } from '../helpers/rtp-sender.ts';
import { getStatus, sleep, startTestService, waitFor } from '../helpers/service.ts';
import ring32 from '../../config/arrays/ring-32.json' with { type: 'json' };

vi.setConfig({ testTimeout: 120_000 });

const FS = 48000;
const HAS_SOX = hasCommand('sox', ['--version']);

let services: Service[] = [];
afterEach(async () => {
  for (const s of services) await s.close();
  services = [];
});
async function start(layer: Record<string, unknown>, opts = {}): Promise<Service> {
  const s = await startTestService(layer, opts);
  services.push(s);
  return s;
}

/** sox writing `seconds` of four sines as raw PCM; -D: no dither, so two runs agree. */
function soxSynth(bits: 24 | 32, seconds: string): string[] {
  return ['sox', '-D', '-n', '-r', String(FS), '-c', '4', '-b', String(bits), '-e', 'signed-integer', '-t', 'raw', '-', 'synth', seconds, 'sine', '440', 'sine', '1000', 'sine', '2000', 'sine', '3000'];
}
/** Packed 24-bit raw widened to S32_LE (the 24 bits at the top), as a 24-bit converter delivers S32_LE. */
const WIDEN = ['sox', '-D', '-t', 'raw', '-r', String(FS), '-c', '4', '-b', '24', '-e', 'signed-integer', '-', '-t', 'raw', '-b', '32', '-e', 'signed-integer', '-'];

describe.skipIf(!HAS_SOX)('capture source', () => {
  for (const [encoding, pipeline] of [
    ['int32', [soxSynth(24, '1'), WIDEN]],
    ['int24', [soxSynth(24, '1')]],
  ] as const) {
    it(`a sox command as the capture: the ${encoding} recording equals sox's output bit for bit; the command is restarted after it exits, flagged`, async () => {
      const dir = mkdtempSync(join(tmpdir(), 'nullsteer-capture-'));
      const want = pipelineToFile(pipeline, join(dir, 'sox.raw'));
      // The command waits for the test to start recording (a file appears), then writes 1 s and exits.
      const go = join(dir, 'go');
      const script = `while [ ! -e ${go} ]; do sleep 0.02; done; ${pipeline.map(shellCommand).join(' | ')}`;
      const svc = await start({ source: { kind: 'capture' }, capture: { command: ['sh', '-c', script], channels: 4, encoding, restartMinMs: 250, restartMaxMs: 1000 }, outputs: { dir }, engine: { workers: 1 }, processing: { azimuthStepDeg: 5 } });
      await startRawRecording(svc, encoding);
      writeFileSync(go, '');
      const got = await recordRtp(svc, dir, FS);
      expect(Buffer.from(got.bytes).equals(Buffer.from(want))).toBe(true);
      // The command exited; it is started again within restartMinMs (≤ 1 s), and its next run is a discontinuity.
      await waitFor(async () => (await getStatus(svc)).input.capture.restarts >= 1 && svc.bus.status().discontinuities >= 1, 30_000, 'a restart');
      const st = await getStatus(svc);
      expect(st.source.kind).toBe('capture');
      // The first wait is restartMinMs (250 ms), doubled after each short run up to restartMaxMs (1 s):
      // every restart comes within 1 s of the exit (the back-off itself: test/integration/capture.test.ts).
      expect(st.input.capture).toMatchObject({ overruns: 0, droppedSamples: 0, error: null });
      expect(st.input.capture.restartDelayMs).toBeGreaterThanOrEqual(250);
      expect(st.input.capture.restartDelayMs).toBeLessThanOrEqual(1000);
      expect(st.input.capture.lastExits[0]).toMatchObject({ code: 0, signal: null });
      expect(st.timeline.discontinuities).toBeGreaterThanOrEqual(1);
    });
  }
});

const SDP = (port: number, channels: number, name: string, offset: number) => `v=0
o=- 1 1 IN IP4 127.0.0.1
s=${name} test unit
c=IN IP4 127.0.0.1
t=0 0
a=ts-refclk:ptp=IEEE1588-2008:02-00-5E-FF-FE-00-53-01:0
a=mediaclk:direct=${offset}
m=audio ${port} RTP/AVP 97
a=rtpmap:97 L24/48000/${channels}
a=ptime:1
`;

/** Integers of the 24-bit grid for float samples in full-scale units (what L24 and int24 carry). */
function toInt24(x: Float32Array): Int32Array {
  const out = new Int32Array(x.length);
  for (let i = 0; i < x.length; i++) out[i] = Math.max(-(2 ** 23), Math.min(2 ** 23 - 1, Math.round(x[i] * 2 ** 23)));
  return out;
}

describe('RTP session from SDP', () => {
  it('an L24 stream round-trips bit-exact into an int24 recording', async () => {
    const dir = mkdtempSync(join(tmpdir(), 'nullsteer-rtp-'));
    writeFileSync(join(dir, 'unit-a.sdp'), SDP(5004, 4, 'unit-a', 1000));
    const svc = await start({ ingest: { rtp: { sessions: [{ name: 'unit-a', sdp: join(dir, 'unit-a.sdp') }] } }, outputs: { dir }, engine: { workers: 1 }, processing: { azimuthStepDeg: 5 } }, { rtpPort: () => 0 });
    const port = svc.inputs!.rtp[0].session!.port;
    const n = 48; // 1 ms packets
    const packets = 1000;
    const ints = new Int32Array(packets * n * 4);
    let a = 7;
    for (let i = 0; i < ints.length; i++) ints[i] = ((a = (a * 1103515245 + 12345) >>> 0) % 2 ** 24) - 2 ** 23;
    await startRawRecording(svc, 'int24');
    const tx = await LoopbackSender.open();
    try {
      for (let k = 0; k < packets; k++) {
        // Timestamps: media clock (sample index 5000 + k·n) plus the SDP's offset 1000, RFC 7273.
        await tx.send(encodeRtpPacket({ payloadType: 97, sequence: (65000 + k) & 0xffff, timestamp: 6000 + k * n, ssrc: 0x1234abcd }, encodePcm(ints.subarray(k * n * 4, (k + 1) * n * 4), 'L24')), port);
        if (k % 50 === 49) await waitFor(() => (svc.inputs!.rtp[0].stream.status().packets ?? 0) >= k - 10, 20_000, 'packets received');
      }
      const { stream, ...got } = await recordRtp(svc, dir, packets * n);
      const rec = new Int32Array(packets * n * 4);
      for (let i = 0; i < rec.length; i++) rec[i] = ((got.bytes[3 * i] | (got.bytes[3 * i + 1] << 8) | (got.bytes[3 * i + 2] << 16)) << 8) >> 8;
      expect(Array.from(rec)).toEqual(Array.from(ints));
      const st = (await getStatus(svc)).input.rtp[0];
      expect(st).toMatchObject({ name: 'unit-a', encoding: 'L24', channels: 4, packets, lost: 0, firstSampleIndex: 5000, mediaClockOffset: 1000, seqWraps: 1, tsRefclk: 'ptp=IEEE1588-2008:02-00-5E-FF-FE-00-53-01:0' });
      void stream;
    } finally {
      tx.close();
    }
  });
});

/** Stop the raw recording once `frames` have reached it; the file's sample bytes. */
async function recordRtp(svc: Service, dir: string, frames: number) {
  await waitFor(async () => (await (await fetch(`${svc.url}/api/recording`)).json()).frames >= frames, 20_000, `${frames} frames recorded`);
  const { readdirSync } = await import('node:fs');
  const { openWav } = await import('../../server/io/wav.ts');
  expect((await fetch(`${svc.url}/api/recording`, { method: 'DELETE', headers: { 'content-type': 'application/json' } })).status).toBe(200);
  const wav = readdirSync(dir).find((f) => /-raw-0001\.wav$/.test(f))!;
  const r = await openWav(join(dir, wav));
  try {
    return { stream: null, bytes: await r.readFrames(0, frames), info: r.info };
  } finally {
    await r.close();
  }
}


/** A row stream from the live socket: sample index → [mvdr dB, conventional dB]. */
function collectRows(svc: Service): { rows: Map<number, [Float32Array, Float32Array]>; close(): void } {
  const rows = new Map<number, [Float32Array, Float32Array]>();
  const ws = new WebSocket(`${svc.url.replace(/^http/, 'ws')}/api/live`);
  ws.on('message', (data, isBinary) => {
    if (!isBinary) return;
    const b = data as Buffer;
    const r = decodeRow(new Uint8Array(b.buffer, b.byteOffset, b.byteLength));
    rows.set(r.sampleIndex, [Float32Array.from(r.mvdrDb!), Float32Array.from(r.conventionalDb!)]);
  });
  return { rows, close: () => ws.close() };
}

/**
 * Send no further ahead than the engine's rows: it may be at most two rows (20 rows/s: 2 400
 * samples each) behind the `samples` sent, so no scan waits for a result slot and no hop finds the
 * ring full: the two runs then scan on the same schedule (checked by their counters).
 */
async function keepUp(svc: Service, samples: number): Promise<void> {
  const want = Math.floor(samples / 2400) - 2;
  if ((svc.engine.status() as { rows: number }).rows >= want) return;
  await waitFor(() => (svc.engine.status() as { rows: number }).rows >= want, 30_000, 'the engine to keep up');
}

/** Own-format frames over one WebSocket (a stream socket: nothing lost on a busy machine). */
async function ingestSocket(svc: Service): Promise<WebSocket> {
  const ws = new WebSocket(`${svc.url.replace(/^http/, 'ws')}/ingest`);
  await new Promise((r, j) => ws.once('open', r).once('error', j));
  return ws;
}

describe('several units, one array', () => {
  it('a 32-channel scene as one stream and as 4 × 8-channel members (2 RTP, 2 own format; different starts, interleaved and late) gives the same spectra; a member that stops is masked and the others go on', async () => {
    const dir = mkdtempSync(join(tmpdir(), 'nullsteer-units-'));
    const positions = ring32.positions as [number, number, number][];
    const M = 32;
    const L = 272 * 480; // 2.7 s compared (whole rounds)
    const TOTAL = L + 48000; // then 1 s with unit-b stopped
    const x = renderPlaneWaves({ positions, sampleRateHz: FS, frames: 1 << 18, speedOfSoundMps: 343.2, sources: [{ azimuthDeg: 70, rms: 0.1, loHz: 400, hiHz: 3000, seed: 11 }, { azimuthDeg: 215, rms: 0.03, loHz: 400, hiHz: 3000, seed: 12 }], noiseRms: 0.003, noiseSeed: 13 });
    // Both paths carry the same 24-bit integers: L24 in RTP, int24 in the own format.
    const ints = toInt24(x.subarray(0, TOTAL * M));
    const q = new Float32Array(ints.length);
    for (let i = 0; i < q.length; i++) q[i] = ints[i] / 2 ** 23;
    const processing = { azimuthStepDeg: 5, bandLowHz: 400, bandHighHz: 3000, spectrumRateHz: 20, tauS: 0.2 };
    const R = 480; // a round: 10 ms of every member
    const START = 960; // the members' largest first sample: where the merged array begins

    // 1. The reference: one 32-channel own-format stream from START.
    const plain = join(dir, 'ring-32.json');
    writeFileSync(plain, JSON.stringify({ name: 'ring-32, one stream', positions }));
    const ref = await start({ array: { file: plain }, engine: { workers: 1 }, processing });
    const refRows = collectRows(ref);
    const ws0 = await ingestSocket(ref);
    for (let t = START, k = 0; t < L; t += R, k++) {
      ws0.send(encodeFrame({ streamId: 1, sequence: k, firstSample: t, sampleRateHz: FS, channels: M, samplesPerChannel: R, encoding: 'int24' }, q.subarray(t * M, (t + R) * M)));
      await keepUp(ref, t - START);
    }
    await waitFor(() => ref.bus.status().samples >= L - START, 30_000, 'the reference input');
    await waitFor(() => [...refRows.rows.keys()].some((si) => si >= L - 4096), 30_000, 'the reference rows');
    ws0.close();
    refRows.close();
    const refEngine = ref.engine.status() as { shed: { changes: number }; scansDeferred: number; hopsSkipped: number };
    expect([refEngine.shed.changes, refEngine.scansDeferred, refEngine.hopsSkipped]).toEqual([0, 0, 0]);

    // 2. The same samples from four units.
    const members = [
      { source: 'unit-a', first: 0, offset: 0 },
      { source: 'unit-b', first: 480, offset: 777 },
      { source: 'stream:21', first: START, offset: 0 },
      { source: 'stream:22', first: 240, offset: 0 },
    ];
    const inputs = members.map((m, i) => ({ source: m.source, channels: [0, 1, 2, 3, 4, 5, 6, 7], positions: Array.from({ length: 8 }, (_, c) => 8 * i + c) }));
    const arrayFile = join(dir, 'ring-32-units.json');
    writeFileSync(arrayFile, JSON.stringify({ name: 'ring-32 from four units', positions, inputs }));
    writeFileSync(join(dir, 'unit-a.sdp'), SDP(5004, 8, 'unit-a', 0));
    writeFileSync(join(dir, 'unit-b.sdp'), SDP(5006, 8, 'unit-b', 777));
    const svc = await start(
      { array: { file: arrayFile }, engine: { workers: 1 }, processing, ingest: { groupHoldMs: 3000, reorderHoldMs: 2000, rtp: { jitterMs: 1000, sessions: [{ name: 'unit-a', sdp: join(dir, 'unit-a.sdp') }, { name: 'unit-b', sdp: join(dir, 'unit-b.sdp') }] } } },
      { rtpPort: () => 0 },
    );
    const rows = collectRows(svc);
    const rtpPorts = svc.inputs!.rtp.map((r) => r.session!.port);
    const tx = await LoopbackSender.open();
    const ws = await ingestSocket(svc);
    /** Member i's samples [t, t + n) as 8-channel interleaved values. */
    const part = (i: number, t: number, n: number): Float32Array => {
      const out = new Float32Array(n * 8);
      for (let f = 0; f < n; f++) for (let c = 0; c < 8; c++) out[f * 8 + c] = q[(t + f) * M + 8 * i + c];
      return out;
    };
    const partInts = (i: number, t: number, n: number): Int32Array => {
      const out = new Int32Array(n * 8);
      for (let f = 0; f < n; f++) for (let c = 0; c < 8; c++) out[f * 8 + c] = ints[(t + f) * M + 8 * i + c];
      return out;
    };
    const seq = [0, 0, 0, 0];
    const sendPart = async (i: number, t: number) => {
      const m = members[i];
      const n = Math.min(R, TOTAL - t); // every member ends at TOTAL
      if (i < 2) {
        // 1 ms packets; timestamps = media clock + the SDP's offset (RFC 7273).
        for (let p = 0; p < n; p += 48) {
          await tx.send(encodeRtpPacket({ payloadType: 97, sequence: seq[i]++ & 0xffff, timestamp: (t + p + m.offset) >>> 0, ssrc: 0x5100 + i }, encodePcm(partInts(i, t + p, 48), 'L24')), rtpPorts[i]);
        }
      } else {
        ws.send(encodeFrame({ streamId: i === 2 ? 21 : 22, sequence: seq[i]++, firstSample: t, sampleRateHz: FS, channels: 8, samplesPerChannel: n, encoding: 'int24' }, part(i, t, n)));
      }
    };
    // Each member from its own first sample; then rounds in a shuffled order, with a member now and
    // then a round late (within the hold time), so spans arrive interleaved and out of step.
    let rng = 99;
    const rand = () => ((rng = (rng * 1103515245 + 12345) >>> 0) / 2 ** 32);
    const next = members.map((m) => m.first);
    let late: { i: number; t: number }[] = [];
    for (let t = 0, k = 0; t < TOTAL; t += R, k++) {
      const nowLate: { i: number; t: number }[] = [];
      for (const i of [0, 1, 2, 3].sort(() => rand() - 0.5)) {
        if (t >= L && i === 1) continue; // unit-b stops after the compared part
        while (next[i] < t + R && next[i] < TOTAL) {
          // Late by a round only while every unit sends: after unit-b stops each span waits out the
          // hold, and a part held back across that wait would miss its span.
          if (t < L && rand() < 0.1) nowLate.push({ i, t: next[i] });
          else await sendPart(i, next[i]);
          next[i] += R;
        }
      }
      for (const l of late) await sendPart(l.i, l.t);
      late = nowLate;
      // Paced by the engine while every unit sends (the compared part). After unit-b stops every span
      // waits out the hold (3 s), so the engine cannot pace the sender (held back that long, it would
      // itself make the others late): it sends a round per 10 ms at most, about real time, so that
      // the spans come out of the hold spread as they went in, not as one burst.
      if (t < L) await keepUp(svc, t - START - 2 * R);
      else await sleep(10);
    }
    for (const l of late) await sendPart(l.i, l.t);
    await waitFor(() => [...rows.rows.keys()].some((si) => si >= L - 4096), 30_000, 'the merged rows');
    // Compared part: nothing lost, nobody absent, nothing shed.
    const mid = await getStatus(svc);
    const g = mid.input.group;
    expect(g.members.map((m: { name: string }) => m.name)).toEqual(['unit-a', 'unit-b', 'stream:21', 'stream:22']);
    // A part a round late waits in its stream's reorder buffer or jitter buffer (both set to hold
    // 1–2 s here: on a busy machine the sending loop itself may pause longer than the defaults).
    for (const r of mid.input.rtp) expect(r).toMatchObject({ lost: 0, late: 0 });
    for (const x of mid.streams) expect(x).toMatchObject({ framesLost: 0, framesLate: 0, gapSamples: 0 });
    for (const m of g.members) expect(m).toMatchObject({ absentSamples: 0, lateSamples: 0 });
    const eng = svc.engine.status() as { shed: { changes: number }; scansDeferred: number; hopsSkipped: number };
    expect([eng.shed.changes, eng.scansDeferred, eng.hopsSkipped]).toEqual([0, 0, 0]);
    let compared = 0;
    let worst = 0;
    for (const [si, [mv, cv]] of refRows.rows) {
      const other = rows.rows.get(si);
      if (!other || si + 4096 > L) continue;
      compared++;
      for (let d = 0; d < mv.length; d++) worst = Math.max(worst, Math.abs(mv[d] - other[0][d]), Math.abs(cv[d] - other[1][d]));
    }
    console.log(`units: ${compared} rows compared, worst difference ${worst.toExponential(2)} dB`);
    expect(compared).toBeGreaterThan(30);
    expect(worst).toBeLessThanOrEqual(1e-6);
    expect(Math.min(...rows.rows.keys())).toBe(Math.min(...refRows.rows.keys())); // the merged array began at START too

    // 3. unit-b stopped at L: absent, its positions left out of the scan, the others go on.
    await waitFor(() => svc.bus.status().samples >= TOTAL - START - 2 * R, 30_000, 'the rest of the input');
    await waitFor(() => [...rows.rows.keys()].some((si) => si >= L + FS / 2), 60_000, 'rows after the stop');
    const end = await getStatus(svc);
    const b = end.input.group.members[1];
    expect(b.absentSamples).toBeGreaterThan(0.5 * FS);
    expect(b.absentSpans).toBeGreaterThanOrEqual(1);
    expect(end.input.group.members.filter((m: { absentSamples: number }) => m.absentSamples > 0).map((m: { name: string }) => m.name)).toEqual(["unit-b"]);
    expect(end.input.channelsOut).toEqual([8, 9, 10, 11, 12, 13, 14, 15]);
    tx.close();
    ws.close();
    rows.close();
  });
});
