/**
 * The comparison chain: a second engine on the same input with its own memory (λ), loading and
 * methods, so two settings can be watched side by side on the same live data. Band, grid, FFT size,
 * spectrum rate and normalisation follow the main chain, so the two chains' rows line up sample for
 * sample. It runs its own STFT and worker pool (its cost is its own status, shown beside the main
 * one); it starts with an empty covariance when turned on.
 */
import type { ArrayGeometry, Block } from '../../shared/types.ts';
import { Engine, type EngineRow } from './engine.ts';
import { ParamError, patchParams, type ProcessingParams } from './params.ts';
import type { PlanBudget } from './plan-budget.ts';

/** What the comparison may set differently from the main chain. */
export const COMPARE_FIELDS = ['lambda', 'tauS', 'loading', 'methods'] as const;

/** The comparison's own settings, kept while the main chain's other fields change. */
export type CompareOwn = Pick<ProcessingParams, 'lambda' | 'loading' | 'methods'>;

export function ownOf(p: ProcessingParams): CompareOwn {
  return { lambda: p.lambda, loading: structuredClone(p.loading), methods: [...p.methods] };
}

/** The main parameters with the comparison's own settings. */
export function merged(main: ProcessingParams, own: CompareOwn): ProcessingParams {
  return { ...structuredClone(main), lambda: own.lambda, loading: structuredClone(own.loading), methods: [...own.methods] };
}

/**
 * Validate a comparison body against the main chain: only COMPARE_FIELDS, each checked as in a REST
 * change. @throws ParamError naming the field
 */
export function compareParams(main: ProcessingParams, current: CompareOwn | null, body: unknown, ctx: { sampleRateHz: number; hop: number }): ProcessingParams {
  if (typeof body !== 'object' || body === null || Array.isArray(body)) throw new ParamError('(body)', 'must be a JSON object');
  for (const k of Object.keys(body)) if (!(COMPARE_FIELDS as readonly string[]).includes(k)) throw new ParamError(k, `not settable on the comparison chain; allowed ${COMPARE_FIELDS.join(', ')} (the rest follows the main chain)`);
  return patchParams(current ? merged(main, current) : main, body, ctx);
}

export interface CompareChainOptions {
  geometry: ArrayGeometry;
  sampleRateHz: number;
  workers: number;
  speedOfSoundMps: number;
  /** The plan memory shared with the main chain (plan-budget.ts). */
  budget?: PlanBudget;
  onRow: (row: EngineRow) => void;
  onError?: (message: string) => void;
}

export class CompareChain {
  readonly engine: Engine;
  #own: CompareOwn;
  readonly startedAt = new Date().toISOString();

  private constructor(engine: Engine, own: CompareOwn) {
    this.engine = engine;
    this.#own = own;
  }

  static async create(params: ProcessingParams, o: CompareChainOptions): Promise<CompareChain> {
    const engine = await Engine.create({ geometry: o.geometry, sampleRateHz: o.sampleRateHz, params, workers: o.workers, budget: o.budget, speedOfSoundMps: o.speedOfSoundMps, onRow: o.onRow, onError: o.onError });
    return new CompareChain(engine, ownOf(params));
  }

  get own(): CompareOwn {
    return this.#own;
  }

  get params(): ProcessingParams {
    return this.engine.params;
  }

  push(block: Block): void {
    this.engine.push(block);
  }

  /** Apply new own settings, or follow a change of the main chain (keeping the own ones). */
  async set(main: ProcessingParams, own: CompareOwn = this.#own): Promise<ProcessingParams> {
    this.#own = own;
    return this.engine.setParams(merged(main, own));
  }

  close(): Promise<void> {
    return this.engine.close();
  }
}
