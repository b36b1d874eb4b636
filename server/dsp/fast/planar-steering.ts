/**
 * Block-planar copy of a SteeringTable for the batched kernels (MVDR scan, conventional tracker).
 *
 * The plain table keeps each (bin, direction) vector contiguous and interleaved
 * (((b·D + d)·M + m)·2, steering.ts). The batched kernels instead walk one channel at a time for
 * K directions at once, so here the directions of a bin are cut into blocks of K, and inside a
 * block channel m holds K real parts followed by K imaginary parts:
 *
 *   re v_{b, k·K + l}[m] at ((lb·nBlocks + k)·M + m)·2K + l
 *   im v_{b, k·K + l}[m] at ((lb·nBlocks + k)·M + m)·2K + K + l,     lb = b − binsStart,
 *
 * i.e. one block is a contiguous M×2K slab, read front to back by the kernels (structure-of-arrays
 * for SIMD lanes; the usual layout for vectorised batched solves, common practice). The last block
 * is padded with zero vectors (their forms come out 0 and are never copied out).
 */
import type { SteeringTable } from '../steering.ts';

/** Geometry of a block-planar copy. */
export interface PlanarLayout {
  /** K, directions per block. */
  readonly k: number;
  /** M, channels (the table's). */
  readonly channels: number;
  /** D, directions. */
  readonly directions: number;
  /** ⌈D/K⌉. */
  readonly blocks: number;
  /** Doubles per block, M·2K. */
  readonly blockStride: number;
  /** Doubles per bin, blocks·M·2K. */
  readonly binStride: number;
  /** First table bin copied and how many. */
  readonly binsStart: number;
  readonly binsCount: number;
}

/**
 * Validates the bin range against the table and returns the layout.
 * @throws RangeError for a bin range outside the table or a K that is not a positive integer
 */
export function planarLayout(table: SteeringTable, binsStart: number, binsCount: number, k: number): PlanarLayout {
  if (!Number.isInteger(k) || k < 1) throw new RangeError(`block size k must be an integer ≥ 1, got ${k}`);
  if (!Number.isInteger(binsStart) || binsStart < 0 || binsStart >= table.bins) {
    throw new RangeError(`binsStart must be an integer in 0…${table.bins - 1}, got ${binsStart}`);
  }
  if (!Number.isInteger(binsCount) || binsCount < 1 || binsStart + binsCount > table.bins) {
    throw new RangeError(`binsCount must be an integer in 1…${table.bins - binsStart} (binsStart ${binsStart}), got ${binsCount}`);
  }
  const blocks = Math.ceil(table.directions / k);
  const blockStride = table.channels * 2 * k;
  return {
    k, channels: table.channels, directions: table.directions, blocks, blockStride,
    binStride: blocks * blockStride, binsStart, binsCount,
  };
}

/**
 * Writes the block-planar copy of the layout's bins into `out` from `outOffset`
 * (binsCount·binStride entries; padding entries are set to 0). A Float32Array receives the table
 * rounded to single precision (relative error ≤ 2⁻²⁴ per part), for the f32x4 kernels.
 */
export function fillPlanar(out: Float64Array | Float32Array, outOffset: number, table: SteeringTable, layout: PlanarLayout): void {
  const { k, channels: m, directions: nd, blockStride, binStride, binsStart, binsCount } = layout;
  if (outOffset + binsCount * binStride > out.length) {
    throw new RangeError(`planar copy needs ${binsCount * binStride} doubles from ${outOffset}, have ${out.length}`);
  }
  out.fill(0, outOffset, outOffset + binsCount * binStride);
  const src = table.data;
  for (let lb = 0; lb < binsCount; lb++) {
    for (let d = 0; d < nd; d++) {
      const blk = (d / k) | 0;
      const lane = d - blk * k;
      const dst = outOffset + lb * binStride + blk * blockStride + lane;
      const s = table.offset(binsStart + lb, d);
      for (let c = 0; c < m; c++) {
        out[dst + c * 2 * k] = src[s + 2 * c];
        out[dst + c * 2 * k + k] = src[s + 2 * c + 1];
      }
    }
  }
}
