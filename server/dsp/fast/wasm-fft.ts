/**
 * The STFT's forward transforms in WebAssembly SIMD: two channels per f64x2 vector (one in each
 * lane), so one pass of the code transforms a channel pair. Used by MultiChannelStft
 * (dsp/stft.ts) when the runtime has WebAssembly SIMD; it keeps the same conventions:
 * X[k] = Σ_{n<N} w[n] x[n] e^{−j2πkn/N}, w the periodic square-root Hann window.
 *
 * Method (common practice, e.g. E. O. Brigham, "The Fast Fourier Transform and its
 * Applications", 1988, §9 on transforming 2N real points with an N-point complex FFT):
 *  1. z[n] = w[2n]x[2n] + j·w[2n+1]x[2n+1], n < K = N/2, loaded in bit-reversed order;
 *  2. Z = DFT_K(z) by iterative radix-2 decimation in time, the butterfly of span h using
 *     W_{2h}^j = e^{−jπj/h};
 *  3. for each wanted bin k (0 ≤ k ≤ K): E = (Z[k] + Z*[K−k])/2, O = (Z[k] − Z*[K−k])/(2j),
 *     X[k] = E + e^{−j2πk/N}·O (indices mod K).
 * Only the wanted bins (the processing band) are formed, written bin-major and channel-interleaved
 * like the STFT snapshot: X_c[k] at out[((k − k0)·M + c)·2].
 *
 * Memory of one instance (byte offsets; tables first, then the per-instance buffers):
 *  TW   K − 1 complex twiddles (cos, −sin) of the spans h = 1, 2, …, K/2, span h at entry h − 1 + j
 *  POST K + 1 complex e^{−j2πk/N}
 *  WIN  N doubles of the window
 *  REV  K i32: byte offset, inside a pair's frame, of sample 2·bitrev(i)
 *  WORK K points × 32 bytes (re vector, im vector)
 *  then the frames (pairs × N × 16 bytes: sample n of pair p at (p·N + n)·16, lane = channel & 1)
 *  and the output (bins × M × 16 bytes).
 */
import { instantiateWat, type WasmMemory } from './wasm-assemble.ts';

interface FftExports {
  memory: WasmMemory;
  analyze(frames: number, pairs: number, m: number, k0: number, count: number, out: number): void;
}

interface Layout {
  tw: number;
  post: number;
  win: number;
  rev: number;
  work: number;
  end: number;
}

function layoutFor(n: number): Layout {
  const k = n / 2;
  const tw = 0;
  const post = tw + 16 * (k - 1);
  const win = post + 16 * (k + 1);
  const rev = win + 8 * n;
  const work = rev + 4 * k;
  const end = work + 32 * k;
  return { tw, post, win, rev, work, end: Math.ceil(end / 16) * 16 };
}

const get = (n: string) => `(local.get $${n})`;
const set = (n: string, e: string) => `(local.set $${n} ${e})`;
const i32 = (v: number) => `(i32.const ${v})`;
const addI = (a: string, b: string) => `(i32.add ${a} ${b})`;
const mul = (a: string, b: string) => `(f64x2.mul ${a} ${b})`;
const add = (a: string, b: string) => `(f64x2.add ${a} ${b})`;
const sub = (a: string, b: string) => `(f64x2.sub ${a} ${b})`;
const load = (a: string, offset = 0) => `(v128.load offset=${offset} ${a})`;
const store = (a: string, v: string, offset = 0) => `(v128.store offset=${offset} ${a} ${v})`;

