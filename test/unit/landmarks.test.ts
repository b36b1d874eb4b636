/**
 * Landmarks (shared/landmarks.ts) and their place in the array file (server/config/array-file.ts)
 * and the hello message (shared/messages.ts). Angular distances are worked by hand on the circle:
 * the smaller of |a − b| and 360° − |a − b| (plane geometry).
 */
import { describe, expect, it } from 'vitest';
import { azimuthDistanceDeg, landmarkChangeSummary, nearestLandmark, normaliseAzimuthDeg, peakAzimuthText, validateLandmarks, type Landmark } from '../../shared/landmarks.ts';
import { validateGeometry } from '../../server/config/array-file.ts';
import { ConfigError } from '../../server/config/validate.ts';
import { azimuthFraction, landmarksOnAxis, placeAxisNames } from '../../client/src/lib/landmark-axis.ts';
import { liveGrid, MESSAGES_VERSION, MessageParseError, parseServerMessage } from '../../shared/messages.ts';

const L: Landmark[] = [
  { name: 'gate', azimuthDeg: 35 },
  { name: 'north fence', azimuthDeg: 355 },
  { name: 'shed', azimuthDeg: 180 },
];

describe('azimuths on the circle', () => {
  it('normalises −180…360 into [0, 360)', () => {
    expect(normaliseAzimuthDeg(-180)).toBe(180);
    expect(normaliseAzimuthDeg(-90)).toBe(270);
    expect(normaliseAzimuthDeg(360)).toBe(0);
    expect(normaliseAzimuthDeg(359.5)).toBe(359.5);
    expect(normaliseAzimuthDeg(-0)).toBe(0);
    expect(Object.is(normaliseAzimuthDeg(-0), -0)).toBe(false);
    expect(normaliseAzimuthDeg(-1e-20)).toBe(0); // rounds to 360, kept below it
  });

  it('measures distance the short way round', () => {
    expect(azimuthDistanceDeg(359, 1)).toBe(2);
    expect(azimuthDistanceDeg(1, 359)).toBe(2);
    expect(azimuthDistanceDeg(-179, 179)).toBe(2);
    expect(azimuthDistanceDeg(0, 180)).toBe(180);
    expect(azimuthDistanceDeg(90, 270)).toBe(180);
    expect(azimuthDistanceDeg(10, 40)).toBe(30);
  });
});

describe('nearest landmark', () => {
  it('finds the nearest within the tolerance, across 0°/360°', () => {
    expect(nearestLandmark(37, L)).toEqual({ landmark: L[0], distanceDeg: 2 });
    expect(nearestLandmark(3, L)).toEqual({ landmark: L[1], distanceDeg: 8 });
    expect(nearestLandmark(-2, L)?.landmark.name).toBe('north fence');
    expect(nearestLandmark(100, L)).toBeNull();
    expect(nearestLandmark(45, L)?.distanceDeg).toBe(10); // at the tolerance: still named
    expect(nearestLandmark(45.01, L)).toBeNull();
    expect(nearestLandmark(50, L, 20)?.landmark.name).toBe('gate');
    expect(nearestLandmark(10, [])).toBeNull();
  });

  it('writes a peak as "35.0° · gate", or the angle alone', () => {
    expect(peakAzimuthText(35, L)).toBe('35.0° · gate');
    expect(peakAzimuthText(2.04, L)).toBe('2.0° · north fence');
    expect(peakAzimuthText(120, L)).toBe('120.0°');
  });

  it('summarises a change for the journal', () => {
    expect(landmarkChangeSummary([], L.slice(0, 1))).toBe('landmarks: + gate 35°');
    expect(landmarkChangeSummary(L, [{ name: 'gate', azimuthDeg: 40 }, L[2]])).toBe('landmarks: gate 35° → 40°, − north fence');
    expect(landmarkChangeSummary(L, L)).toBe('landmarks: unchanged');
  });
});

