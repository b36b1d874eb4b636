/**
 * A separate process rendering part of a site scene, for the cross-process determinism check:
 *   node --import tsx test/helpers/scene-render.ts SCENE ARRAY START BLOCK_FRAMES FROM COUNT
 * renders blocks of BLOCK_FRAMES from sample index START until FROM+COUNT is covered and prints the
 * SHA-256 of samples FROM … FROM+COUNT−1 of every channel (float32 little-endian, channel after channel).
 */
import { createHash } from 'node:crypto';
import { loadGeometry } from '../../server/config/array-file.ts';
import { loadScene } from '../../server/ingest/site-scene-file.ts';
import { SiteSceneSimulator } from '../../server/ingest/site-scene.ts';

export async function renderRangeHash(scenePath: string, arrayPath: string, start: number, blockFrames: number, from: number, count: number): Promise<string> {
  const sim = new SiteSceneSimulator({ scene: await loadScene(scenePath), geometry: await loadGeometry(arrayPath), sampleRateHz: 48000, blockFrames, startIndex: start });
  const m = sim.channels;
  const out = new Float32Array(m * count);
  while (sim.sampleIndex < from + count) {
    const b = sim.next();
    for (let i = 0; i < b.frames; i++) {
      const n = b.sampleIndex + i - from;
      if (n < 0 || n >= count) continue;
      for (let ch = 0; ch < m; ch++) out[ch * count + n] = b.data[ch * b.frames + i];
    }
  }
  return createHash('sha256').update(Buffer.from(out.buffer)).digest('hex');
}

if (process.argv[1] && import.meta.url.endsWith(process.argv[1].split('/').pop()!)) {
  const [scene, array, start, frames, from, count] = process.argv.slice(2);
  process.stdout.write(`${await renderRangeHash(scene, array, Number(start), Number(frames), Number(from), Number(count))}\n`);
}