/** The WAT text of the transform for FFT size n (a power of two ≥ 4). */
export function fftWat(n: number): string {
  if (!Number.isInteger(n) || n < 4 || (n & (n - 1)) !== 0) throw new RangeError(`FFT size must be a power of two ≥ 4, got ${n}`);
  const k = n / 2;
  const L = layoutFor(n);
  const frameBytes = 16 * n;
  return `(module
  (memory (export "memory") 1)
  (func (export "analyze") (param $frames i32) (param $pairs i32) (param $m i32) (param $k0 i32) (param $count i32) (param $out i32)
    (local $p i32) (local $fb i32) (local $i i32) (local $rb i32) (local $wp i32)
    (local $h i32) (local $j i32) (local $a i32) (local $b i32) (local $span i32) (local $end i32)
    (local $kk i32) (local $ka i32) (local $kb i32) (local $o i32) (local $two i32)
    (local $wr v128) (local $wi v128) (local $ar v128) (local $ai v128) (local $br v128) (local $bi v128)
    (local $tr v128) (local $ti v128) (local $er v128) (local $ei v128) (local $or v128) (local $oi v128)
    (local $xr v128) (local $xi v128) (local $half v128)
    (if (i32.eqz ${get('pairs')}) (then (return)))
    ${set('half', '(v128.const f64x2 0.5 0.5)')}
    ${set('p', i32(0))}
    (loop $pair
      ${set('fb', addI(get('frames'), `(i32.mul ${get('p')} ${i32(frameBytes)})`))}
      ;; 1. windowed, packed, bit-reversed load; the first span (h = 1, twiddle 1) folded in
      ${set('i', i32(0))}
      (loop $load
        ${set('rb', `(i32.load offset=${L.rev} (i32.shl ${get('i')} ${i32(2)}))`)}
        ${set('wp', `(i32.shr_u ${get('rb')} ${i32(1)})`)}
        ${set('ar', mul(load(addI(get('fb'), get('rb'))), `(v128.load64_splat offset=${L.win} ${get('wp')})`))}
        ${set('ai', mul(load(addI(get('fb'), get('rb')), 16), `(v128.load64_splat offset=${L.win + 8} ${get('wp')})`))}
        ${set('rb', `(i32.load offset=${L.rev + 4} (i32.shl ${get('i')} ${i32(2)}))`)}
        ${set('wp', `(i32.shr_u ${get('rb')} ${i32(1)})`)}
        ${set('br', mul(load(addI(get('fb'), get('rb'))), `(v128.load64_splat offset=${L.win} ${get('wp')})`))}
        ${set('bi', mul(load(addI(get('fb'), get('rb')), 16), `(v128.load64_splat offset=${L.win + 8} ${get('wp')})`))}
        ${set('a', `(i32.shl ${get('i')} ${i32(5)})`)}
        ${store(get('a'), add(get('ar'), get('br')), L.work)}
        ${store(get('a'), add(get('ai'), get('bi')), L.work + 16)}
        ${store(get('a'), sub(get('ar'), get('br')), L.work + 32)}
        ${store(get('a'), sub(get('ai'), get('bi')), L.work + 48)}
        ${set('i', addI(get('i'), i32(2)))}
        (br_if $load (i32.lt_u ${get('i')} ${i32(k)})))
      ;; 2. the spans h = 2, 4, …, K/2
      ${set('h', i32(2))}
      (block $stagesDone
        (loop $stage
          (br_if $stagesDone (i32.ge_u ${get('h')} ${i32(k)}))
          ${set('span', `(i32.shl ${get('h')} ${i32(6)})`)} ;; 2h points × 32 bytes
          ${set('j', i32(0))}
          (loop $twiddle
            ${set('wp', `(i32.shl (i32.add ${get('h')} (i32.sub ${get('j')} ${i32(1)})) ${i32(4)})`)}
            ${set('wr', `(v128.load64_splat offset=${L.tw} ${get('wp')})`)}
            ${set('wi', `(v128.load64_splat offset=${L.tw + 8} ${get('wp')})`)}
            ${set('a', `(i32.shl ${get('j')} ${i32(5)})`)}
            ${set('end', `(i32.shl ${i32(k)} ${i32(5)})`)}
            (loop $group
              ${set('b', addI(get('a'), `(i32.shl ${get('h')} ${i32(5)})`))}
              ${set('br', load(get('b'), L.work))}
              ${set('bi', load(get('b'), L.work + 16))}
              ${set('tr', sub(mul(get('wr'), get('br')), mul(get('wi'), get('bi'))))}
              ${set('ti', add(mul(get('wr'), get('bi')), mul(get('wi'), get('br'))))}
              ${set('ar', load(get('a'), L.work))}
              ${set('ai', load(get('a'), L.work + 16))}
              ${store(get('a'), add(get('ar'), get('tr')), L.work)}
              ${store(get('a'), add(get('ai'), get('ti')), L.work + 16)}
              ${store(get('b'), sub(get('ar'), get('tr')), L.work)}
              ${store(get('b'), sub(get('ai'), get('ti')), L.work + 16)}
              ${set('a', addI(get('a'), get('span')))}
              (br_if $group (i32.lt_u ${get('a')} ${get('end')})))
            ${set('j', addI(get('j'), i32(1)))}
            (br_if $twiddle (i32.lt_u ${get('j')} ${get('h')})))
          ${set('h', `(i32.shl ${get('h')} ${i32(1)})`)}
          (br $stage)))
      ;; 3. the wanted bins of the real spectrum, two channels per vector, into the output
      (if (i32.gt_u ${get('count')} ${i32(0)})
        (then
          ${set('two', `(i32.lt_u (i32.add (i32.shl ${get('p')} ${i32(1)}) ${i32(1)}) ${get('m')})`)}
          ${set('o', addI(get('out'), `(i32.shl ${get('p')} ${i32(5)})`))}
          ${set('kk', get('k0'))}
          ${set('end', addI(get('k0'), get('count')))}
          (loop $bin
            ${set('ka', `(i32.shl (i32.and ${get('kk')} ${i32(k - 1)}) ${i32(5)})`)}
            ${set('kb', `(i32.shl (i32.and (i32.sub ${i32(k)} ${get('kk')}) ${i32(k - 1)}) ${i32(5)})`)}
            ${set('ar', load(get('ka'), L.work))}
            ${set('ai', load(get('ka'), L.work + 16))}
            ${set('br', load(get('kb'), L.work))}
            ${set('bi', load(get('kb'), L.work + 16))}
            ${set('er', mul(get('half'), add(get('ar'), get('br'))))}
            ${set('ei', mul(get('half'), sub(get('ai'), get('bi'))))}
            ${set('or', mul(get('half'), add(get('ai'), get('bi'))))}
            ${set('oi', mul(get('half'), sub(get('br'), get('ar'))))}
            ${set('wp', `(i32.shl ${get('kk')} ${i32(4)})`)}
            ${set('wr', `(v128.load64_splat offset=${L.post} ${get('wp')})`)}
            ${set('wi', `(v128.load64_splat offset=${L.post + 8} ${get('wp')})`)}
            ${set('xr', add(get('er'), sub(mul(get('wr'), get('or')), mul(get('wi'), get('oi')))))}
            ${set('xi', add(get('ei'), add(mul(get('wr'), get('oi')), mul(get('wi'), get('or')))))}
            ${store(get('o'), `(i8x16.shuffle 0 1 2 3 4 5 6 7 16 17 18 19 20 21 22 23 ${get('xr')} ${get('xi')})`)}
            (if ${get('two')} (then
              ${store(get('o'), `(i8x16.shuffle 8 9 10 11 12 13 14 15 24 25 26 27 28 29 30 31 ${get('xr')} ${get('xi')})`, 16)}))
            ${set('o', addI(get('o'), `(i32.shl ${get('m')} ${i32(4)})`))}
            ${set('kk', addI(get('kk'), i32(1)))}
            (br_if $bin (i32.lt_u ${get('kk')} ${get('end')})))))
      ${set('p', addI(get('p'), i32(1)))}
      (br_if $pair (i32.lt_u ${get('p')} ${get('pairs')}))))
)`;
}

