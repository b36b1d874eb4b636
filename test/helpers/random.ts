/**
 * Seeded random numbers for numeric tests: a 32-bit generator, circular complex Gaussian data and
 * sample covariance matrices built from it. Deterministic across platforms (32-bit integer
 * arithmetic and IEEE doubles only), so a failing seed reproduces everywhere.
 */

/**
 * mulberry32 (T. Ettinger, 2017, public domain; constants from memory). Period 2³², plenty for
 * test data; not for the simulator, which has its own generator.
 * @returns a function giving uniform deviates in [0, 1)
 */
export function mulberry32(seed: number): () => number {
  let state = seed >>> 0;
  return () => {
    state = (state + 0x6d2b79f5) >>> 0;
    let t = state;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
}

/** Seeded source of uniform, real Gaussian and circular complex Gaussian deviates. */
export class TestRandom {
  readonly #uniform: () => number;
  #spare = 0;
  #hasSpare = false;

  constructor(seed: number) {
    this.#uniform = mulberry32(seed);
  }

  /** Uniform deviate in [0, 1). */
  uniform(): number {
    return this.#uniform();
  }

  /**
   * Standard normal deviate by the Box–Muller transform (G. E. P. Box & M. E. Muller, Ann. Math.
   * Statist. 29(2), 1958); both outputs of each pair are used.
   */
  gaussian(): number {
    if (this.#hasSpare) {
      this.#hasSpare = false;
      return this.#spare;
    }
    // 1 − u lies in (0, 1], so the logarithm is finite.
    const radius = Math.sqrt(-2 * Math.log(1 - this.#uniform()));
    const angle = 2 * Math.PI * this.#uniform();
    this.#spare = radius * Math.sin(angle);
    this.#hasSpare = true;
    return radius * Math.cos(angle);
  }

  /**
   * Fills `out` with circular complex Gaussian deviates of power E|z|² = `power` (each of the real
   * and imaginary parts has variance power/2).
   * @param out interleaved complex [re, im, …]; every entry is overwritten
   */
  complexGaussian(out: Float64Array, power = 1): Float64Array {
    const scale = Math.sqrt(power / 2);
    for (let i = 0; i < out.length; i++) out[i] = scale * this.gaussian();
    return out;
  }
}

/**
 * Sample covariance (1/K) Σ_k x_k x_kᴴ of K snapshots of independent unit-power complex Gaussian
 * channels, stored full row-major. With K ≥ 2M it is well conditioned (eigenvalue spread about
 * ((1 + √(M/K)) / (1 − √(M/K)))², Marchenko–Pastur, common practice); with K < M it has rank K.
 * @returns Float64Array of length 2·M², element (i, j) at (i·M + j)·2
 */
export function sampleCovariance(rng: TestRandom, m: number, snapshots: number): Float64Array {
  const x = new Float64Array(2 * m);
  const r = new Float64Array(2 * m * m);
  for (let k = 0; k < snapshots; k++) {
    rng.complexGaussian(x);
    addOuterProduct(r, x, m, 1 / snapshots);
  }
  return r;
}

/** r += weight · x xᴴ, written naively over the full matrix (the reference for the kernels). */
export function addOuterProduct(r: Float64Array, x: Float64Array, m: number, weight: number): void {
  for (let i = 0; i < m; i++) {
    for (let j = 0; j < m; j++) {
      const p = (i * m + j) * 2;
      // x_i · conj(x_j)
      r[p] += weight * (x[2 * i] * x[2 * j] + x[2 * i + 1] * x[2 * j + 1]);
      r[p + 1] += weight * (x[2 * i + 1] * x[2 * j] - x[2 * i] * x[2 * j + 1]);
    }
  }
}
