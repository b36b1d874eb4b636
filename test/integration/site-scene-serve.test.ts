/**
 * `serve` with simulator.scene: the stream's sample indices are the UTC sample clock
 * (index = round(utcMs/1000 · fs)), blocks are contiguous, status describes the scene as this array
 * hears it, and a scene the array cannot render (no pose, a bad file) is a configuration error that
 * names the file and the field.
 */
import { mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterEach, describe, expect, it } from 'vitest';
import type { Service } from '../../server/service.ts';
import { utcSampleIndex } from '../../server/ingest/site-scene.ts';
import { FIXTURES, collectBlocks, getStatus, startTestService, waitFor } from '../helpers/service.ts';

const SCENE = 'config/scenes/eastgate-yard.json';
let svc: Service | null = null;

afterEach(async () => {
  await svc?.close();
  svc = null;
});

describe('serve with a site scene', () => {
  it('streams on the UTC sample clock and describes the scene in status', async () => {
    const before = utcSampleIndex(Date.now(), 48000);
    svc = await startTestService({ source: { kind: 'simulator' }, array: { file: 'config/arrays/yard-east.json' }, simulator: { scene: SCENE } });
    const blocks = collectBlocks(svc);
    await waitFor(() => blocks.length >= 20, 30_000, '20 blocks');
    const after = utcSampleIndex(Date.now(), 48000);
    const b = blocks.slice(0, 20);
    for (let k = 1; k < b.length; k++) expect(b[k].sampleIndex).toBe(b[k - 1].sampleIndex + b[k - 1].frames);
    // Rendering started after `before`; a block leaves once its last sample is due (0.5 s of room
    // for the monotonic and UTC clocks to differ).
    expect(b[0].sampleIndex).toBeGreaterThanOrEqual(before);
    expect(b[19].sampleIndex + b[19].frames).toBeLessThanOrEqual(after + 24000);
    expect(b.every((x) => x.channels === 24 && !x.gap)).toBe(true);
    const st = await getStatus(svc);
    expect(st.source.kind).toBe('simulator');
    expect(st.source.scenario).toMatchObject({ kind: 'site-scene', scene: 'Eastgate yard', clock: 'utc', array: 'yard-east', pose: { positionM: [70, 12, 3], headingDeg: 150 } });
    expect(st.source.scenario.sources.map((s: { name: string }) => s.name)).toEqual(['pump', 'fan', 'generator', 'cart']);
    expect(st.source.scenario.summary).toContain('site scene Eastgate yard heard by yard-east');
  });

  it('refuses an array without a pose, naming the array file', async () => {
    await expect(startTestService({ source: { kind: 'simulator' }, array: { file: `${FIXTURES}arrays/square-4.json` }, simulator: { scene: SCENE } }))
      .rejects.toThrow(`simulator.scene = "${SCENE}" needs the array's place on the site: ${FIXTURES}arrays/square-4.json has no "pose"`);
  });

  it('refuses a bad scene file, naming the file and the field', async () => {
    const dir = mkdtempSync(join(tmpdir(), 'scene-'));
    const file = join(dir, 'bad.json');
    writeFileSync(file, JSON.stringify({ name: 'x', sources: [{ name: 'a', levelDbAt1m: 0, signal: { kind: 'tonal', frequencyHz: 500 }, positionM: [1, 2] }] }));
    await expect(startTestService({ source: { kind: 'simulator' }, array: { file: 'config/arrays/yard-east.json' }, simulator: { scene: file } }))
      .rejects.toThrow(`${file}: sources[0].positionM must be [x, y, z]`);
  });
});

describe('one scene across processes', () => {
  it('two processes starting at different sample indices with different blocks render identical samples', async () => {
    const { execFile } = await import('node:child_process');
    const { renderRangeHash } = await import('../helpers/scene-render.ts');
    const run = (start: number, frames: number, from: number, count: number) =>
      new Promise<string>((resolve, reject) => {
        execFile(process.execPath, ['--import', 'tsx', 'test/helpers/scene-render.ts', SCENE, 'config/arrays/yard-north.json', String(start), String(frames), String(from), String(count)], { timeout: 60_000 }, (err, stdout) =>
          err ? reject(err) : resolve(stdout.trim()));
      });
    const from = utcSampleIndex(Date.UTC(2026, 11, 3, 22, 0, 0), 48000);
    const [a, b] = await Promise.all([run(from - 5000, 512, from, 9600), run(from - 37, 1000, from, 9600)]);
    expect(a).toMatch(/^[0-9a-f]{64}$/);
    expect(b).toBe(a);
    expect(await renderRangeHash(SCENE, 'config/arrays/yard-north.json', from, 4800, from, 9600)).toBe(a);
  });
});
