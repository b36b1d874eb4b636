/**
 * server/monitor/event-detector.ts on hop mean squares of seeded Gaussian noise (48 kHz, hops of 256
 * samples; each hop's mean square is the mean of its 256 squared samples, so the levels fluctuate as
 * a real meter's do). Checked against the scene's own sample indices:
 * - a source 15 dB over the background switched on at a known sample for 4 s: the event starts
 *   within ±0.25 s of it and ends within ±0.25 s of its end plus releaseS; a 0.2 s blip (shorter than
 *   minDurationS) makes no event;
 * - above-background: 10 minutes of steady background make no event, a 6 dB rise over it does
 *   (threshold 3 dB over the running L90; ISO 1996-1's L90, the level exceeded 90 % of the time).
 * The F time constant 0.125 s is IEC 61672-1's (from memory).
 */
import { describe, expect, it } from 'vitest';
import { validateRule, type Rule } from '../../shared/rules.ts';
import { EventDetector, type EventChange } from '../../server/monitor/event-detector.ts';
import { TestRandom } from '../helpers/random.ts';

const FS = 48_000;
const H = 256;

function rule(body: unknown): Rule {
  const problems: string[] = [];
  const r = validateRule('loud-gate', body, 10, (p, m) => problems.push(`${p} ${m}`));
  expect(problems).toEqual([]);
  return r!;
}

/** Run `seconds` of noise whose rms is `rmsAt(sample)`; the detector gets every hop and every 1-s Leq. */
function run(d: EventDetector, seconds: number, rmsAt: (n: number) => number, seed = 1, from = 0): EventChange[] {
  const rng = new TestRandom(seed);
  const out: EventChange[] = [];
  let secE = 0, secN = 0;
  for (let start = 0; start + H <= seconds * FS; start += H) {
    let ms = 0;
    const a = rmsAt(start);
    for (let i = 0; i < H; i++) {
      const x = a * rng.gaussian();
      ms += x * x;
    }
    ms /= H;
    const c = d.hop(from + start, H, ms, 42, 0);
    if (c) out.push(c);
    secE += ms * H;
    secN += H;
    if (secN >= FS) {
      d.second(10 * Math.log10(secE / secN));
      secE = 0;
      secN = 0;
    }
  }
  return out;
}

describe('event detector', () => {
  it('a source 15 dB over the background for 4 s: start within ±0.25 s, end within ±0.25 s of its end + releaseS; direction and peak', () => {
    const d = new EventDetector(rule({ sector: 'gate', threshold: { mode: 'absolute', db: -42 }, minDurationS: 0.5, releaseS: 2, hysteresisDb: 3 }), FS);
    const on = 20 * FS + 12_345, off = on + 4 * FS;
    const changes = run(d, 40, (n) => (n >= on && n < off ? 10 ** (-35 / 20) : 10 ** (-50 / 20)));
    const started = changes.filter((c) => c.kind === 'started'), ended = changes.filter((c) => c.kind === 'ended');
    expect(started).toHaveLength(1);
    expect(ended).toHaveLength(1);
    expect(Math.abs(started[0].startSample - on) / FS).toBeLessThanOrEqual(0.25);
    expect(Math.abs(ended[0].endSample! - (off + 2 * FS)) / FS).toBeLessThanOrEqual(0.25);
    expect(ended[0].startSample).toBe(started[0].startSample);
    expect(ended[0].peakDb).toBeGreaterThan(-36);
    expect(ended[0].peakDb).toBeLessThan(-33);
    // Leq over start…end: 4 s at −35 dB and the 2 s release at −50 dB → 10·log10((4·10^−3.5 + 2·10^−5)/6) ≈ −36.7 dB.
    expect(ended[0].leqDb).toBeCloseTo(10 * Math.log10((4 * 10 ** -3.5 + 2 * 10 ** -5) / 6), 0);
    expect(ended[0].azimuthDeg).toBe(42);
    // 'updated' about once a second while it lasted.
    const updated = changes.filter((c) => c.kind === 'updated');
    expect(updated.length).toBeGreaterThanOrEqual(4);
    expect(updated.length).toBeLessThanOrEqual(6);
    console.log(`event detector: start ${((started[0].startSample - on) / FS).toFixed(3)} s from the onset, end ${((ended[0].endSample! - off - 2 * FS) / FS).toFixed(3)} s from end + releaseS, peak ${ended[0].peakDb.toFixed(2)} dB, Leq ${ended[0].leqDb.toFixed(2)} dB`);
  });

  it('a 0.2 s blip 4 dB over the threshold (above it for less than minDurationS 0.5 s, the F level\'s decay included) makes no event', () => {
    const d = new EventDetector(rule({ sector: 'gate', threshold: { mode: 'absolute', db: -42 } }), FS);
    const on = 5 * FS;
    expect(run(d, 10, (n) => (n >= on && n < on + 0.2 * FS ? 10 ** (-38 / 20) : 10 ** (-50 / 20)))).toEqual([]);
  });

  it('above-background: 10 minutes of steady background make no event; a 6 dB rise for 5 s makes one', () => {
    const d = new EventDetector(rule({ sector: 'gate', threshold: { mode: 'above-background', db: 3 }, minDurationS: 1, releaseS: 1 }), FS);
    const bg = 10 ** (-50 / 20);
    expect(run(d, 600, () => bg, 7)).toEqual([]);
    expect(d.backgroundDb).toBeGreaterThan(-50.5);
    expect(d.backgroundDb).toBeLessThan(-49.9);
    const changes = run(d, 20, (n) => (n >= 5 * FS && n < 10 * FS ? bg * 2 : bg), 8, 600 * FS); // ×2 in amplitude: +6.02 dB
    expect(changes.filter((c) => c.kind === 'started')).toHaveLength(1);
    expect(changes.filter((c) => c.kind === 'ended')).toHaveLength(1);
  });

  it('a stream whose clock goes back drops what was pending (counted)', () => {
    const d = new EventDetector(rule({ sector: 'gate', threshold: { mode: 'absolute', db: -42 } }), FS);
    run(d, 2, () => 10 ** (-30 / 20), 3, 100 * FS);
    expect(d.state).toBe('active');
    run(d, 0.1, () => 10 ** (-50 / 20), 4, 0);
    expect(d.state).toBe('idle');
    expect(d.restarts).toBe(1);
  });

  it('the rule body is closed and bounded, naming each problem', () => {
    const problems: string[] = [];
    expect(validateRule('a b', { sector: 'x', threshold: { mode: 'loud', db: 1 }, releaseS: -1, clip: { preS: 30, extra: 1 }, more: 1 }, 10, (p, m) => problems.push(`${p}: ${m}`))).toBeNull();
    expect(problems.join('\n')).toMatch(/name: must be/);
    expect(problems.join('\n')).toMatch(/more: unknown field/);
    expect(problems.join('\n')).toMatch(/threshold.mode: must be "absolute" or "above-background"/);
    expect(problems.join('\n')).toMatch(/releaseS: must be a number in 0–3600/);
    expect(problems.join('\n')).toMatch(/clip.extra: unknown field/);
    expect(problems.join('\n')).toMatch(/clip.preS: must be a number in 0–10/);
    const ok = validateRule('gate-loud', { sector: 'gate', threshold: { mode: 'absolute', db: -40 } }, 10, () => undefined);
    expect(ok).toEqual({ name: 'gate-loud', sector: 'gate', threshold: { mode: 'absolute', db: -40 }, minDurationS: 0.5, releaseS: 2, hysteresisDb: 3, clip: { preS: 5, postS: 5, beam: true, raw: false } });
  });
});
