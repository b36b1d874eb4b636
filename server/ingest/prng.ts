/**
 * Small seeded pseudo-random generators for the simulator. Deterministic across platforms: only
 * 32-bit integer arithmetic (Math.imul, shifts) and IEEE doubles, never Math.random.
 */

const TWO_POW_32 = 4294967296;

/**
 * One step of splitmix32, used only to spread a user seed over a generator's 128-bit state so that
 * neighbouring seeds (1, 2, 3 …) give unrelated streams. The increment is the 32-bit golden-ratio
 * constant of S. Vigna's splitmix64; the finaliser is C. Wellons' "lowbias32" integer hash
 * (hash-prospector, constants from memory). Statistical quality only matters for seeding here.
 * @returns the next state and output, as [state, output], both uint32
 */
export function splitmix32(state: number): [number, number] {
  const next = (state + 0x9e3779b9) >>> 0;
  let z = next;
  z = Math.imul(z ^ (z >>> 16), 0x21f0aaad);
  z = Math.imul(z ^ (z >>> 15), 0x735a2d97);
  z = (z ^ (z >>> 15)) >>> 0;
  return [next, z];
}

/**
 * xoshiro128** generator (D. Blackman & S. Vigna, "Scrambled linear pseudorandom number
 * generators", ACM Trans. Math. Softw. 47(4), 2021), with Gaussian deviates by the ziggurat method.
 *
 * Each noise process in the simulator owns one instance, so every process consumes exactly one
 * deviate per sample and the output does not depend on how the timeline is cut into blocks.
 */
export class Prng {
  #s0: number;
  #s1: number;
  #s2: number;
  #s3: number;

