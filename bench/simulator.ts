/** Cost of the built-in scene: CPU seconds per second of simulated signal. */
import { loadGeometry } from '../server/config/array-file.ts';
import { PROJECT_CONFIG_DIR } from '../server/config/load.ts';
import { SceneSimulator } from '../server/ingest/simulator.ts';
import { time } from './util.ts';

export interface SimulatorResult {
  name: string;
  channels: number;
  rtf: number;
}

export async function benchSimulator(arrayFile: string, fs = 48000, seconds = 2): Promise<SimulatorResult> {
  const geometry = await loadGeometry(`${PROJECT_CONFIG_DIR}/arrays/${arrayFile}`);
  const blockFrames = 480;
  const blocks = Math.round((seconds * fs) / blockFrames);
  const t = time(() => {
    const sim = new SceneSimulator({ geometry, sampleRateHz: fs, blockFrames, seed: 1 });
    for (let k = 0; k < blocks; k++) sim.next();
  }, 3);
  return { name: `simulator ${arrayFile}`, channels: geometry.positions.length, rtf: t.medianS / seconds };
}
