/**
 * The site scene (server/ingest/site-scene.ts, site-scene-file.ts) against closed forms:
 * - spherical spreading: level at range r = level at 1 m − 20·log10(r) (point source in free field,
 *   pressure ∝ 1/r; any acoustics text, from memory);
 * - propagation delay r/c per microphone, measured with GCC-PHAT (Knapp & Carter 1976;
 *   server/dsp/gcc-phat.ts, itself checked against numpy);
 * - a moving source's arrival at the retarded time: for a source in straight-line motion
 *   S(t) = P₀ + v·t·u, the emission time t_e of the sound heard at Q at time t solves
 *   |Q − P₀ − v u t_e| = c (t − t_e), a quadratic in t_e (Liénard–Wiechert-style retarded time, from
 *   memory), solved here in closed form, independently of the renderer's fixed-point iteration;
 * - the MVDR peak of the project's offline chain (server/dsp/scan-pipeline.ts) on a far source at the
 *   site bearing minus the array's heading (shared/site.ts: array azimuth = site azimuth − heading);
 * - determinism: two renderers started at different sample indices with different block lengths
 *   give bit-identical samples for the same indices, also across a 2^32 sample boundary.
 */
import { mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import type { ArrayGeometry } from '../../shared/types.ts';
import type { Pose } from '../../shared/site.ts';
import { ConfigError } from '../../server/config/validate.ts';
import { loadGeometry } from '../../server/config/array-file.ts';
import { GccPhat } from '../../server/dsp/gcc-phat.ts';
import { ScanPipeline } from '../../server/dsp/scan-pipeline.ts';
import { loadScene, validateScene, type SceneSource, type SiteScene } from '../../server/ingest/site-scene-file.ts';
import { SiteSceneSimulator, utcSampleIndex } from '../../server/ingest/site-scene.ts';
import { bandPass } from '../../server/ingest/scene-signals.ts';
import { createSiteSceneSimulator, UtcSceneSource } from '../../server/ingest/site-scene-source.ts';

const FS = 48000;
const C = 343.2;

function scene(sources: SceneSource[], noiseDbfs: number | null = null): SiteScene {
  return { name: 'test', speedOfSoundMps: C, sources, noiseDbfs };
}

function fixedSource(name: string, positionM: [number, number, number], signal: SceneSource['signal'], levelDbAt1m = -6): SceneSource {
  return { name, levelDbAt1m, signal, positionM, path: null };
}

function arrayAt(pose: Pose, positions: [number, number, number][], name = 'a'): ArrayGeometry {
  return { name, positions, pose };
}

/** Renders `frames` samples from n0 in one go: planar channels. */
function render(sim: SiteSceneSimulator, n0: number, blocks: number): { data: Float32Array; frames: number } {
  const f = sim.blockFrames;
  const m = sim.channels;
  const block = new Float32Array(m * f);
  const data = new Float32Array(m * f * blocks);
  const frames = f * blocks;
  for (let b = 0; b < blocks; b++) {
    sim.renderInto(block, n0 + b * f);
    for (let ch = 0; ch < m; ch++) data.set(block.subarray(ch * f, (ch + 1) * f), ch * frames + b * f);
  }
  return { data, frames };
}

function rmsDb(x: ArrayLike<number>, start = 0, end = x.length): number {
  let s = 0;
  for (let i = start; i < end; i++) s += x[i] * x[i];
  return 10 * Math.log10(s / (end - start));
}

function dist(a: ArrayLike<number>, b: ArrayLike<number>): number {
  return Math.hypot(a[0] - b[0], a[1] - b[1], a[2] - b[2]);
}

const SQUARE: [number, number, number][] = [[0.1, 0, 0], [0, 0.1, 0], [-0.1, 0, 0], [0, -0.1, 0]];

describe('site scene file', () => {
  const good = {
    name: 'yard', speedOfSoundMps: 340, noiseDbfs: -80,
    sources: [
      { name: 'pump', levelDbAt1m: -10, signal: { kind: 'broadband', lowHz: 200, highHz: 4000 }, positionM: [1, 2, 3] },
      { name: 'cart', levelDbAt1m: -10, signal: { kind: 'tonal', frequencyHz: 700 }, path: { pointsM: [[0, 0, 1], [10, 0, 1]], speedMps: 2, loop: false } },
    ],
  };

  it('reads a good scene, with the defaults filled in', () => {
    const s = validateScene(good, 'yard.json');
    expect(s.sources.map((x) => [x.name, x.positionM, x.path?.speedMps ?? null])).toEqual([['pump', [1, 2, 3], null], ['cart', null, 2]]);
    const d = validateScene({ name: 'x', sources: [good.sources[0]] }, 'x.json');
    expect([d.speedOfSoundMps, d.noiseDbfs]).toEqual([343.2, -90]);
    expect(validateScene({ ...good, noiseDbfs: null }, 'x.json').noiseDbfs).toBeNull();
  });

  it('reads the example scene and its three arrays', async () => {
    const s = await loadScene('config/scenes/eastgate-yard.json');
    expect(s.sources.length).toBe(4);
    for (const a of ['yard-west', 'yard-east', 'yard-north']) {
      const g = await loadGeometry(`config/arrays/${a}.json`);
      expect(g.pose).toBeDefined();
      const sim = new SiteSceneSimulator({ scene: s, geometry: g, sampleRateHz: FS, blockFrames: 1024, startIndex: 0 });
      // The issue's scene: three stationary sources 20–60 m from every array.
      for (const t of sim.truth(0).filter((x) => x.name !== 'cart')) expect(t.rangeM).toBeGreaterThan(20), expect(t.rangeM).toBeLessThan(60);
    }
  });

  const bad: [string, unknown, string[]][] = [
    ['not an object', [1], ['f.json: not a JSON object']],
    ['unknown top field', { ...good, colour: 'red' }, ['f.json: colour is not a field here']],
    ['no name, no sources', { sources: [] }, ['f.json: name must be', 'f.json: sources must be a list of 1–32 sources']],
    ['bad speed of sound and noise', { ...good, speedOfSoundMps: 5, noiseDbfs: 3 }, ['f.json: speedOfSoundMps must be a number of m/s in 200–2000', 'f.json: noiseDbfs must be']],
    ['both position and path', { ...good, sources: [{ ...good.sources[0], path: good.sources[1].path }] }, ['f.json: sources[0] must have exactly one of "positionM" (fixed) and "path" (moving)']],
    ['neither', { ...good, sources: [{ name: 'p', levelDbAt1m: 0, signal: { kind: 'tonal', frequencyHz: 100 } }] }, ['sources[0] must have exactly one of']],
    ['unknown source field', { ...good, sources: [{ ...good.sources[0], gainDb: 3 }] }, ['f.json: sources[0].gainDb is not a field here']],
    ['bad signal kind', { ...good, sources: [{ ...good.sources[0], signal: { kind: 'pink' } }] }, ['f.json: sources[0].signal.kind must be "broadband" or "tonal"']],
    ['band upside down', { ...good, sources: [{ ...good.sources[0], signal: { kind: 'broadband', lowHz: 500, highHz: 400 } }] }, ['f.json: sources[0].signal.highHz must be a number of Hz above lowHz (500)']],
    ['band too low', { ...good, sources: [{ ...good.sources[0], signal: { kind: 'broadband', lowHz: 10, highHz: 400 } }] }, ['sources[0].signal.lowHz must be a number of Hz in 50–100000']],
    ['level out of range', { ...good, sources: [{ ...good.sources[0], levelDbAt1m: 90 }] }, ['f.json: sources[0].levelDbAt1m must be a number of dBFS (rms at 1 m) in -150–40']],
    ['position not a triple', { ...good, sources: [{ ...good.sources[0], positionM: [1, 2] }] }, ['f.json: sources[0].positionM must be [x, y, z]']],
    ['position too far', { ...good, sources: [{ ...good.sources[0], positionM: [1, 2, 5000] }] }, ['sources[0].positionM has a coordinate beyond ±2000 m']],
    ['path of one point, no loop, too fast', { ...good, sources: [{ ...good.sources[1], path: { pointsM: [[0, 0, 0]], speedMps: 400, loop: 'yes' } }] },
      ['sources[0].path.pointsM must be a list of 2–256', 'sources[0].path.speedMps must be a number of m/s in (0, 50]', 'sources[0].path.loop must be true']],
    ['path repeats a point', { ...good, sources: [{ ...good.sources[1], path: { pointsM: [[0, 0, 0], [0, 0, 0.001]], speedMps: 1, loop: true } }] }, ['sources[0].path.pointsM[1] is within 1 cm of pointsM[0]']],
    ['two sources of one name', { ...good, sources: [good.sources[0], good.sources[0]] }, ['f.json: sources[1].name is already the name of sources[0]']],
  ];
  it.each(bad)('refuses %s, naming the file and every field at once', (_what, value, messages) => {
    let err: unknown;
    try {
      validateScene(value, 'f.json');
    } catch (e) {
      err = e;
    }
    expect(err).toBeInstanceOf(ConfigError);
    const text = (err as ConfigError).message;
    for (const m of messages) expect(text).toContain(m);
    expect((err as ConfigError).issues.length).toBe(messages.length);
  });

  it('refuses unreadable files, bad JSON, an array without a pose, a tone above 0.45·fs', async () => {
    const dir = mkdtempSync(join(tmpdir(), 'scene-'));
    await expect(loadScene(join(dir, 'missing.json'))).rejects.toThrow(/simulator\.scene = ".*missing\.json": cannot read \(ENOENT\)/);
    writeFileSync(join(dir, 'bad.json'), '{ "name": ');
    await expect(loadScene(join(dir, 'bad.json'))).rejects.toThrow(/bad\.json: not valid JSON/);
    writeFileSync(join(dir, 'good.json'), JSON.stringify(good));
    const geometry: ArrayGeometry = { name: 'ring', positions: SQUARE };
    await expect(createSiteSceneSimulator({ scenePath: join(dir, 'good.json'), arrayPath: 'arrays/ring.json', geometry, sampleRateHz: FS, blockFrames: 256, seed: 1 }))
      .rejects.toThrow('simulator.scene = "' + join(dir, 'good.json') + '" needs the array\'s place on the site: arrays/ring.json has no "pose"');
    const sim = await createSiteSceneSimulator({ scenePath: join(dir, 'good.json'), arrayPath: 'a.json', geometry: { ...geometry, pose: { positionM: [0, 0, 0], headingDeg: 0 } }, sampleRateHz: FS, blockFrames: 256, seed: 1 });
    expect(sim.channels).toBe(4);
    const high = scene([fixedSource('t', [1, 0, 0], { kind: 'tonal', frequencyHz: 22000 })]);
    expect(() => new SiteSceneSimulator({ scene: high, geometry: arrayAt({ positionM: [0, 0, 0], headingDeg: 0 }, SQUARE), sampleRateHz: FS, blockFrames: 256 }))
      .toThrow('simulator.scene: source "t": frequencyHz 22000 is not below 0.45·fs = 21600 Hz');
  });
});

describe('site scene rendering against closed forms', () => {
  it('spreading: a tone at two ranges has the level L − 20·log10(r) at every microphone (within 0.1 dB)', () => {
    const L = -6;
    const src = fixedSource('tone', [0, 0, 0], { kind: 'tonal', frequencyHz: 1000 }, L);
    const worst: number[] = [];
    for (const range of [10, 40]) {
      const geometry = arrayAt({ positionM: [range, 0, 0], headingDeg: 25 }, SQUARE);
      const sim = new SiteSceneSimulator({ scene: scene([src]), geometry, sampleRateHz: FS, blockFrames: 1200, startIndex: 0 });
      const { data, frames } = render(sim, 10 * FS, 40); // 1 s: 1000 whole periods
      for (let ch = 0; ch < 4; ch++) {
        const r = dist([sim.micX[ch], sim.micY[ch], sim.micZ[ch]], [0, 0, 0]);
        const err = rmsDb(data.subarray(ch * frames, (ch + 1) * frames)) - (L - 20 * Math.log10(r));
        worst.push(Math.abs(err));
      }
    }
    expect(Math.max(...worst)).toBeLessThan(0.1);
    expect(Math.max(...worst)).toBeLessThan(0.01); // measured ≈ 0.0002 dB (float32 rounding, filter ripple)
  });

  it('spreading: band noise at two ranges is the emitted waveform × 1/r (within 0.1 dB), emitted at its level', () => {
    const L = -10;
    const src = fixedSource('noise', [5, 5, 1], { kind: 'broadband', lowHz: 300, highHz: 5000 }, L);
    const n0 = 1000 * FS;
    for (const range of [15, 45]) {
      const geometry = arrayAt({ positionM: [5 + range, 5, 1], headingDeg: 0 }, SQUARE);
      const sim = new SiteSceneSimulator({ scene: scene([src]), geometry, sampleRateHz: FS, blockFrames: 2400, startIndex: 0 });
      const { data, frames } = render(sim, n0, 20); // 1 s
      const r = dist([sim.micX[0], sim.micY[0], sim.micZ[0]], [5, 5, 1]);
      const delay = Math.round((r / C) * FS);
      // The same emitted samples the microphone heard (within the fractional part of the delay).
      const emitted = sim.emitted('noise', n0 - delay, frames);
      const err = rmsDb(data.subarray(0, frames)) - rmsDb(emitted) - -20 * Math.log10(r);
      expect(Math.abs(err)).toBeLessThan(0.1); // measured < 1e-5 dB
      // The emitted level itself: unit-variance band noise × 10^(L/20). Over 8 s of a 4.7 kHz band the
      // estimate's spread is 1/√(B·T) ≈ 0.5 % (0.02 dB); measured −0.024 dB.
      if (range === 15) expect(Math.abs(rmsDb(sim.emitted('noise', n0, 8 * FS)) - L)).toBeLessThan(0.1);
    }
  });

  it('delay between microphones = path difference / c (GCC-PHAT, within 0.02 samples)', () => {
    const src = fixedSource('noise', [3, 4, 0], { kind: 'broadband', lowHz: 300, highHz: 8000 });
    const pair: [number, number, number][] = [[-0.25, 0, 0], [0.25, 0, 0]];
    const geometry = arrayAt({ positionM: [0, 0, 0], headingDeg: 10 }, pair);
    const sim = new SiteSceneSimulator({ scene: scene([src]), geometry, sampleRateHz: FS, blockFrames: 8192, startIndex: 0 });
    const { data, frames } = render(sim, 77 * FS, 1);
    const expected = ((dist([sim.micX[1], sim.micY[1], 0], [3, 4, 0]) - dist([sim.micX[0], sim.micY[0], 0], [3, 4, 0])) / C) * FS;
    const gcc = new GccPhat({ sampleRateHz: FS, windowSamples: 8192, bandLowHz: 300, bandHighHz: 8000 });
    const res = gcc.analyze(data, data, 0, frames);
    expect(Math.abs(expected)).toBeGreaterThan(5);
    expect(Math.abs(res.lagSamples - expected)).toBeLessThan(0.02);
  });

  it('two arrays at 20 m and 30 m hear the same sound (r₂ − r₁)/c apart (GCC-PHAT, within 0.02 samples)', () => {
    const S: [number, number, number] = [0, 0, 1];
    const src = fixedSource('noise', S, { kind: 'broadband', lowHz: 300, highHz: 8000 });
    const near = new SiteSceneSimulator({ scene: scene([src]), geometry: arrayAt({ positionM: [20, 0, 1], headingDeg: 0 }, SQUARE, 'near'), sampleRateHz: FS, blockFrames: 16384, startIndex: 0 });
    const far = new SiteSceneSimulator({ scene: scene([src]), geometry: arrayAt({ positionM: [0, 30, 1], headingDeg: 90 }, SQUARE, 'far'), sampleRateHz: FS, blockFrames: 16384, startIndex: 0 });
    const n0 = utcSampleIndex(Date.UTC(2026, 11, 3, 12, 0, 0), FS);
    const a = render(near, n0, 1);
    const b = render(far, n0, 1);
    const expected = ((dist([far.micX[0], far.micY[0], far.micZ[0]], S) - dist([near.micX[0], near.micY[0], near.micZ[0]], S)) / C) * FS;
    const gcc = new GccPhat({ sampleRateHz: FS, windowSamples: 16384, bandLowHz: 300, bandHighHz: 8000 });
    const res = gcc.analyze(a.data, b.data, 0, 0);
    expect(expected).toBeGreaterThan(1300);
    expect(Math.abs(res.lagSamples - expected)).toBeLessThan(0.02);
    // Every array renders one emitted waveform.
    expect(near.emitted('noise', n0, 4096)).toEqual(far.emitted('noise', n0, 4096));
  });

  it('two renderers started at different sample indices, with different block lengths, give identical samples', () => {
    const sources: SceneSource[] = [
      fixedSource('noise', [30, 10, 1], { kind: 'broadband', lowHz: 200, highHz: 6000 }),
      fixedSource('tone', [-20, 25, 1], { kind: 'tonal', frequencyHz: 733.3 }),
      { name: 'cart', levelDbAt1m: -6, signal: { kind: 'broadband', lowHz: 300, highHz: 5000 }, positionM: null, path: { pointsM: [[0, 20, 1], [20, 20, 1], [20, 30, 1]], speedMps: 2, loop: true } },
    ];
    const geometry = arrayAt({ positionM: [1, 2, 3], headingDeg: 77 }, SQUARE);
    // Once at today's UTC, once across a 2^32 sample boundary (the noise hash splits n there).
    for (const base of [utcSampleIndex(Date.UTC(2026, 11, 3, 21, 0, 0), FS), 2 ** 32 * 19_000 - 3000]) {
      const a = new SiteSceneSimulator({ scene: scene(sources, -70), geometry, sampleRateHz: FS, blockFrames: 1024, startIndex: base });
      const b = new SiteSceneSimulator({ scene: scene(sources, -70), geometry, sampleRateHz: FS, blockFrames: 500, startIndex: base + 1237 });
      const ra = render(a, base, 8);
      const rb = render(b, base + 1237, 14);
      const overlap = Math.min(ra.frames - 1237, rb.frames);
      for (let ch = 0; ch < 4; ch++) {
        const x = ra.data.subarray(ch * ra.frames + 1237, (ch + 1) * ra.frames);
        const y = rb.data.subarray(ch * rb.frames, ch * rb.frames + overlap);
        expect(Buffer.from(x.buffer, x.byteOffset, x.byteLength).equals(Buffer.from(y.buffer, y.byteOffset, y.byteLength))).toBe(true);
      }
      expect(rmsDb(ra.data)).toBeGreaterThan(-60);
    }
  });

  it('a moving source arrives at the retarded time (closed-form quadratic), within 1 µs', () => {
    // Straight leg from P₀ at UTC 0: S(t) = P₀ + v·t·u for t < 50 s (there and back over 100 m).
    const f = 500;
    const v = 2;
    const L = -6;
    const P0 = [-50, 20, 1];
    const u = [1, 0, 0];
    const src: SceneSource = { name: 'cart', levelDbAt1m: L, signal: { kind: 'tonal', frequencyHz: f }, positionM: null, path: { pointsM: [[-50, 20, 1], [50, 20, 1]], speedMps: v, loop: false } };
    const geometry = arrayAt({ positionM: [0, 0, 1], headingDeg: 0 }, SQUARE);
    const sim = new SiteSceneSimulator({ scene: scene([src]), geometry, sampleRateHz: FS, blockFrames: 960, startIndex: 0 });
    let worstS = 0;
    // Near UTC 0, and today: the path repeats every 100 s, so a whole number of periods later the
    // same closed form holds with t counted from the period's start (checks large sample indices).
    const today = Math.floor(Date.UTC(2026, 11, 3, 22, 0, 0) / 100_000) * 100 * FS;
    for (const periodStart of [0, today]) {
      const n0 = periodStart + 20 * FS;
      const { data, frames } = render(sim, n0, 50); // t = 20 … 21 s; the source passes x = −10 … −8 m
      for (let ch = 0; ch < 4; ch++) {
        const Q = [sim.micX[ch], sim.micY[ch], sim.micZ[ch]];
        const A = [Q[0] - P0[0], Q[1] - P0[1], Q[2] - P0[2]];
        const au = A[0] * u[0] + A[1] * u[1] + A[2] * u[2];
        const aa = A[0] ** 2 + A[1] ** 2 + A[2] ** 2;
        for (let i = 0; i < frames; i += 7) {
          const t = (n0 - periodStart + i) / FS;
          // (v² − c²) t_e² + 2(c² t − v A·u) t_e + (|A|² − c² t²) = 0, the root with t_e < t.
          const qa = v * v - C * C;
          const qb = 2 * (C * C * t - v * au);
          const qc = aa - C * C * t * t;
          const te = (-qb + Math.sqrt(qb * qb - 4 * qa * qc)) / (2 * qa);
          expect(te).toBeLessThan(t);
          const r = C * (t - te);
          const amp = (Math.SQRT2 * 10 ** (L / 20)) / r;
          const expected = amp * Math.sin(2 * Math.PI * f * te);
          // An error e in the arrival time gives at most amp·2πf·|e| here.
          const err = Math.abs(data[ch * frames + i] - expected) / (amp * 2 * Math.PI * f);
          worstS = Math.max(worstS, err);
        }
      }
    }
    // Measured 0.51 µs: the delay is held for 16 samples at a time (±0.05 samples at 2 m/s).
    expect(worstS).toBeLessThan(1e-6);
  });

  it('MVDR of the offline chain points at the site bearing minus the heading (within 1°)', async () => {
    const geometry = { ...(await loadGeometry('config/arrays/yard-west.json')) };
    const pose = geometry.pose!;
    const bearingDeg = 205;
    const b = (bearingDeg * Math.PI) / 180;
    const S: [number, number, number] = [pose.positionM[0] + 150 * Math.cos(b), pose.positionM[1] + 150 * Math.sin(b), pose.positionM[2]];
    const src = fixedSource('far', S, { kind: 'broadband', lowHz: 300, highHz: 6000 }, 20);
    const sim = new SiteSceneSimulator({ scene: scene([src], -80), geometry, sampleRateHz: FS, blockFrames: 4800, startIndex: utcSampleIndex(Date.UTC(2026, 0, 1), FS) });
    const pipe = new ScanPipeline({
      geometry: { name: geometry.name, positions: geometry.positions }, sampleRateHz: FS, fftSize: 512, bandHz: [300, 6000],
      grid: { azimuthDeg: { startDeg: 0, stopDeg: 359.5, stepDeg: 0.5 } }, methods: ['mvdr'], lambda: null,
      loading: { mode: 'relative', ratio: 0.01 }, speedOfSoundMps: C,
    });
    for (let k = 0; k < 5; k++) pipe.push(sim.next());
    const peak = pipe.result().methods.mvdr!.peaks[0];
    const expected = bearingDeg - pose.headingDeg; // 175°
    const diff = ((peak.azimuthDeg - expected + 540) % 360) - 180;
    expect(Math.abs(diff)).toBeLessThan(1);
    expect(sim.truth(sim.sampleIndex)[0].arrayAzimuthDeg).toBeCloseTo(expected, 9);
  });
});

describe('site scene signals', () => {
  it('the band-pass: flat in its band, > 50 dB down 1.5 kHz outside (direct DTFT of the taps)', () => {
    const lo = 400;
    const hi = 6000;
    const h = bandPass(lo / FS, hi / FS);
    const gainDb = (f: number) => {
      let re = 0;
      let im = 0;
      for (let l = 0; l < h.length; l++) {
        re += h[l] * Math.cos((2 * Math.PI * f * l) / FS);
        im -= h[l] * Math.sin((2 * Math.PI * f * l) / FS);
      }
      return 10 * Math.log10(re * re + im * im);
    };
    const pass = [1200, 2000, 3000, 4000, 5000].map(gainDb);
    // Flat within 0.01 dB across the band (Kaiser β = 8 ripple is far below that).
    expect(Math.max(...pass) - Math.min(...pass)).toBeLessThan(0.01);
    // Unit output variance for unit white input (Σh² = 1, Parseval): the gain² × the band's share of
    // 0…fs/2 is about 1; a little above it, because the transition bands carry less power than the
    // ideal edges would (measured +0.15 dB).
    const ideal = 10 * Math.log10(FS / 2 / (hi - lo));
    expect(pass[2] - ideal).toBeGreaterThan(0);
    expect(pass[2] - ideal).toBeLessThan(0.3);
    for (const f of [7500, 10000, 20000]) expect(gainDb(f) - pass[2]).toBeLessThan(-50);
  });

  it('self-noise: its level per channel, white and independent between channels and arrays', () => {
    const quiet = fixedSource('far', [1000, 0, 0], { kind: 'tonal', frequencyHz: 100 }, -150);
    const make = (name: string) => new SiteSceneSimulator({ scene: scene([quiet], -20), geometry: arrayAt({ positionM: [0, 0, 0], headingDeg: 0 }, SQUARE, name), sampleRateHz: FS, blockFrames: 4800, startIndex: 0 });
    const a = render(make('a'), 12345, 10);
    const b = render(make('b'), 12345, 10);
    const n = a.frames;
    const corr = (x: Float32Array, xo: number, y: Float32Array, yo: number, count: number) => {
      let sxy = 0;
      let sxx = 0;
      let syy = 0;
      for (let i = 0; i < count; i++) {
        sxy += x[xo + i] * y[yo + i];
        sxx += x[xo + i] ** 2;
        syy += y[yo + i] ** 2;
      }
      return sxy / Math.sqrt(sxx * syy);
    };
    for (let ch = 0; ch < 4; ch++) expect(Math.abs(rmsDb(a.data, ch * n, (ch + 1) * n) - -20)).toBeLessThan(0.1);
    // 48 000 samples: independent noise correlates to about ±1/√n = ±0.005.
    expect(Math.abs(corr(a.data, 0, a.data, n, n))).toBeLessThan(0.02);
    expect(Math.abs(corr(a.data, 0, a.data, 1, n - 1))).toBeLessThan(0.02);
    expect(Math.abs(corr(a.data, 0, b.data, 0, n))).toBeLessThan(0.02);
  });
});

describe('site scene paths', () => {
  const at = (path: SceneSource['path'], tS: number) => {
    const src: SceneSource = { name: 'm', levelDbAt1m: -6, signal: { kind: 'tonal', frequencyHz: 500 }, positionM: null, path };
    const sim = new SiteSceneSimulator({ scene: scene([src]), geometry: arrayAt({ positionM: [0, 0, 0], headingDeg: 90 }, SQUARE), sampleRateHz: FS, blockFrames: 256, startIndex: 0 });
    return sim.truth(Math.round(tS * FS))[0];
  };
  const rectangle: [number, number, number][] = [[30, 20, 1], [50, 20, 1], [50, 30, 1], [30, 30, 1]];

  it('a loop goes round the closed polygon at its speed from the first point at UTC 0 (perimeter 60 m at 2 m/s: 30 s)', () => {
    const path = { pointsM: rectangle, speedMps: 2, loop: true };
    const cases: [number, number[]][] = [[0, [30, 20, 1]], [5, [40, 20, 1]], [12.5, [50, 25, 1]], [20, [40, 30, 1]], [27.5, [30, 25, 1]], [30, [30, 20, 1]], [1_796_335_205, [40, 20, 1]]];
    for (const [t, p] of cases) at(path, t).positionM.forEach((x, i) => expect(x).toBeCloseTo(p[i], 4));
  });

  it('an open path goes there and back (50 m of corners at 1 m/s → 50 s there, 50 s back)', () => {
    const path = { pointsM: rectangle, speedMps: 1, loop: false };
    const cases: [number, number[]][] = [[0, [30, 20, 1]], [25, [50, 25, 1]], [40, [40, 30, 1]], [50, [30, 30, 1]], [55, [35, 30, 1]], [80, [50, 20, 1]], [90, [40, 20, 1]], [100, [30, 20, 1]]];
    for (const [t, p] of cases) at(path, t).positionM.forEach((x, i) => expect(x).toBeCloseTo(p[i], 6));
  });

  it('bearings in status: site azimuth from the array, and array azimuth = site azimuth − heading', () => {
    const t = at({ pointsM: [[0, 10, 0], [10, 10, 0]], speedMps: 1, loop: false }, 0);
    expect([t.rangeM, t.siteAzimuthDeg, t.arrayAzimuthDeg, t.elevationDeg]).toEqual([10, 90, 0, 0]);
  });
});

describe('UtcSceneSource', () => {
  it('starts at the UTC sample index of the moment it starts, then carries on contiguously', async () => {
    const src = fixedSource('tone', [10, 0, 0], { kind: 'tonal', frequencyHz: 1000 });
    const sim = new SiteSceneSimulator({ scene: scene([src]), geometry: arrayAt({ positionM: [0, 0, 0], headingDeg: 0 }, SQUARE), sampleRateHz: FS, blockFrames: 480, startIndex: 0 });
    const utc = Date.UTC(2026, 11, 3, 21, 30, 0, 250);
    let mono = 0;
    const source = new UtcSceneSource(sim, { utcNow: () => utc, now: () => mono });
    const blocks: number[] = [];
    source.start((b) => void blocks.push(b.sampleIndex));
    mono = 100; // 100 ms on the injected clock: ten blocks due
    for (let waited = 0; blocks.length < 10 && waited < 30_000; waited += 10) await new Promise((r) => setTimeout(r, 10));
    source.stop();
    const first = utcSampleIndex(utc, FS);
    expect(blocks.length).toBe(10);
    expect(blocks.slice(0, 10)).toEqual(Array.from({ length: 10 }, (_, k) => first + k * 480));
  });
});
