/** The title of a direction history: which chain it shows and that chain's memory τ. */
import { plainNumber, tidy } from '../../../shared/numbers.ts';

export type HistoryChain = 'main' | 'comparison';

/**
 * "main · τ 2 s", "comparison · τ 0.15 s": τ without floating-point noise (derived from λ it may
 * read 1.9999999999999707) and with at most four significant digits; just the chain while τ is not
 * known yet.
 */
export function historyTitle(chain: HistoryChain, tauS: number | null | undefined): string {
  if (tauS === null || tauS === undefined || !Number.isFinite(tauS)) return chain;
  return `${chain} · τ ${plainNumber(tidy(tauS), 4)} s`;
}
