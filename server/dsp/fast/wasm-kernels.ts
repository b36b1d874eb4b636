/**
 * Hand-written WebAssembly SIMD kernels (f64x2: two directions per vector, one in each lane) over
 * the block-planar steering layout of planar-steering.ts, assembled from WAT text at first use with
 * the wabt npm package (a WebAssembly build of the WebAssembly Binary Toolkit). The text is
 * generated for a block size K (directions per block, K/2 vectors), so K is a plan-time choice.
 * Instruction semantics: WebAssembly Core Specification 2.0, §4.4.3 (vector instructions).
 * Node 20's V8 has no relaxed-SIMD fused multiply-add, so products and sums are separate
 * instructions; every accumulator takes one add per step (the products of a step are independent),
 * which keeps the loop-carried dependency to one add latency.
 *
 * Exports of the module, all pointers byte offsets in its own exported memory:
 *  - mvdr(w, rows, m, v, blocks, blockBytes, out): for each block of K directions,
 *      out[d] = Σ_{i<m} |Σ_{j≤i} W_ij · v_d[row j]|²      (= vᴴ(L Lᴴ)⁻¹v for W = L⁻¹, inverse-factor.ts)
 *    W packed by rows, interleaved complex (16 bytes per entry); rows: m i32 byte offsets, inside a
 *    block, of the channel slab used as row j (active[j]·2K·8, so masked channels are skipped);
 *    v: the bin's first block; out: blocks·K doubles.
 *  - conv(w, rows, m, v, blocks, blockBytes, p, keep, scale): for each block,
 *      y_d = Σ_{j<m} w_j · v_d[row j],   p[d] ← keep·p[d] + scale·|y_d|²
 *    (the conventional tracker's recursion with w = conj(x)).
 */
import { assembleWat, instantiateWat, type WasmMemory } from './wasm-assemble.ts';

/** Directions per block supported by the generator (K/2 f64x2 vectors of each part). */
export const WASM_BLOCK_SIZES = [2, 4, 6, 8] as const;
export type WasmBlockSize = (typeof WASM_BLOCK_SIZES)[number];

export interface WasmKernelExports {
  memory: WasmMemory;
  mvdr(w: number, rows: number, m: number, v: number, blocks: number, blockBytes: number, out: number): void;
  conv(
    w: number, rows: number, m: number, v: number, blocks: number, blockBytes: number,
    p: number, keep: number, scale: number,
  ): void;
}

const zero = '(v128.const f64x2 0 0)';
const get = (n: string) => `(local.get $${n})`;
const set = (n: string, e: string) => `(local.set $${n} ${e})`;
const mul = (a: string, b: string) => `(f64x2.mul ${a} ${b})`;
const add = (a: string, b: string) => `(f64x2.add ${a} ${b})`;
const sub = (a: string, b: string) => `(f64x2.sub ${a} ${b})`;

/** One complex multiply–accumulate step for every vector u of the block: y_u += w · v_u. */
function macStep(vectors: number, k: number): string {
  const lines: string[] = [];
  for (let u = 0; u < vectors; u++) {
    lines.push(set(`a${u}`, `(v128.load offset=${16 * u} ${get('p')})`));
    lines.push(set(`b${u}`, `(v128.load offset=${8 * k + 16 * u} ${get('p')})`));
  }
  for (let u = 0; u < vectors; u++) {
    // (wr + j wi)(a + j b) = (wr a − wi b) + j (wr b + wi a)
    lines.push(set(`yr${u}`, add(get(`yr${u}`), sub(mul(get('wr'), get(`a${u}`)), mul(get('wi'), get(`b${u}`))))));
    lines.push(set(`yi${u}`, add(get(`yi${u}`), add(mul(get('wr'), get(`b${u}`)), mul(get('wi'), get(`a${u}`))))));
  }
  return lines.join('\n');
}