  /**
   * @param seed uint32 seed
   * @param stream index of an independent stream derived from the same seed (uint32)
   */
  constructor(seed: number, stream = 0) {
    if (!Number.isInteger(seed) || seed < 0 || seed >= TWO_POW_32) {
      throw new RangeError(`Prng: seed must be an integer in [0, 2^32), got ${seed}`);
    }
    if (!Number.isInteger(stream) || stream < 0 || stream >= TWO_POW_32) {
      throw new RangeError(`Prng: stream must be an integer in [0, 2^32), got ${stream}`);
    }
    // Hash the seed, then fold the stream index in and hash again, so that (seed, stream) pairs map
    // to unrelated states rather than to a simple function of seed ^ stream.
    let [st, out] = splitmix32(seed);
    st = (out ^ Math.imul(stream + 1, 0x85ebca6b)) >>> 0;
    [st, out] = splitmix32(st);
    this.#s0 = out;
    [st, out] = splitmix32(st);
    this.#s1 = out;
    [st, out] = splitmix32(st);
    this.#s2 = out;
    [st, out] = splitmix32(st);
    this.#s3 = out;
    // The all-zero state is the one fixed point of xoshiro; splitmix32 makes it practically
    // impossible, but guard anyway.
    if ((this.#s0 | this.#s1 | this.#s2 | this.#s3) === 0) this.#s0 = 1;
  }

  /**
   * A generator with an explicit 128-bit state (four uint32 words, not all zero), for checking the
   * output sequence against the published algorithm.
   */
  static fromState(s0: number, s1: number, s2: number, s3: number): Prng {
    const g = new Prng(0);
    g.#s0 = s0 >>> 0;
    g.#s1 = s1 >>> 0;
    g.#s2 = s2 >>> 0;
    g.#s3 = s3 >>> 0;
    if ((g.#s0 | g.#s1 | g.#s2 | g.#s3) === 0) {
      throw new RangeError('Prng.fromState: the all-zero state is not allowed');
    }
    return g;
  }

  /** Next uint32. */
  nextUint32(): number {
    const s0 = this.#s0;
    const s1 = this.#s1;
    const s2 = this.#s2;
    const s3 = this.#s3;
    const x = Math.imul(s1, 5);
    const result = Math.imul((x << 7) | (x >>> 25), 9) >>> 0;
    const t = s1 << 9;
    const n2 = s2 ^ s0;
    const n3 = s3 ^ s1;
    this.#s1 = s1 ^ n2;
    this.#s0 = s0 ^ n3;
    this.#s2 = n2 ^ t;
    this.#s3 = (n3 << 11) | (n3 >>> 21);
    return result;
  }

  /** Uniform deviate in the open interval (0, 1), 2^-32 resolution (never 0, so log() is safe). */
  uniform(): number {
    return (this.nextUint32() + 0.5) / TWO_POW_32;
  }

  /**
   * Standard normal deviate (mean 0, variance 1) by the ziggurat method (G. Marsaglia & W. W. Tsang,
   * "The ziggurat method for generating random variables", J. Statist. Software 5(8), 2000), 128
   * layers. One uint32 per deviate on the fast path (~99 %); unlike the paper's RNOR the layer
   * index (low 7 bits) and the abscissa (high 25 bits) come from disjoint bits, avoiding the
   * index/value correlation J. A. Doornik pointed out ("An improved ziggurat method to generate
   * normal random samples", 2005).
   */
  gaussian(): number {
    const u = this.nextUint32() | 0;
    const iz = u & 127;
    const hz = u >> 7; // signed, [−2^24, 2^24)
    if ((hz < 0 ? -hz : hz) < ZIG_K[iz]) return hz * ZIG_W[iz];
    return this.#gaussianSlow(hz, iz);
  }

  /** Ziggurat rejection path: the base strip's tail, or a wedge between two layers. */
  #gaussianSlow(hzIn: number, izIn: number): number {
    let hz = hzIn;
    let iz = izIn;
    for (;;) {
      const x = hz * ZIG_W[iz];
      if (iz === 0) {
        // Tail beyond R (Marsaglia's exponential-rejection tail method).
        let tx: number;
        let ty: number;
        do {
          tx = -Math.log(this.uniform()) / ZIG_R;
          ty = -Math.log(this.uniform());
        } while (ty + ty < tx * tx);
        return hz > 0 ? ZIG_R + tx : -ZIG_R - tx;
      }
      if (ZIG_F[iz] + this.uniform() * (ZIG_F[iz - 1] - ZIG_F[iz]) < Math.exp(-0.5 * x * x)) return x;
      const u = this.nextUint32() | 0;
      iz = u & 127;
      hz = u >> 7;
      if ((hz < 0 ? -hz : hz) < ZIG_K[iz]) return hz * ZIG_W[iz];
    }
  }
}

/** Ziggurat tables for 128 layers: R is the base strip's edge, V the area of each layer
 *  (Marsaglia & Tsang 2000, constants as published). Abscissae carry 24 bits plus sign. */
const ZIG_R = 3.442619855899;
const ZIG_V = 9.91256303526217e-3;
const ZIG_SCALE = 16777216; // 2^24
const ZIG_K = new Float64Array(128);
const ZIG_W = new Float64Array(128);
const ZIG_F = new Float64Array(128);
{
  let dn = ZIG_R;
  let tn = dn;
  const q = ZIG_V / Math.exp(-0.5 * dn * dn);
  ZIG_K[0] = (dn / q) * ZIG_SCALE;
  ZIG_K[1] = 0;
  ZIG_W[0] = q / ZIG_SCALE;
  ZIG_W[127] = dn / ZIG_SCALE;
  ZIG_F[0] = 1;
  ZIG_F[127] = Math.exp(-0.5 * dn * dn);
  for (let i = 126; i >= 1; i--) {
    dn = Math.sqrt(-2 * Math.log(ZIG_V / dn + Math.exp(-0.5 * dn * dn)));
    ZIG_K[i + 1] = (dn / tn) * ZIG_SCALE;
    tn = dn;
    ZIG_F[i] = Math.exp(-0.5 * dn * dn);
    ZIG_W[i] = dn / ZIG_SCALE;
  }
}