/**
 * The forward transforms of M channels' current frames. `frames` is where the caller keeps the
 * frames (pair-interleaved, see the module comment); {@link analyze} transforms them all.
 */
export class PairFft {
  readonly fftSize: number;
  readonly channels: number;
  readonly pairs: number;
  /** Sample n of channel c at frames[((c >> 1)·N + n)·2 + (c & 1)]. */
  readonly frames: Float64Array;
  readonly #exp: FftExports;
  readonly #framesAt: number;
  readonly #outAt: number;
  readonly #mem: Float64Array;

  private constructor(n: number, m: number, exp: FftExports, framesAt: number, outAt: number) {
    this.fftSize = n;
    this.channels = m;
    this.pairs = Math.ceil(m / 2);
    this.#exp = exp;
    this.#framesAt = framesAt;
    this.#outAt = outAt;
    // The memory was grown once at instantiation and never again, so these views stay valid.
    this.#mem = new Float64Array(exp.memory.buffer);
    this.frames = new Float64Array(exp.memory.buffer, framesAt, 2 * this.pairs * n);
    const L = layoutFor(n);
    const k = n / 2;
    const tw = new Float64Array(exp.memory.buffer, L.tw, 2 * (k - 1));
    for (let h = 1; h < k; h <<= 1) {
      for (let j = 0; j < h; j++) {
        tw[2 * (h - 1 + j)] = Math.cos((Math.PI * j) / h);
        tw[2 * (h - 1 + j) + 1] = -Math.sin((Math.PI * j) / h);
      }
    }
    const post = new Float64Array(exp.memory.buffer, L.post, 2 * (k + 1));
    for (let q = 0; q <= k; q++) {
      post[2 * q] = Math.cos((2 * Math.PI * q) / n);
      post[2 * q + 1] = -Math.sin((2 * Math.PI * q) / n);
    }
    const win = new Float64Array(exp.memory.buffer, L.win, n);
    for (let q = 0; q < n; q++) win[q] = Math.sin((Math.PI * q) / n);
    const rev = new Int32Array(exp.memory.buffer, L.rev, k);
    const bits = Math.log2(k);
    for (let i = 0; i < k; i++) {
      let r = 0;
      for (let b = 0; b < bits; b++) r |= ((i >> b) & 1) << (bits - 1 - b);
      rev[i] = 2 * r * 16;
    }
  }

  /**
   * @param fftSize N, a power of two ≥ 4
   * @param channels M ≥ 1
   * @throws (rejects) when WebAssembly SIMD is missing
   */
  static async create(fftSize: number, channels: number): Promise<PairFft> {
    const L = layoutFor(fftSize);
    const pairs = Math.ceil(channels / 2);
    const framesAt = L.end;
    const outAt = framesAt + 16 * pairs * fftSize;
    const bins = fftSize / 2 + 1;
    const exp = await instantiateWat<FftExports>(`nullsteer-fft-${fftSize}`, () => fftWat(fftSize), outAt + 16 * bins * channels);
    return new PairFft(fftSize, channels, exp, framesAt, outAt);
  }

  /**
   * Transform every channel's frame and form bins k0 … k0 + count − 1.
   * @returns a view (valid until the next call) of 2·M·count doubles: X_c[k] at ((k − k0)·M + c)·2
   */
  analyze(k0: number, count: number): Float64Array {
    const m = this.channels;
    this.#exp.analyze(this.#framesAt, this.pairs, m, k0, count, this.#outAt);
    const at = this.#outAt / 8;
    return this.#mem.subarray(at, at + 2 * m * count);
  }
}
