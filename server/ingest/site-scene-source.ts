/**
 * The site scene in the live server: load the scene file, check the array has a pose, and pace the
 * renderer in real time on the UTC sample clock, so that servers started at different moments (in
 * different processes, on different machines with disciplined clocks) stream one consistent scene.
 */
import type { ArrayGeometry, BlockSink } from '../../shared/types.ts';
import { ConfigError } from '../config/validate.ts';
import { loadScene } from './site-scene-file.ts';
import { SiteSceneSimulator, utcSampleIndex } from './site-scene.ts';
import { SimulatorSource, type SimulatorSourceOptions } from './simulator-source.ts';

export interface UtcSceneSourceOptions extends SimulatorSourceOptions {
  /** UTC clock, ms since the epoch; default Date.now. Tests inject a fake one. */
  utcNow?: () => number;
}

/**
 * The simulator's real-time driver, started on the UTC clock: start() moves the renderer to the
 * UTC sample index of that moment, then blocks leave as their last sample falls due (paced by the
 * monotonic clock, like the built-in scene; a stall beyond maxCatchUpS is skipped and flagged).
 */
export class UtcSceneSource extends SimulatorSource {
  readonly #sim: SiteSceneSimulator;
  readonly #utcNow: () => number;

  constructor(sim: SiteSceneSimulator, options: UtcSceneSourceOptions = {}) {
    super(sim, options);
    this.#sim = sim;
    this.#utcNow = options.utcNow ?? Date.now;
  }

  override start(sink: BlockSink, onError?: (err: unknown) => void): void {
    this.#sim.seek(utcSampleIndex(this.#utcNow(), this.#sim.sampleRateHz));
    super.start(sink, onError);
  }
}

export interface SiteSceneSetup {
  scenePath: string;
  /** The array file's path, for the message when it has no pose. */
  arrayPath: string;
  geometry: ArrayGeometry;
  sampleRateHz: number;
  blockFrames: number;
  seed: number;
  streamId?: number;
}

/**
 * Loads the scene (simulator.scene) and plans the renderer for this array.
 * @throws ConfigError (unreadable or invalid scene, array without a pose, signal above 0.45·fs)
 */
export async function createSiteSceneSimulator(s: SiteSceneSetup): Promise<SiteSceneSimulator> {
  if (!s.geometry.pose) {
    throw new ConfigError([{
      path: 'simulator.scene', value: s.scenePath,
      message: `simulator.scene = ${JSON.stringify(s.scenePath)} needs the array's place on the site: ${s.arrayPath} has no "pose": { "positionM": [x, y, z], "headingDeg": h }`,
    }]);
  }
  const scene = await loadScene(s.scenePath);
  return new SiteSceneSimulator({ scene, geometry: s.geometry, sampleRateHz: s.sampleRateHz, blockFrames: s.blockFrames, seed: s.seed, streamId: s.streamId });
}
