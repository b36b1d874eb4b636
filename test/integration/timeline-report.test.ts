/**
 * `nullsteer analyze FILE --timeline DIR` writes an annotated history.png by default and the bare
 * history with --plain. A 2 s file of the built-in scene (server/tools/simulate.ts) with a sidecar
 * (start sample index, UTC start, parameters) goes through the command twice; the PNGs are decoded
 * (test/helpers/png-decode.ts, after the PNG specification) and checked: the plain image is one
 * pixel per row and azimuth, coloured as the history has always been (recomputed here from
 * history.json's levels: the largest level at the scale's top, 30 dB below at its bottom); the
 * annotated image holds that raster unchanged at the offset history.json states, with margins for
 * the axes and colour bar and ink in its caption area. The CSVs carry time from the file's start
 * and the stream time apart.
 */
import { mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { loadArrayFile } from '../../server/config/load.ts';
import { simulateToWav } from '../../server/tools/simulate.ts';
import { timelineCommand } from '../../server/tools/timeline.ts';
import { analyzeCommand } from '../../server/tools/analyze.ts';
import { COLORMAP_RGB, COLORMAP_SIZE } from '../../shared/colormap.ts';
import { decodePng } from '../helpers/png-decode.ts';

const FS = 48000;
const START = 96_000; // the file starts 2 s into the stream
const PARAMS = {
  lambda: 0.99,
  loading: { mode: 'relative', ratio: 0.01 },
  bandHz: [300, 6000],
  grid: { azimuthDeg: { startDeg: 0, stopDeg: 180, stepDeg: 2 } },
  methods: ['mvdr', 'conventional'],
  spectrumRateHz: 20,
  normalise: false,
  fftSize: 512,
};

describe('analyze --timeline history.png', () => {
  it('annotated by default, bare with --plain; time columns from the file start and the stream', async () => {
    const dir = mkdtempSync(join(tmpdir(), 'nullsteer-timeline-report-'));
    const wav = join(dir, 'scene.wav');
    const { geometry } = await loadArrayFile('arrays/line-8.json');
    await simulateToWav({ path: wav, geometry, seconds: 2, seed: 7, sampleRateHz: FS, encoding: 'float32' });
    writeFileSync(join(dir, 'scene.json'), JSON.stringify({ startSampleIndex: START, startWallClock: '2026-12-03T14:30:00.000Z', params: PARAMS, array: geometry }));
    const said: string[] = [];
    const io = { out: (s: string) => void said.push(s), err: (s: string) => void said.push(s), progress: () => {} };
    expect(await timelineCommand([wav, '--timeline', join(dir, 'a'), '--workers', '1', '--quiet'], io), said.join('\n')).toBe(0);
    expect(await timelineCommand([wav, '--timeline', join(dir, 'p'), '--workers', '1', '--quiet', '--plain'], io), said.join('\n')).toBe(0);

    const doc = JSON.parse(readFileSync(join(dir, 'p', 'history.json'), 'utf8'));
    const rows: { sampleIndex: number; nAz: number; nEl: number; mvdrDb: number[] }[] = doc.rows;
    const nAz = doc.grid.azimuthDeg.length;
    expect(nAz).toBe(91);
    expect(rows.length).toBeGreaterThan(30);

    // The bare image, recomputed from the levels the way history.png has been drawn.
    const plain = decodePng(readFileSync(join(dir, 'p', 'history.png')));
    expect([plain.width, plain.height]).toEqual([nAz, rows.length]);
    let hi = -Infinity;
    for (const r of rows) for (const v of r.mvdrDb) hi = Math.max(hi, v);
    const lo = hi - 30;
    let wrong = 0;
    rows.forEach((r, y) => {
      for (let x = 0; x < nAz; x++) {
        const t = (r.mvdrDb[x] - lo) / (hi - lo);
        const k = Math.max(0, Math.min(COLORMAP_SIZE - 1, Math.round(t * (COLORMAP_SIZE - 1))));
        const o = (y * nAz + x) * 4;
        if (plain.rgba[o] !== COLORMAP_RGB[3 * k] || plain.rgba[o + 1] !== COLORMAP_RGB[3 * k + 1] || plain.rgba[o + 2] !== COLORMAP_RGB[3 * k + 2]) wrong++;
      }
    });
    expect(wrong).toBe(0);
    expect(doc.image).toEqual({ method: 'mvdr', width: nAz, height: rows.length, raster: { x: 0, y: 0, w: nAz, h: rows.length }, lowDb: lo, highDb: hi });

    // The annotated image: the same raster at the stated offset, margins round it, a caption.
    const docA = JSON.parse(readFileSync(join(dir, 'a', 'history.json'), 'utf8'));
    const ann = decodePng(readFileSync(join(dir, 'a', 'history.png')));
    const R = docA.image.raster;
    expect([ann.width, ann.height]).toEqual([docA.image.width, docA.image.height]);
    expect([R.w, R.h]).toEqual([nAz, rows.length]);
    expect(R.x).toBeGreaterThan(20); // time labels and ticks on the left
    expect(R.y).toBeGreaterThan(10); // axis titles above
    expect(ann.width - R.x - R.w).toBeGreaterThan(40); // colour bar and its labels on the right
    expect(ann.height - R.y - R.h).toBeGreaterThan(40); // azimuth axis and caption below
    let moved = 0;
    for (let y = 0; y < R.h; y++)
      for (let x = 0; x < R.w; x++) {
        const a = ((R.y + y) * ann.width + R.x + x) * 4;
        const p = (y * plain.width + x) * 4;
        if (ann.rgba[a] !== plain.rgba[p] || ann.rgba[a + 1] !== plain.rgba[p + 1] || ann.rgba[a + 2] !== plain.rgba[p + 2]) moved++;
      }
    expect(moved).toBe(0);
    // Ink (dark pixels) in the bottom band where the caption is written.
    let ink = 0;
    for (let y = ann.height - 40; y < ann.height; y++) for (let x = 0; x < ann.width; x++) if (ann.rgba[(y * ann.width + x) * 4] < 80) ink++;
    expect(ink).toBeGreaterThan(100);

    // CSVs: time_s from the file's start, stream time and sample index apart, no float noise.
    const csv = readFileSync(join(dir, 'a', 'history.csv'), 'utf8').trim().split('\n');
    expect(csv[0]).toMatch(/^# scene\.wav: mvdr level in dB per direction/);
    expect(csv[1].split(',').slice(0, 4)).toEqual(['time_s', 'stream_time_s', 'sample_index', 'az_0']);
    const first = csv[2].split(',');
    const si = rows[0].sampleIndex;
    expect(Number(first[2])).toBe(si);
    // e.g. sample 96511: (96511 − 96000)/48000 = 0.010646 s, 96511/48000 = 2.010646 s (to the µs).
    expect(first[0]).toBe(String(Number(((si - START) / FS).toFixed(6))));
    expect(first[1]).toBe(String(Number((si / FS).toFixed(6))));
    for (const line of csv.slice(2)) expect(line.split(',')[0]).toMatch(/^\d+(\.\d{1,6})?$/);
    const peaks = readFileSync(join(dir, 'a', 'peaks.csv'), 'utf8').split('\n');
    expect(peaks[0]).toBe('time_s,stream_time_s,sample_index,method,rank,azimuth_deg,elevation_deg,level_db');
  }, 60_000);

  it('offers --plain for a misspelt flag', async () => {
    const errs: string[] = [];
    const code = await analyzeCommand(['f.wav', '--timeline', 'out', '--plian'], { out: () => {}, err: (s: string) => void errs.push(s) });
    expect(code).toBe(2);
    expect(errs[0].split('\n')[0]).toBe('nullsteer analyze: unknown flag --plian; did you mean --plain?');
  });
});