/** The WAT text of the kernels for block size k. */
export function kernelWat(k: WasmBlockSize): string {
  if (!WASM_BLOCK_SIZES.includes(k)) throw new RangeError(`wasm block size must be one of ${WASM_BLOCK_SIZES.join(', ')}, got ${k}`);
  const n = k / 2;
  const vecLocals = (names: string[]) => names.map((x) => `(local $${x} v128)`).join(' ');
  const per = (f: (u: number) => string) => Array.from({ length: n }, (_, u) => f(u)).join('\n');
  const accLocals = vecLocals(per((u) => `yr${u} yi${u} a${u} b${u}`).split(/\s+/));
  const common = `(local $blk i32) (local $vb i32) (local $wp i32) (local $rp i32) (local $rend i32) (local $p i32)
    (local $wr v128) (local $wi v128) ${accLocals}`;
  const clearY = per((u) => `${set(`yr${u}`, zero)} ${set(`yi${u}`, zero)}`);
  const loadW = `${set('wr', `(v128.load64_splat ${get('wp')})`)} ${set('wi', `(v128.load64_splat offset=8 ${get('wp')})`)}
        ${set('p', `(i32.add ${get('vb')} (i32.load ${get('rp')}))`)}`;
  const cols = `(loop $cols
          ${loadW}
          ${macStep(n, k)}
          ${set('wp', `(i32.add ${get('wp')} (i32.const 16))`)}
          ${set('rp', `(i32.add ${get('rp')} (i32.const 4))`)}
          (br_if $cols (i32.lt_u ${get('rp')} ${get('rend')})))`;
  return `(module
  (memory (export "memory") 1)
  (func (export "mvdr") (param $w i32) (param $rows i32) (param $m i32) (param $v i32) (param $nb i32) (param $bs i32) (param $out i32)
    ${common} (local $i i32) ${vecLocals(per((u) => `q${u}`).split(/\s+/))}
    (if (i32.eqz ${get('nb')}) (then (return)))
    (if (i32.eqz ${get('m')}) (then (return)))
    ${set('vb', get('v'))}
    ${set('blk', '(i32.const 0)')}
    (loop $blocks
      ${per((u) => set(`q${u}`, zero))}
      ${set('wp', get('w'))}
      ${set('i', '(i32.const 0)')}
      (loop $rowsI
        ${clearY}
        ${set('rp', get('rows'))}
        ${set('rend', `(i32.add ${get('rows')} (i32.shl (i32.add ${get('i')} (i32.const 1)) (i32.const 2)))`)}
        ${cols}
        ${per((u) => set(`q${u}`, add(get(`q${u}`), add(mul(get(`yr${u}`), get(`yr${u}`)), mul(get(`yi${u}`), get(`yi${u}`))))))}
        ${set('i', `(i32.add ${get('i')} (i32.const 1))`)}
        (br_if $rowsI (i32.lt_u ${get('i')} ${get('m')})))
      ${per((u) => `(v128.store offset=${16 * u} (i32.add ${get('out')} (i32.mul ${get('blk')} (i32.const ${8 * k}))) ${get(`q${u}`)})`)}
      ${set('vb', `(i32.add ${get('vb')} ${get('bs')})`)}
      ${set('blk', `(i32.add ${get('blk')} (i32.const 1))`)}
      (br_if $blocks (i32.lt_u ${get('blk')} ${get('nb')}))))
  (func (export "conv") (param $w i32) (param $rows i32) (param $m i32) (param $v i32) (param $nb i32) (param $bs i32)
    (param $pw i32) (param $keep f64) (param $scale f64)
    ${common} (local $pp i32) (local $kv v128) (local $sv v128)
    (if (i32.eqz ${get('nb')}) (then (return)))
    (if (i32.eqz ${get('m')}) (then (return)))
    ${set('kv', `(f64x2.splat ${get('keep')})`)}
    ${set('sv', `(f64x2.splat ${get('scale')})`)}
    ${set('vb', get('v'))}
    ${set('pp', get('pw'))}
    ${set('rend', `(i32.add ${get('rows')} (i32.shl ${get('m')} (i32.const 2)))`)}
    ${set('blk', '(i32.const 0)')}
    (loop $blocks
      ${clearY}
      ${set('wp', get('w'))}
      ${set('rp', get('rows'))}
      ${cols}
      ${per((u) => `(v128.store offset=${16 * u} ${get('pp')}
        ${add(mul(get('kv'), `(v128.load offset=${16 * u} ${get('pp')})`),
          mul(get('sv'), add(mul(get(`yr${u}`), get(`yr${u}`)), mul(get(`yi${u}`), get(`yi${u}`)))))})`)}
      ${set('pp', `(i32.add ${get('pp')} (i32.const ${8 * k}))`)}
      ${set('vb', `(i32.add ${get('vb')} ${get('bs')})`)}
      ${set('blk', `(i32.add ${get('blk')} (i32.const 1))`)}
      (br_if $blocks (i32.lt_u ${get('blk')} ${get('nb')}))))
)`;
}

/**
 * The compiled kernel module for block size k, assembled once per thread and cached (each scanner
 * instantiates it with its own memory).
 * @throws (rejects) when this runtime lacks WebAssembly SIMD or the text fails to assemble
 */
export function compileKernels(k: WasmBlockSize): Promise<object> {
  return assembleWat(`nullsteer-fast-k${k}`, () => kernelWat(k));
}

/** A fresh instance (own memory of `bytes`, rounded up to 64 KiB pages) of the kernels for k. */
export function instantiateKernels(k: WasmBlockSize, bytes: number): Promise<WasmKernelExports> {
  return instantiateWat<WasmKernelExports>(`nullsteer-fast-k${k}`, () => kernelWat(k), bytes);
}
