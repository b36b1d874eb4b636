/**
 * Levels per direction on a running service (issue 16 item 2): a sector saved over REST gets its own
 * steered beam (listed among the engine's beams), its 1-s Leq and the omnidirectional one are kept
 * (GET /api/levels), shown in status and in GET /metrics, and written to data.dir/levels. Checked on
 * counters and values, never on time: the figures are those of the built-in scene (a source fixed at
 * 35°, server/ingest/scenario.ts), which the sector 20–50° holds.
 */
import { copyFileSync, mkdtempSync, readFileSync, readdirSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { fileURLToPath } from 'node:url';
import { getStatus, startTestService, waitFor } from '../helpers/service.ts';
import type { Service } from '../../server/service.ts';

const JSON_HEADERS = { 'content-type': 'application/json' };
let svc: Service;
let dataDir: string;

describe('levels per direction on the service', () => {
  beforeAll(async () => {
    const dir = mkdtempSync(join(tmpdir(), 'nullsteer-monitor-'));
    const arrayFile = join(dir, 'ring-24.json');
    copyFileSync(fileURLToPath(new URL('../../config/arrays/ring-24.json', import.meta.url)), arrayFile);
    dataDir = join(dir, 'data');
    svc = await startTestService({ source: { kind: 'simulator' }, array: { file: arrayFile }, data: { dir: dataDir } });
  }, 30_000);

  afterAll(async () => {
    await svc?.close();
  });

  it('a sector gets a beam and 1-s levels; the omnidirectional level is kept beside it; status, metrics and files say the same', async () => {
    const put = await fetch(`${svc.url}/api/sectors/gate`, { method: 'PUT', headers: JSON_HEADERS, body: JSON.stringify({ azimuthDeg: [20, 50], method: 'mvdr', weighting: 'A' }) });
    expect(put.status).toBe(201);
    await waitFor(async () => {
      const st = await getStatus(svc);
      return (st.monitor?.store.secondsKept ?? 0) >= 8;
    }, 60_000, 'eight 1-s levels');
    const st = await getStatus(svc);
    expect(st.monitor.unit).toBe('dBFS');
    expect(st.monitor.indicative).toBe(true);
    const gate = st.monitor.sectors.find((s: { name: string }) => s.name === 'gate');
    expect(gate.error).toBeNull();
    expect(gate.beamId).not.toBeNull();
    // The beam follows the strongest direction in the sector: the scene's source at 35° (grid 1°).
    expect(Math.abs(gate.lookAzimuthDeg - 35)).toBeLessThanOrEqual(3);
    const beams = await (await fetch(`${svc.url}/api/beams`)).json();
    expect(JSON.stringify(beams)).toContain(`"id":${gate.beamId}`);

    const levels = async (q: string) => (await (await fetch(`${svc.url}/api/levels?${q}`)).json()) as { levels: { leqDb: number; coverage: number; unit: string; weighting: string }[]; indicative: boolean; series: string[] };
    const g = await levels('sector=gate&interval=1s');
    const o = await levels('sector=omni&interval=1s');
    expect(g.indicative).toBe(true);
    expect(g.series.sort()).toEqual(['gate', 'omni']);
    expect(g.levels.length).toBeGreaterThanOrEqual(2);
    expect(o.levels.length).toBeGreaterThanOrEqual(2);
    const full = g.levels.filter((l) => l.coverage === 1);
    expect(full.length).toBeGreaterThanOrEqual(1);
    for (const l of [...g.levels, ...o.levels]) {
      expect(Number.isFinite(l.leqDb)).toBe(true);
      expect(l.unit).toBe('dBFS');
      expect(l.weighting).toBe('A');
    }
    // The sector's beam passes one source of several: its level is below the array's omnidirectional one.
    const last = (l: { leqDb: number }[]) => l[l.length - 1].leqDb;
    expect(last(g.levels)).toBeLessThan(last(o.levels));
    const metrics = await (await fetch(`${svc.url}/metrics`)).text();
    expect(metrics).toMatch(/nullsteer_sector_leq_1s_db\{sector="gate"\} -?\d/);
    await waitFor(() => readdirSync(join(dataDir, 'levels')).some((f) => f.endsWith('-seconds.csv')), 10_000, 'a levels file');
    const file = readdirSync(join(dataDir, 'levels')).find((f) => f.endsWith('-seconds.csv'))!;
    const lines = readFileSync(join(dataDir, 'levels', file), 'utf8').trim().split('\n');
    expect(lines[0]).toBe('utc,sample_index,sector,weighting,unit,leq_db,coverage');
    expect(lines.some((l) => l.includes(',gate,A,dBFS,'))).toBe(true);
    console.log(`monitor levels: gate ${last(g.levels).toFixed(2)} dBFS(A) at ${gate.lookAzimuthDeg}°, omni ${last(o.levels).toFixed(2)} dBFS(A), ${st.monitor.store.secondsKept} 1-s values`);

    // Deleting the sector releases its beam.
    expect((await fetch(`${svc.url}/api/sectors/gate`, { method: 'DELETE', headers: JSON_HEADERS })).status).toBe(200);
    await waitFor(async () => (await getStatus(svc)).monitor.sectors.length === 0, 10_000, 'the sector gone');
    const after = await (await fetch(`${svc.url}/api/beams`)).json();
    expect(JSON.stringify(after)).not.toContain(`"id":${gate.beamId},`);
  }, 90_000);
});
