/**
 * "above-background" through the whole chain (engine → sector beam → hop levels → 1-s Leq → running
 * L90 → event detector), faster than real time: a light array (4 microphones on a line, 16 kHz, FFT
 * 256) hears a steady broadband source at broadside for 10 minutes of simulated time, then the same
 * source 6 dB louder (amplitude × 2) for 5 s. The rule: 3 dB over the sector's running L90 (ISO
 * 1996-1's level exceeded 90 % of the time), minDurationS 1, releaseS 1. Issue 16's acceptance: the
 * steady background alone makes no event over the 10 minutes; the 6 dB rise makes one, starting
 * within ±0.25 s of it. Checked on sample indices, not time.
 */
import { describe, expect, it } from 'vitest';
import { Engine } from '../../server/engine/engine.ts';
import { EventMonitor, type MonitorEvent } from '../../server/monitor/events.ts';
import { Monitor } from '../../server/monitor/monitor.ts';
import { validateRule } from '../../shared/rules.ts';
import type { ArrayGeometry } from '../../shared/types.ts';
import { TestRandom } from '../helpers/random.ts';

const FS = 16_000, C = 343.2, M = 4, N = 256;
const STEADY_S = 600, RISE_S = 5, TAIL_S = 5;

describe('above-background through the chain, 10 minutes of simulated time', () => {
  it('a steady source makes no event in 10 minutes; a 6 dB rise makes one within ±0.25 s', async () => {
    const geometry: ArrayGeometry = { name: 'line-4-test', positions: Array.from({ length: M }, (_, m) => [m * 0.04, 0, 0] as [number, number, number]) };
    const rng = new TestRandom(77);
    const changes: { change: string; event: MonitorEvent }[] = [];
    let monitor: Monitor | null = null;
    let events: EventMonitor | null = null;
    const engine = await Engine.create({
      geometry,
      sampleRateHz: FS,
      params: { lambda: 1 - 128 / (FS * 0.5), loading: { mode: 'relative', ratio: 0.01 }, bandHz: [300, 4000], grid: { azimuthDeg: { startDeg: 0, stopDeg: 180, stepDeg: 5 } }, methods: ['mvdr'], spectrumRateHz: 5, normalise: false, fftSize: N },
      workers: 1,
      speedOfSoundMps: C,
      onRow: (row) => monitor?.row(row),
      onHopSnapshot: (snap, offset, start) => monitor?.hop(snap, offset, start),
      shedding: false,
    });
    try {
      monitor = new Monitor({ engine, sampleRateHz: FS, levelsDir: null, splOffsetDb: null, omniWeighting: 'Z', utcOfSample: (k) => (k * 1000) / FS, onSecond: (series, db) => events?.second(series, db), onHopLevel: (series, k, f, ms) => events?.hopLevel(series, k, f, ms) });
      monitor.setSectors([{ name: 'gate', azimuthDeg: [80, 100], method: 'mvdr', weighting: 'Z' }]);
      const mon = monitor;
      events = new EventMonitor({ sampleRateHz: FS, splOffsetDb: null, dir: null, utcOfSample: (k) => mon.utcOfSample(k), lookOf: (sec) => mon.meters.look(sec), onChange: (change, event) => changes.push({ change, event }) });
      const problems: string[] = [];
      events.setRules([validateRule('gate-rise', { sector: 'gate', threshold: { mode: 'above-background', db: 3 }, minDurationS: 1, releaseS: 1 }, 10, (p, m) => problems.push(`${p} ${m}`))!]);
      expect(problems).toEqual([]);
      const frames = 8000;
      const total = (STEADY_S + RISE_S + TAIL_S) * FS;
      const riseAt = STEADY_S * FS, riseEnd = riseAt + RISE_S * FS;
      const data = new Float32Array(M * frames);
      for (let k = 0; k * frames < total; k++) {
        for (let n = 0; n < frames; n++) {
          const i = k * frames + n;
          const x = (i >= riseAt && i < riseEnd ? 0.1 : 0.05) * rng.gaussian();
          for (let m = 0; m < M; m++) data[m * frames + n] = x + 0.0005 * rng.gaussian();
        }
        await engine.pushAsync({ streamId: 1, sampleIndex: k * frames, sampleRateHz: FS, channels: M, frames, data, gap: false, discontinuity: false });
      }
      await engine.drain();
      const steady = changes.filter((c) => c.event.startSample < riseAt);
      const started = changes.filter((c) => c.change === 'started');
      console.log(`monitor background: ${mon.store.seconds('gate').length} s kept, ${steady.length} changes in the steady 10 minutes, ${started.length} started; start ${started[0] ? ((started[0].event.startSample - riseAt) / FS).toFixed(3) : '—'} s from the rise`);
      expect(steady).toEqual([]);
      expect(started).toHaveLength(1);
      expect(Math.abs(started[0].event.startSample - riseAt) / FS).toBeLessThanOrEqual(0.25);
      expect(changes.filter((c) => c.change === 'ended')).toHaveLength(1);
    } finally {
      await engine.close();
    }
  }, 240_000);
});
