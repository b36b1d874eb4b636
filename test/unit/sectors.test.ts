/**
 * Sectors (shared/sectors.ts): closed validation with field-named refusals, membership on the
 * circle with wrap-around through 0, grid directions inside a sector, and their place in the array
 * file (server/config/array-file.ts) and the hello message (shared/messages.ts).
 *
 * Membership is checked against an independent formulation (plane geometry): a direction is inside
 * a sector when its unit vector is within half the sector's width of the unit vector of the
 * sector's middle azimuth, angles measured with atan2 of the cross and dot products.
 */
import { describe, expect, it } from 'vitest';
import {
  azimuthInSector,
  MAX_SECTORS,
  sectorChangeSummary,
  sectorDirections,
  sectorLimitProblems,
  sectorWidthDeg,
  validateSectorFields,
  validateSectors,
  type Sector,
} from '../../shared/sectors.ts';
import { validateGeometry } from '../../server/config/array-file.ts';
import { ConfigError } from '../../server/config/validate.ts';
import { liveGrid, MESSAGES_VERSION, MessageParseError, parseServerMessage } from '../../shared/messages.ts';
import { directionGrid } from '../../server/dsp/steering.ts';
import { mulberry32 } from '../helpers/random.ts';
import { sectorsOnAxis } from '../../client/src/lib/sector-bands.ts';
import { arrayFileSectors, SectorsError } from '../../server/monitor/sectors.ts';
import { mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';

const gate: Sector = { name: 'gate', azimuthDeg: [20, 50], method: 'mvdr', weighting: 'A' };
const north: Sector = { name: 'north_fence', azimuthDeg: [350, 10], elevationDeg: [0, 30], bandHz: [200, 4000], method: 'conventional', weighting: 'C' };

/** Independent reference: angle between unit vectors of `az` and the sector's middle ≤ half its width. */
function insideByVectors(azDeg: number, from: number, to: number): boolean {
  const width = (((to - from) % 360) + 360) % 360;
  const mid = ((from + width / 2) * Math.PI) / 180;
  const a = (azDeg * Math.PI) / 180;
  const off = Math.abs(Math.atan2(Math.sin(a) * Math.cos(mid) - Math.cos(a) * Math.sin(mid), Math.cos(a) * Math.cos(mid) + Math.sin(a) * Math.sin(mid)));
  return (off * 180) / Math.PI <= width / 2;
}

function problems(value: unknown, opts?: Parameters<typeof validateSectorFields>[3]): string[] {
  const out: string[] = [];
  validateSectorFields(value, '', (p, _v, m) => out.push(`${p}: ${m}`), opts);
  return out;
}

describe('sector membership on the circle', () => {
  it('takes a plain sector counter-clockwise with both ends included', () => {
    expect(azimuthInSector(20, gate)).toBe(true);
    expect(azimuthInSector(35, gate)).toBe(true);
    expect(azimuthInSector(50, gate)).toBe(true);
    expect(azimuthInSector(19.99, gate)).toBe(false);
    expect(azimuthInSector(50.01, gate)).toBe(false);
    expect(azimuthInSector(200, gate)).toBe(false);
    // Any real azimuth is brought into the turn first: 395° is 35°, −325° is 35°.
    expect(azimuthInSector(395, gate)).toBe(true);
    expect(azimuthInSector(-325, gate)).toBe(true);
    expect(azimuthInSector(Number.NaN, gate)).toBe(false);
    expect(sectorWidthDeg(gate)).toBe(30);
  });

  it('wraps through 0: [350, 10] is the 20° around +x, [10, 350] the 340° everywhere else', () => {
    for (const az of [350, 355, 359.999, 0, 5, 10, -5, 360]) expect(azimuthInSector(az, north), `${az}`).toBe(true);
    for (const az of [10.5, 90, 180, 349.5]) expect(azimuthInSector(az, north), `${az}`).toBe(false);
    expect(sectorWidthDeg(north)).toBe(20);
    const rest = { azimuthDeg: [10, 350] as [number, number] };
    expect(sectorWidthDeg(rest)).toBe(340);
    for (const az of [10, 90, 180, 350]) expect(azimuthInSector(az, rest), `${az}`).toBe(true);
    for (const az of [355, 0, 5, 9.5]) expect(azimuthInSector(az, rest), `${az}`).toBe(false);
  });

  it('agrees with the unit-vector reference over random sectors and azimuths', () => {
    const rnd = mulberry32(16);
    let n = 0;
    for (let t = 0; t < 400; t++) {
      const from = Math.floor(rnd() * 3600) / 10;
      let to = Math.floor(rnd() * 3600) / 10;
      if (to === from) to = (from + 1) % 360;
      for (let k = 0; k < 50; k++) {
        const az = rnd() * 720 - 360;
        const ref = insideByVectors(az, from, to);
        // Within 1e-6° of an end the reference's own rounding decides: skip those.
        const nearEnd = [from, to].some((e) => Math.abs(((((az - e) % 360) + 540) % 360) - 180) < 1e-6);
        if (nearEnd) continue;
        expect(azimuthInSector(az, { azimuthDeg: [from, to] }), `[${from}, ${to}] at ${az}`).toBe(ref);
        n++;
      }
    }
    expect(n).toBeGreaterThan(19_000);
  });
});

describe('grid directions inside a sector', () => {
  it('lists the directions of a 1° azimuth grid, wrapping through 0', () => {
    const g = directionGrid({ azimuthDeg: { startDeg: 0, stopDeg: 359, stepDeg: 1 } });
    expect(Array.from(sectorDirections(gate, g.azimuthDeg, g.elevationDeg))).toEqual(Array.from({ length: 31 }, (_, i) => 20 + i));
    // 350…359 then 0…10: ascending indices 0…10, 350…359.
    const idx = Array.from(sectorDirections(north, g.azimuthDeg, g.elevationDeg));
    expect(idx).toEqual([...Array.from({ length: 11 }, (_, i) => i), ...Array.from({ length: 10 }, (_, i) => 350 + i)]);
  });

  it('keeps only elevations in range on a 2-D grid (index d = iEl·nAz + iAz)', () => {
    const g = directionGrid({ azimuthDeg: { startDeg: 0, stopDeg: 355, stepDeg: 5 }, elevationDeg: { startDeg: 0, stopDeg: 90, stepDeg: 10 } });
    const idx = Array.from(sectorDirections(north, g.azimuthDeg, g.elevationDeg));
    // Azimuths 350, 355, 0, 5, 10 (5 of 72) × elevations 0, 10, 20, 30 (4 of 10).
    expect(idx.length).toBe(20);
    for (const d of idx) {
      expect(azimuthInSector(g.azimuthDeg[d], north)).toBe(true);
      expect(g.elevationDeg[d]).toBeGreaterThanOrEqual(0);
      expect(g.elevationDeg[d]).toBeLessThanOrEqual(30);
    }
    expect(idx).toContain(3 * 72 + 71); // 355° at 30°
    // Without an elevation range every elevation counts.
    expect(sectorDirections(gate, g.azimuthDeg, g.elevationDeg).length).toBe(7 * 10);
    expect(() => sectorDirections(gate, [0, 1], [0])).toThrow(RangeError);
  });
});

describe('sector validation', () => {
  it('accepts a full sector and keeps the fields in the written order', () => {
    const s = validateSectorFields({ weighting: 'C', method: 'conventional', bandHz: [200, 4000], elevationDeg: [0, 30], azimuthDeg: [350, 10], name: 'north_fence' }, 'x', () => {
      throw new Error('no problem expected');
    });
    expect(s).toEqual(north);
    expect(Object.keys(s!)).toEqual(['name', 'azimuthDeg', 'elevationDeg', 'bandHz', 'method', 'weighting']);
  });

  it('refuses each bad field by its name, all problems at once', () => {
    const ok = { azimuthDeg: [20, 50], method: 'mvdr', weighting: 'A' };
    const cases: [unknown, string][] = [
      [{ ...ok, azimuthDeg: [20, 360] }, 'azimuthDeg: must be [from, to], degrees in [0, 360) (the sector runs counter-clockwise from "from" to "to" and may wrap through 0)'],
      [{ ...ok, azimuthDeg: [-1, 50] }, 'azimuthDeg: must be [from, to], degrees in [0, 360) (the sector runs counter-clockwise from "from" to "to" and may wrap through 0)'],
      [{ ...ok, azimuthDeg: [20] }, 'azimuthDeg: must be [from, to], degrees in [0, 360) (the sector runs counter-clockwise from "from" to "to" and may wrap through 0)'],
      [{ ...ok, azimuthDeg: [20, '50'] }, 'azimuthDeg: must be [from, to], degrees in [0, 360) (the sector runs counter-clockwise from "from" to "to" and may wrap through 0)'],
      [{ ...ok, azimuthDeg: [20, 20] }, 'azimuthDeg: must have two different ends (from = to has no width)'],
      [{ ...ok, elevationDeg: [10, 10] }, 'elevationDeg: must have lo < hi'],
      [{ ...ok, elevationDeg: [-91, 0] }, 'elevationDeg: must be [lo, hi], degrees in -90…90'],
      [{ ...ok, bandHz: [0.5, 100] }, 'bandHz: must be [lo, hi], Hz in 1…96000 Hz'],
      [{ ...ok, bandHz: [500, 400] }, 'bandHz: must have lo < hi'],
      [{ ...ok, method: 'music' }, 'method: must be one of "mvdr", "conventional"'],
      [{ ...ok, weighting: 'B' }, 'weighting: must be one of "A", "C", "Z" (IEC 61672-1 frequency weighting)'],
      [{ azimuthDeg: [20, 50], method: 'mvdr' }, 'weighting: must be one of "A", "C", "Z" (IEC 61672-1 frequency weighting)'],
      [{ ...ok, name: 'gate' }, 'name: comes from the path (/api/sectors/NAME), not the body'],
      [{ ...ok, colour: 'red' }, 'colour: is not a sector field (azimuthDeg, elevationDeg, bandHz, method, weighting)'],
      [[], '(body): must be an object { "azimuthDeg", "elevationDeg"?, "bandHz"?, "method", "weighting" }'],
    ];
    for (const [body, msg] of cases) expect(problems(body, { withName: false, name: 'gate' }), JSON.stringify(body)).toEqual([msg]);
    expect(problems({ azimuthDeg: [400, 50], method: 'x', weighting: 'A' }, { withName: false, name: 'gate' })).toEqual([
      'azimuthDeg: must be [from, to], degrees in [0, 360) (the sector runs counter-clockwise from "from" to "to" and may wrap through 0)',
      'method: must be one of "mvdr", "conventional"',
    ]);
  });

  it('checks names: 1–32 letters, digits, _ or -', () => {
    const body = { azimuthDeg: [20, 50], method: 'mvdr', weighting: 'A' };
    for (const name of ['g', 'gate-2', 'North_Fence', 'x'.repeat(32)]) expect(problems({ ...body, name })).toEqual([]);
    for (const name of ['', 'x'.repeat(33), 'road bend', 'gate/2', 'café', '../x', 5]) expect(problems({ ...body, name }), String(name)).toEqual(['name: must be 1–32 letters, digits, _ or -']);
  });

  it('checks the band against fs/2 and the processing band when the server knows them', () => {
    const body = { azimuthDeg: [20, 50], method: 'mvdr', weighting: 'A', bandHz: [200, 9000] };
    expect(problems(body, { withName: false, name: 'g', limits: { nyquistHz: 8000 } })).toEqual(['bandHz: must be [lo, hi], Hz in 1…8000 Hz (half the sample rate)']);
    expect(problems(body, { withName: false, name: 'g', limits: { nyquistHz: 24000, processingBandHz: [300, 6000] } })).toEqual(['bandHz: must lie inside the processing band 300–6000 Hz (only those frequencies are analysed)']);
    expect(problems({ ...body, bandHz: [300, 6000] }, { withName: false, name: 'g', limits: { nyquistHz: 24000, processingBandHz: [300, 6000] } })).toEqual([]);
  });

  it('checks a list: at most 8, unique names', () => {
    const list = (n: number) => Array.from({ length: n }, (_, i) => ({ ...gate, name: `s${i}` }));
    const out: string[] = [];
    const add = (p: string, _v: unknown, m: string) => out.push(`${p} ${m}`);
    expect(validateSectors(list(MAX_SECTORS), 'sectors', add)).toHaveLength(8);
    expect(validateSectors(list(MAX_SECTORS + 1), 'sectors', add)).toBeUndefined();
    expect(validateSectors([gate, { ...north, name: 'gate' }], 'sectors', add)).toBeUndefined();
    expect(out).toEqual([
      'sectors must be a list of at most 8 sectors { "name", "azimuthDeg", "elevationDeg"?, "bandHz"?, "method", "weighting" }',
      'sectors[1].name repeats the name of sectors[0]: names must be unique',
    ]);
  });

  it('summarises a change for the journal', () => {
    expect(sectorChangeSummary([], [gate, north])).toBe('sectors: + gate 20°→50° mvdr A, + north_fence 350°→10° el 0–30° 200–4000 Hz conventional C');
    expect(sectorChangeSummary([gate, north], [{ ...gate, azimuthDeg: [25, 55] }])).toBe('sectors: gate 20°→50° mvdr A → 25°→55° mvdr A, − north_fence');
    expect(sectorChangeSummary([gate], [gate])).toBe('sectors: unchanged');
  });
});

describe('sectors in the array file and the hello', () => {
  const positions = [
    [0, 0, 0],
    [0.1, 0, 0],
  ];
  it('loads them and refuses a bad one naming the file and the field', () => {
    expect(validateGeometry({ positions, sectors: [gate, north] }, 'a.json').sectors).toEqual([gate, north]);
    expect(validateGeometry({ positions }, 'a.json').sectors).toBeUndefined();
    try {
      validateGeometry({ positions, sectors: [{ ...gate, azimuthDeg: [20, 400] }] }, 'a.json');
      expect.unreachable();
    } catch (e) {
      expect(e).toBeInstanceOf(ConfigError);
      expect((e as ConfigError).issues.map((i) => i.message)).toEqual(['a.json: sectors[0].azimuthDeg must be [from, to], degrees in [0, 360) (the sector runs counter-clockwise from "from" to "to" and may wrap through 0)']);
    }
  });

  it('parses a hello carrying sectors and refuses a bad one by its path', () => {
    const spec = { azimuthDeg: { startDeg: 0, stopDeg: 350, stepDeg: 10 } };
    const hello = (sectors: unknown) =>
      JSON.stringify({
        type: 'hello',
        version: MESSAGES_VERSION,
        grid: liveGrid(spec),
        params: { lambda: 0.99, loading: { mode: 'relative', ratio: 0.01 }, bandHz: [300, 6000], grid: spec, methods: ['mvdr'], spectrumRateHz: 10, normalise: false, fftSize: 512 },
        array: { name: 'x', positions, sectors },
      });
    const m = parseServerMessage(hello([gate]));
    expect(m.type === 'hello' && m.array.sectors).toEqual([gate]);
    expect(() => parseServerMessage(hello([{ ...gate, weighting: 'Q' }]))).toThrow(MessageParseError);
    expect(() => parseServerMessage(hello([{ ...gate, weighting: 'Q' }]))).toThrow(/array\.sectors\[0\]\.weighting/);
  });
});

describe('sectors on the dashboard\'s azimuth axis (client/src/lib/sector-bands.ts)', () => {
  const full = Array.from({ length: 360 }, (_, i) => i);
  const half = Array.from({ length: 181 }, (_, i) => i);
  it('shades the columns inside: one run, or two at both ends when the sector wraps through 0', () => {
    const [g, n] = sectorsOnAxis([gate, north], full);
    // Columns 20…50 (31 of 360): column i spans [i/360, (i+1)/360].
    expect(g.runs).toEqual([{ from: 20 / 360, to: 51 / 360 }]);
    expect(g.labelAt).toBeCloseTo(35.5 / 360, 12);
    // 0…10 (11 columns) and 350…359 (10 columns); the name goes on the wider run.
    expect(n.runs).toEqual([
      { from: 0, to: 11 / 360 },
      { from: 350 / 360, to: 1 },
    ]);
    expect(n.labelAt).toBeCloseTo(5.5 / 360, 12);
    expect(n.index).toBe(1);
  });
  it('clips to a half-circle axis and leaves out a sector with no column on it', () => {
    const away: Sector = { ...gate, name: 'away', azimuthDeg: [200, 250] };
    const on = sectorsOnAxis([away, north], half);
    expect(on.map((o) => o.sector.name)).toEqual(['north_fence']);
    expect(on[0].runs).toEqual([{ from: 0, to: 11 / 181 }]);
    expect(on[0].index).toBe(1);
    expect(sectorsOnAxis([gate], [])).toEqual([]);
  });
});

describe('the sectors controller (server/monitor/sectors.ts)', () => {
  it('saves through the array file, tells listeners, refuses a ninth and an unknown name', async () => {
    const file = join(mkdtempSync(join(tmpdir(), 'nullsteer-sectors-unit-')), 'a.json');
    writeFileSync(file, JSON.stringify({ name: 'a', positions: [[0, 0, 0], [0.1, 0, 0]], note: 'kept' }));
    const c = arrayFileSectors(file, [], () => ({ nyquistHz: 24_000, processingBandHz: [300, 6000] }));
    const heard: string[][] = [];
    const off = c.onChange((after) => heard.push(after.map((x) => x.name)));
    c.onChange(() => {
      throw new Error('a listener that fails');
    });
    expect(await c.put(gate)).toEqual({ sector: gate, created: true });
    expect(await c.put(north)).toEqual({ sector: north, created: true });
    expect(JSON.parse(readFileSync(file, 'utf8'))).toEqual({ name: 'a', positions: [[0, 0, 0], [0.1, 0, 0]], note: 'kept', sectors: [gate, north] });
    expect(heard).toEqual([['gate'], ['gate', 'north_fence']]);
    // A copy: changing what list() gave changes nothing inside.
    c.list()[0].azimuthDeg[0] = 99;
    expect(c.get('gate')).toEqual(gate);
    off();
    expect(await c.remove('gate')).toEqual(gate);
    expect(heard).toHaveLength(2);
    await expect(c.remove('gate')).rejects.toThrow(SectorsError);
    for (let i = 0; i < 7; i++) await c.put({ ...gate, name: `s${i}` });
    await expect(c.put({ ...gate, name: 'ninth' })).rejects.toMatchObject({ code: 'full' });
    // north_fence's band (200–4000 Hz) starts below this processing band (300–6000 Hz).
    expect(c.problems()).toEqual(['sectors.north_fence.bandHz must lie inside the processing band 300–6000 Hz (only those frequencies are analysed)']);
  });

  it('reports saved sectors that no longer fit the processing band', () => {
    expect(sectorLimitProblems([gate, north], { nyquistHz: 24_000, processingBandHz: [1000, 6000] })).toEqual([
      'sectors.north_fence.bandHz must lie inside the processing band 1000–6000 Hz (only those frequencies are analysed)',
    ]);
    expect(sectorLimitProblems([north], { nyquistHz: 3000 })).toEqual(['sectors.north_fence.bandHz must be [lo, hi], Hz in 1…3000 Hz (half the sample rate)']);
  });
});
