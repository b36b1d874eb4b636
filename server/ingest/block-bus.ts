/**
 * The one block stream the rest of the server consumes, whichever source feeds it. Keeps the
 * timeline's figures (samples, gaps, discontinuities) for status and lets stages subscribe.
 * A subscriber that throws is reported once per error kind and keeps its subscription; it must not
 * stop the others from getting the block.
 */
import type { Block, BlockSink } from '../../shared/types.ts';

export interface TimelineStatus {
  blocks: number;
  samples: number;
  gapSamples: number;
  discontinuities: number;
  firstSample: number | null;
  nextSample: number | null;
  subscriberErrors: number;
}

export class BlockBus {
  readonly #subs = new Set<BlockSink>();
  readonly #t: TimelineStatus = { blocks: 0, samples: 0, gapSamples: 0, discontinuities: 0, firstSample: null, nextSample: null, subscriberErrors: 0 };
  readonly #reported = new Set<string>();

  /** The sink to hand to a source. */
  readonly publish: BlockSink = (block: Block) => {
    const t = this.#t;
    t.blocks++;
    t.samples += block.frames;
    if (block.gap) t.gapSamples += block.frames;
    if (block.discontinuity) t.discontinuities++;
    if (t.firstSample === null) t.firstSample = block.sampleIndex;
    t.nextSample = block.sampleIndex + block.frames;
    for (const s of this.#subs) {
      try {
        s(block);
      } catch (e) {
        t.subscriberErrors++;
        const msg = (e as Error)?.message ?? String(e);
        if (!this.#reported.has(msg)) {
          this.#reported.add(msg);
          process.emitWarning(`block subscriber failed: ${msg}`);
        }
      }
    }
  };

  subscribe(sink: BlockSink): () => void {
    this.#subs.add(sink);
    return () => this.#subs.delete(sink);
  }

  status(): TimelineStatus {
    return { ...this.#t };
  }
}