describe('validation', () => {
  const check = (v: unknown) => {
    const issues: string[] = [];
    const out = validateLandmarks(v, 'landmarks', (p, _v, m) => issues.push(`${p} ${m}`));
    return { out, issues };
  };

  it('accepts names of 1–40 printable characters (counted as characters) and normalises azimuths', () => {
    const { out, issues } = check([
      { name: 'a', azimuthDeg: -180 },
      { name: 'Tor Süd', azimuthDeg: 360 },
      { name: '門'.repeat(40), azimuthDeg: 12.5 },
    ]);
    expect(issues).toEqual([]);
    expect(out).toEqual([
      { name: 'a', azimuthDeg: 180 },
      { name: 'Tor Süd', azimuthDeg: 0 },
      { name: '門'.repeat(40), azimuthDeg: 12.5 },
    ]);
  });

  it('names every problem with its path', () => {
    const { out, issues } = check([{ name: 'x\ty', azimuthDeg: Number.NaN }, { name: 'ok', azimuthDeg: 1, extra: true }, { name: 'ok', azimuthDeg: 2 }]);
    expect(out).toBeUndefined();
    expect(issues).toEqual([
      'landmarks[0].name must be 1–40 printable characters, not only spaces',
      'landmarks[0].azimuthDeg must be a number of degrees in -180–360 (counter-clockwise from +x)',
      'landmarks[1].extra is not a landmark field (name, azimuthDeg)',
      'landmarks[2].name repeats the name of landmarks[1]: names must be unique',
    ]);
  });

  it('in an array file: carried on the geometry, errors name the file and the field', () => {
    const g = validateGeometry({ name: 'a', positions: [[0, 0, 0], [0.1, 0, 0]], landmarks: [{ name: 'gate', azimuthDeg: -35 }] }, 'x.json');
    expect(g.landmarks).toEqual([{ name: 'gate', azimuthDeg: 325 }]);
    expect(validateGeometry({ positions: [[0, 0, 0]] }, 'x.json').landmarks).toBeUndefined();
    let err: unknown;
    try {
      validateGeometry({ positions: [[0, 0, 0]], landmarks: [{ name: 'gate', azimuthDeg: 720 }] }, 'x.json');
    } catch (e) {
      err = e;
    }
    expect(err).toBeInstanceOf(ConfigError);
    expect((err as ConfigError).issues.map((i) => i.message)).toEqual(['x.json: landmarks[0].azimuthDeg must be a number of degrees in -180–360 (counter-clockwise from +x)']);
  });

  it('in a hello message: checked like the file, the offending field named', () => {
    const hello = (landmarks: unknown) =>
      JSON.stringify({
        type: 'hello',
        version: MESSAGES_VERSION,
        grid: liveGrid({ azimuthDeg: { startDeg: 0, stopDeg: 350, stepDeg: 10 } }),
        params: { lambda: 0.99, loading: { mode: 'relative', ratio: 0.01 }, bandHz: [300, 6000], grid: { azimuthDeg: { startDeg: 0, stopDeg: 350, stepDeg: 10 } }, methods: ['mvdr'], spectrumRateHz: 10, normalise: false, fftSize: 512 },
        array: { name: 'a', positions: [[0, 0, 0]], landmarks },
      });
    const ok = parseServerMessage(hello([{ name: 'gate', azimuthDeg: 35 }]));
    expect(ok.type === 'hello' && ok.array.landmarks).toEqual([{ name: 'gate', azimuthDeg: 35 }]);
    let err: unknown;
    try {
      parseServerMessage(hello([{ name: 'gate', azimuthDeg: 'north' }]));
    } catch (e) {
      err = e;
    }
    expect(err).toBeInstanceOf(MessageParseError);
    expect((err as MessageParseError).field).toBe('array.landmarks[0].azimuthDeg');
  });
});

describe('landmark names on an azimuth axis (client/src/lib/landmark-axis.ts)', () => {
  it('places names centred on their ticks, within the axis, never overlapping on a line', () => {
    const placed = placeAxisNames(
      [
        { xPx: 100, widthPx: 40 },
        { xPx: 120, widthPx: 40 },
        { xPx: 300, widthPx: 40 },
        { xPx: 110, widthPx: 40 },
        { xPx: 2, widthPx: 40 },
      ],
      320,
      6,
      2,
    );
    // Left to right: 2 px (kept inside the left end: 0–40) and 100 px (80–120) share line 0 (gap 40 ≥ 6);
    // 110 px (90–130) takes line 1; 120 px (100–140) has no room on either line: hidden; 300 px fits line 0.
    expect(placed).toEqual([
      { leftPx: 80, line: 0 },
      { leftPx: 100, line: -1 },
      { leftPx: 280, line: 0 },
      { leftPx: 90, line: 1 },
      { leftPx: 0, line: 0 },
    ]);
  });

  it('keeps the gap between any two names on one line, for random layouts', () => {
    let seed = 7;
    const rnd = () => ((seed = (seed * 1103515245 + 12345) % 2 ** 31) / 2 ** 31);
    for (let trial = 0; trial < 200; trial++) {
      const items = Array.from({ length: 1 + Math.floor(rnd() * 20) }, () => ({ xPx: rnd() * 500, widthPx: 10 + rnd() * 80 }));
      const placed = placeAxisNames(items, 500, 6, 2);
      for (let a = 0; a < items.length; a++) {
        if (placed[a].line < 0) continue;
        expect(placed[a].leftPx).toBeGreaterThanOrEqual(0);
        expect(placed[a].leftPx + items[a].widthPx).toBeLessThanOrEqual(500 + 1e-9);
        for (let b = a + 1; b < items.length; b++) {
          if (placed[b].line !== placed[a].line) continue;
          const [l, r] = placed[a].leftPx <= placed[b].leftPx ? [a, b] : [b, a];
          expect(placed[r].leftPx - (placed[l].leftPx + items[l].widthPx)).toBeGreaterThanOrEqual(6 - 1e-9);
        }
      }
    }
  });

  it('finds an azimuth on a grid axis as the dashboard draws it (column centres)', () => {
    const ring = Array.from({ length: 360 }, (_, i) => i); // 0…359° in 1° steps: a full circle
    expect(azimuthFraction(0, ring)).toBeCloseTo(0.5 / 360, 12);
    expect(azimuthFraction(35, ring)).toBeCloseTo(35.5 / 360, 12);
    expect(azimuthFraction(-10, ring)).toBeCloseTo(350.5 / 360, 12);
    const half = Array.from({ length: 181 }, (_, i) => i); // a line array's 0…180°
    expect(azimuthFraction(270, half)).toBeNull();
    expect(azimuthFraction(90, half)).toBeCloseTo(90.5 / 181, 12);
    expect(landmarksOnAxis(L, half).map((m) => m.landmark.name)).toEqual(['gate', 'shed']);
  });
});
