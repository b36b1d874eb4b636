/**
 * Render cost of the site scene (server/ingest/site-scene.ts): seconds of CPU per second of audio
 * for each array of the Eastgate yard (24 channels, the scene's sources), and for one array with
 * only its fixed or only its moving sources. `npx tsx bench/site-scene.ts [--seconds S] [--block-frames N]`.
 * Prints medians of five runs; not a test.
 */
import { loadGeometry } from '../server/config/array-file.ts';
import { loadScene } from '../server/ingest/site-scene-file.ts';
import { SiteSceneSimulator, utcSampleIndex } from '../server/ingest/site-scene.ts';

const args = process.argv.slice(2);
const secondsAt = args.indexOf('--seconds');
const seconds = secondsAt >= 0 ? Number(args[secondsAt + 1]) : 5;
const fs = 48000;
const blockAt = args.indexOf('--block-frames');
/** The serve default (simulator.blockFrames) is 480. */
const blockFrames = blockAt >= 0 ? Number(args[blockAt + 1]) : 480;
const scene = await loadScene('config/scenes/eastgate-yard.json');

async function cost(arrayFile: string, keep: (moving: boolean) => boolean): Promise<number> {
  const geometry = await loadGeometry(arrayFile);
  const sources = scene.sources.filter((s) => keep(s.path !== null));
  const sim = new SiteSceneSimulator({ scene: { ...scene, sources }, geometry, sampleRateHz: fs, blockFrames, startIndex: utcSampleIndex(Date.now(), fs) });
  const out = new Float32Array(geometry.positions.length * blockFrames);
  const blocks = Math.ceil((seconds * fs) / blockFrames);
  for (let k = 0; k < 20; k++) sim.renderInto(out, k * blockFrames); // warm-up
  const runs: number[] = [];
  for (let r = 0; r < 5; r++) {
    const t0 = process.cpuUsage();
    let n = sim.sampleIndex;
    for (let k = 0; k < blocks; k++, n += blockFrames) sim.renderInto(out, n);
    const u = process.cpuUsage(t0);
    runs.push((u.user + u.system) / 1e6 / ((blocks * blockFrames) / fs));
  }
  return runs.sort((a, b) => a - b)[2];
}

const rows: Record<string, number> = {};
for (const a of ['yard-west', 'yard-east', 'yard-north']) rows[`${a}: all ${scene.sources.length} sources`] = await cost(`config/arrays/${a}.json`, () => true);
rows['yard-west: fixed sources only'] = await cost('config/arrays/yard-west.json', (moving) => !moving);
rows['yard-west: moving source only'] = await cost('config/arrays/yard-west.json', (moving) => moving);
for (const [k, v] of Object.entries(rows)) console.log(`${k.padEnd(34)} ${(v * 1000).toFixed(1)} ms CPU per second of audio (24 ch, 48 kHz, blocks of ${blockFrames})`);
