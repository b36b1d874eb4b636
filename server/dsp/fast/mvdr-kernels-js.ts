/**
 * Plain-JavaScript batched kernels over the block-planar steering layout (planar-steering.ts), the
 * portable twins of the WebAssembly SIMD kernels in wasm-kernels.ts (same loops, same layout, same
 * summation order per direction). K is fixed per function so every running sum is a scalar local.
 *
 * mvdrBlocksK{2,4}: q[d] = Σ_{i<m} |Σ_{j≤i} W_ij · v_d[row j]|² (= vᴴ(L Lᴴ)⁻¹v for W = L⁻¹, see
 * inverse-factor.ts), for `blocks` blocks starting at v[vOffset]. W packed by rows, interleaved;
 * rows[j] = offset in doubles, inside a block, of the channel used as row j (active[j]·2K).
 * No allocation; `q` must hold blocks·K entries and must not overlap the inputs.
 */

export function mvdrBlocksK2(
  q: Float64Array, w: Float64Array, rows: Int32Array, m: number,
  v: Float64Array, vOffset: number, blocks: number, blockStride: number,
): void {
  for (let blk = 0, vb = vOffset; blk < blocks; blk++, vb += blockStride) {
    let q0 = 0;
    let q1 = 0;
    for (let i = 0, wp = 0; i < m; i++) {
      let yr0 = 0;
      let yi0 = 0;
      let yr1 = 0;
      let yi1 = 0;
      for (let j = 0; j <= i; j++, wp += 2) {
        const wr = w[wp];
        const wi = w[wp + 1];
        const p = vb + rows[j];
        const a0 = v[p];
        const a1 = v[p + 1];
        const b0 = v[p + 2];
        const b1 = v[p + 3];
        yr0 += wr * a0 - wi * b0;
        yi0 += wr * b0 + wi * a0;
        yr1 += wr * a1 - wi * b1;
        yi1 += wr * b1 + wi * a1;
      }
      q0 += yr0 * yr0 + yi0 * yi0;
      q1 += yr1 * yr1 + yi1 * yi1;
    }
    q[2 * blk] = q0;
    q[2 * blk + 1] = q1;
  }
}

export function mvdrBlocksK4(
  q: Float64Array, w: Float64Array, rows: Int32Array, m: number,
  v: Float64Array, vOffset: number, blocks: number, blockStride: number,
): void {
  for (let blk = 0, vb = vOffset; blk < blocks; blk++, vb += blockStride) {
    let q0 = 0;
    let q1 = 0;
    let q2 = 0;
    let q3 = 0;
    for (let i = 0, wp = 0; i < m; i++) {
      let yr0 = 0;
      let yi0 = 0;
      let yr1 = 0;
      let yi1 = 0;
      let yr2 = 0;
      let yi2 = 0;
      let yr3 = 0;
      let yi3 = 0;
      for (let j = 0; j <= i; j++, wp += 2) {
        const wr = w[wp];
        const wi = w[wp + 1];
        const p = vb + rows[j];
        const a0 = v[p];
        const a1 = v[p + 1];
        const a2 = v[p + 2];
        const a3 = v[p + 3];
        const b0 = v[p + 4];
        const b1 = v[p + 5];
        const b2 = v[p + 6];
        const b3 = v[p + 7];
        yr0 += wr * a0 - wi * b0;
        yi0 += wr * b0 + wi * a0;
        yr1 += wr * a1 - wi * b1;
        yi1 += wr * b1 + wi * a1;
        yr2 += wr * a2 - wi * b2;
        yi2 += wr * b2 + wi * a2;
        yr3 += wr * a3 - wi * b3;
        yi3 += wr * b3 + wi * a3;
      }
      q0 += yr0 * yr0 + yi0 * yi0;
      q1 += yr1 * yr1 + yi1 * yi1;
      q2 += yr2 * yr2 + yi2 * yi2;
      q3 += yr3 * yr3 + yi3 * yi3;
    }
    const o = 4 * blk;
    q[o] = q0;
    q[o + 1] = q1;
    q[o + 2] = q2;
    q[o + 3] = q3;
  }
}
