/**
 * Levels per direction (server/monitor/sector-meters.ts) on the real engine: an 8-microphone line
 * along x (spacing 3 samples at 48 kHz and 343.2 m/s, so the endfire interferer's delays are whole
 * samples and the scene is exact), a wanted source at broadside (90°: the same samples on every
 * channel) and an interferer at endfire (0°) 9.5 dB louder, both seeded white noise.
 * Reference, computed here from each signal alone with the same STFT and band (weighted-band-power.ts,
 * whose scale is checked against Parseval in test/unit/weighted-band-power.test.ts): the sector beam at 80–100°
 * reads the wanted source's band power and the one at 0–10° the interferer's, each within 1 dB
 * (MVDR's distortionless response, w^H v = 1, J. Capon 1969; the rest is the finite-snapshot and
 * diagonal-loading loss), and the omnidirectional level reads their sum within 0.2 dB.
 */
import { describe, expect, it } from 'vitest';
import { MultiChannelStft } from '../../server/dsp/stft.ts';
import { Engine } from '../../server/engine/engine.ts';
import { WeightedBandPower } from '../../server/monitor/weighted-band-power.ts';
import { SectorMeters, type LevelSink } from '../../server/monitor/sector-meters.ts';
import { TestRandom } from '../helpers/random.ts';
import { LINE_C, LINE_FS, LINE_M, LINE_N, lineBlock, lineGeometry, lineParams } from '../helpers/line-scene.ts';

const FS = LINE_FS, C = LINE_C, M = LINE_M, N = LINE_N;
const SECONDS = 8;

describe('sector levels on the engine: a beam per sector, metered every hop', () => {
  it('broadside source and a 9.5 dB louder endfire interferer: each sector reads its own source within 1 dB, the omni level their sum', async () => {
    const rng = new TestRandom(21);
    const total = SECONDS * FS;
    const s = new Float32Array(total), i = new Float32Array(total + 3 * M);
    for (let n = 0; n < total; n++) s[n] = 0.05 * rng.gaussian();
    for (let n = 0; n < i.length; n++) i[n] = 0.15 * rng.gaussian();
    const got = new Map<string, { start: number; ms: number }[]>();
    const sink = (name: string | null): LevelSink => {
      const list: { start: number; ms: number }[] = [];
      got.set(name ?? '(omni)', list);
      return { push: (start, _frames, ms) => list.push({ start, ms }) };
    };
    let meters: SectorMeters | null = null;
    const engine = await Engine.create({
      geometry: lineGeometry(),
      sampleRateHz: FS,
      params: lineParams(),
      workers: 1,
      speedOfSoundMps: C,
      onRow: (row) => meters?.row(row),
      onHopSnapshot: (snap, offset, start) => meters?.hop(snap, offset, start),
      shedding: false,
    });
    try {
      meters = new SectorMeters(engine, { sampleRateHz: FS, sink, omniWeighting: 'Z' });
      meters.setSectors([
        { name: 'gate', azimuthDeg: [80, 100], method: 'mvdr', weighting: 'Z' },
        { name: 'fence', azimuthDeg: [0, 10], method: 'mvdr', weighting: 'Z' },
      ]);
      expect(engine.beams).toHaveLength(2);
      const frames = 4800;
      for (let k = 0; k * frames < total; k++) {
        await engine.pushAsync(lineBlock(k, frames, s, i));
      }
      await engine.drain();
      const st = meters.status();
      expect(st.map((x) => x.error)).toEqual([null, null]);
      expect(st[0].lookAzimuthDeg).toBe(90);
      expect(st[1].lookAzimuthDeg).toBe(0);

      // References: each source alone, through the same STFT and band bins.
      const { startBin, count } = engine.band;
      const z = new WeightedBandPower({ weighting: 'Z', fftSize: N, sampleRateHz: FS, startBin, count });
      const reference = (chan: (m: number, n: number) => number) => {
        const stft = new MultiChannelStft(M, N);
        const data = new Float32Array(M * total);
        for (let m = 0; m < M; m++) for (let n = 0; n < total; n++) data[m * total + n] = chan(m, n);
        let sum = 0, hops = 0;
        stft.push(data, total, 0, (snap, start) => {
          if (start < (SECONDS - 3) * FS) return;
          sum += z.meanSquareOfSnapshot(snap, M);
          hops++;
        });
        return sum / hops;
      };
      const refS = reference((_m, n) => s[n]);
      const refI = reference((m, n) => i[n + 3 * m]);
      const mean = (name: string) => {
        const l = got.get(name)!.filter((x) => x.start >= (SECONDS - 3) * FS);
        return l.reduce((p, x) => p + x.ms, 0) / l.length;
      };
      const db = (x: number) => 10 * Math.log10(x);
      const gate = db(mean('gate')) - db(refS), fence = db(mean('fence')) - db(refI), omni = db(mean('(omni)')) - db(refS + refI);
      console.log(`sector levels: gate ${db(mean('gate')).toFixed(2)} dBFS vs source alone ${db(refS).toFixed(2)} (${gate.toFixed(2)} dB), fence ${fence.toFixed(2)} dB, omni ${omni.toFixed(3)} dB; interferer ${(db(refI) - db(refS)).toFixed(2)} dB over the source`);
      expect(Math.abs(gate)).toBeLessThan(1);
      expect(Math.abs(fence)).toBeLessThan(1);
      expect(Math.abs(omni)).toBeLessThan(0.2);
      // Every hop after the first frame was metered by the omni meter (sample-index continuity).
      const omniHops = got.get('(omni)')!;
      for (let k = 1; k < omniHops.length; k++) expect(omniHops[k].start - omniHops[k - 1].start).toBe(N / 2);
      // Each frame stands for its middle hop (weighted-band-power.ts hopSpanStart): frame start + N/4.
      expect(((omniHops[0].start % (N / 2)) + N / 2) % (N / 2)).toBe(N / 4);
      meters.close();
      expect(engine.beams).toHaveLength(0);
    } finally {
      await engine.close();
    }
  }, 60_000);
});
