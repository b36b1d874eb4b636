/**
 * Single-precision twins of the WebAssembly SIMD kernels of wasm-kernels.ts: f32x4, four directions
 * per vector, so one instruction does twice the arithmetic of the f64x2 kernels. Inputs (W or
 * conj(x), and the block-planar steering copy) are float32; the per-row sums |y|² are widened to
 * float64 (f64x2.promote_low_f32x4) before they are added up or folded into the recursion, so only
 * the length-≤M inner products are rounded to single precision. The error this costs, and when the
 * callers fall back to the float64 kernels, is derived in mvdr-scan.ts (float32RelativeBound)
 * and conventional-tracker.ts (TrackerPrecision). Instruction semantics: WebAssembly Core Specification 2.0, §4.4.3.
 *
 * Layout (planar-steering.ts, float32 edition `fillPlanar32`): a block of K directions is an
 * M×2K slab of float32, channel m holding K real parts then K imaginary parts; W packed by rows,
 * interleaved complex float32 (8 bytes per entry). Exports, pointers are byte offsets:
 *  - solve(l, rows, m, v, blocks, blockBytes, out, ys): the MVDR form without the inverse factor —
 *      forward substitution L y = v_d for the K directions of a block at once (the triangular solve
 *      blocked over directions), out[d] (float64) = ‖y‖² = vᴴ(L Lᴴ)⁻¹v. L packed by rows,
 *      interleaved complex float32, its diagonal slots holding 1/L_ii (real); ys: scratch of m·8K
 *      bytes for the block's y (same slab layout as the table, row i at i·8K)
 *  - conv(w, rows, m, v, blocks, blockBytes, p, keep, scale): y_d = Σ_{j<m} w_j v_d[row j],
 *      p[d] (float64) ← keep·p[d] + scale·|y_d|²
 *  - quad(r, rows, m, v, blocks, blockBytes, out): the conventional form from the covariance itself,
 *      out[d] (float64) = v_dᴴ R v_d = Σ_i (R_ii |v_i|² + 2 Re(conj(v_i) Σ_{j<i} R_ij v_j)), R's lower
 *      triangle packed by rows like L (diagonal slots: R_ii, real); each row's term widened to float64
 * rows: m i32 byte offsets inside a block of the channel used as row j (active[j]·8K).
 */
import { instantiateWat, type WasmMemory } from './wasm-assemble.ts';

/** Directions per block of the single-precision kernels (K/4 f32x4 vectors per part). */
export const WASM_F32_BLOCK_SIZES = [4, 8, 12] as const;
export type WasmF32BlockSize = (typeof WASM_F32_BLOCK_SIZES)[number];

export interface WasmF32KernelExports {
  memory: WasmMemory;
  solve(l: number, rows: number, m: number, v: number, blocks: number, blockBytes: number, out: number, ys: number): void;
  quad(r: number, rows: number, m: number, v: number, blocks: number, blockBytes: number, out: number): void;
  conv(
    w: number, rows: number, m: number, v: number, blocks: number, blockBytes: number,
    p: number, keep: number, scale: number,
  ): void;
}

const zero = '(v128.const f32x4 0 0 0 0)';
const zero64 = '(v128.const f64x2 0 0)';
const get = (n: string) => `(local.get $${n})`;
const set = (n: string, e: string) => `(local.set $${n} ${e})`;
const mul = (a: string, b: string) => `(f32x4.mul ${a} ${b})`;
const add = (a: string, b: string) => `(f32x4.add ${a} ${b})`;
const sub = (a: string, b: string) => `(f32x4.sub ${a} ${b})`;
const lo64 = (e: string) => `(f64x2.promote_low_f32x4 ${e})`;
/** The high two float32 lanes widened: moved down by a byte shuffle first. */
const hi64 = (n: string) => `(f64x2.promote_low_f32x4 (i8x16.shuffle 8 9 10 11 12 13 14 15 0 1 2 3 4 5 6 7 ${get(n)} ${get(n)}))`;

function macStep(vectors: number, k: number): string {
  const lines: string[] = [];
  for (let u = 0; u < vectors; u++) {
    lines.push(set(`a${u}`, `(v128.load offset=${16 * u} ${get('p')})`));
    lines.push(set(`b${u}`, `(v128.load offset=${4 * k + 16 * u} ${get('p')})`));
  }
  for (let u = 0; u < vectors; u++) {
    lines.push(set(`yr${u}`, add(get(`yr${u}`), sub(mul(get('wr'), get(`a${u}`)), mul(get('wi'), get(`b${u}`))))));
    lines.push(set(`yi${u}`, add(get(`yi${u}`), add(mul(get('wr'), get(`b${u}`)), mul(get('wi'), get(`a${u}`))))));
  }
  return lines.join('\n');
}

/** The WAT text of the single-precision kernels for block size k. */
export function kernelWatF32(k: WasmF32BlockSize): string {
  if (!WASM_F32_BLOCK_SIZES.includes(k)) throw new RangeError(`f32 block size must be one of ${WASM_F32_BLOCK_SIZES.join(', ')}, got ${k}`);
  const n = k / 4;
  const vecLocals = (names: string[]) => names.map((x) => `(local $${x} v128)`).join(' ');
  const per = (f: (u: number) => string) => Array.from({ length: n }, (_, u) => f(u)).join('\n');
  const accLocals = vecLocals(per((u) => `yr${u} yi${u} a${u} b${u} t${u}`).split(/\s+/));
  const common = `(local $blk i32) (local $vb i32) (local $wp i32) (local $rp i32) (local $rend i32) (local $p i32)
    (local $wr v128) (local $wi v128) ${accLocals}`;
  const clearY = per((u) => `${set(`yr${u}`, zero)} ${set(`yi${u}`, zero)}`);
  const loadW = `${set('wr', `(v128.load32_splat ${get('wp')})`)} ${set('wi', `(v128.load32_splat offset=4 ${get('wp')})`)}
        ${set('p', `(i32.add ${get('vb')} (i32.load ${get('rp')}))`)}`;
  const cols = `(loop $cols
          ${loadW}
          ${macStep(n, k)}
          ${set('wp', `(i32.add ${get('wp')} (i32.const 8))`)}
          ${set('rp', `(i32.add ${get('rp')} (i32.const 4))`)}
          (br_if $cols (i32.lt_u ${get('rp')} ${get('rend')})))`;
  const power = per((u) => set(`t${u}`, add(mul(get(`yr${u}`), get(`yr${u}`)), mul(get(`yi${u}`), get(`yi${u}`)))));
  return `(module
  (memory (export "memory") 1)
  (func (export "solve") (param $l i32) (param $rows i32) (param $m i32) (param $v i32) (param $nb i32) (param $bs i32) (param $out i32) (param $ys i32)
    ${common} (local $i i32) (local $ob i32) (local $yp i32) (local $d v128) ${vecLocals(per((u) => `ql${u} qh${u}`).split(/\s+/))}
    (if (i32.eqz ${get('nb')}) (then (return)))
    (if (i32.eqz ${get('m')}) (then (return)))
    ${set('vb', get('v'))}
    ${set('ob', get('out'))}
    ${set('blk', '(i32.const 0)')}
    (loop $blocks
      ${per((u) => `${set(`ql${u}`, zero64)} ${set(`qh${u}`, zero64)}`)}
      ${set('wp', get('l'))}
      ${set('yp', get('ys'))}
      ${set('i', '(i32.const 0)')}
      (loop $rowsI
        ${clearY}
        ;; acc = Σ_{j<i} L_ij y_j, y_j from the scratch (same slab layout as the table)
        ${set('p', get('ys'))}
        (if (i32.lt_u ${get('p')} ${get('yp')}) (then
          (loop $cols
            ${set('wr', `(v128.load32_splat ${get('wp')})`)} ${set('wi', `(v128.load32_splat offset=4 ${get('wp')})`)}
            ${macStep(n, k)}
            ${set('wp', `(i32.add ${get('wp')} (i32.const 8))`)}
            ${set('p', `(i32.add ${get('p')} (i32.const ${8 * k}))`)}
            (br_if $cols (i32.lt_u ${get('p')} ${get('yp')})))))
        ;; y_i = (v_i − acc) / L_ii (the diagonal slot holds 1/L_ii)
        ${set('d', `(v128.load32_splat ${get('wp')})`)}
        ${set('wp', `(i32.add ${get('wp')} (i32.const 8))`)}
        ${set('p', `(i32.add ${get('vb')} (i32.load (i32.add ${get('rows')} (i32.shl ${get('i')} (i32.const 2)))))`)}
        ${per((u) => `${set(`yr${u}`, mul(sub(`(v128.load offset=${16 * u} ${get('p')})`, get(`yr${u}`)), get('d')))}
        ${set(`yi${u}`, mul(sub(`(v128.load offset=${4 * k + 16 * u} ${get('p')})`, get(`yi${u}`)), get('d')))}
        (v128.store offset=${16 * u} ${get('yp')} ${get(`yr${u}`)}) (v128.store offset=${4 * k + 16 * u} ${get('yp')} ${get(`yi${u}`)})`)}
        ${power}
        ${per((u) => `${set(`ql${u}`, `(f64x2.add ${get(`ql${u}`)} ${lo64(get(`t${u}`))})`)} ${set(`qh${u}`, `(f64x2.add ${get(`qh${u}`)} ${hi64(`t${u}`)})`)}`)}
        ${set('yp', `(i32.add ${get('yp')} (i32.const ${8 * k}))`)}
        ${set('i', `(i32.add ${get('i')} (i32.const 1))`)}
        (br_if $rowsI (i32.lt_u ${get('i')} ${get('m')})))
      ${per((u) => `(v128.store offset=${32 * u} ${get('ob')} ${get(`ql${u}`)}) (v128.store offset=${32 * u + 16} ${get('ob')} ${get(`qh${u}`)})`)}
      ${set('ob', `(i32.add ${get('ob')} (i32.const ${8 * k}))`)}
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
      ${power}
      ${per((u) => `(v128.store offset=${32 * u} ${get('pp')}
        (f64x2.add (f64x2.mul ${get('kv')} (v128.load offset=${32 * u} ${get('pp')})) (f64x2.mul ${get('sv')} ${lo64(get(`t${u}`))})))
      (v128.store offset=${32 * u + 16} ${get('pp')}
        (f64x2.add (f64x2.mul ${get('kv')} (v128.load offset=${32 * u + 16} ${get('pp')})) (f64x2.mul ${get('sv')} ${hi64(`t${u}`)})))`)}
      ${set('pp', `(i32.add ${get('pp')} (i32.const ${8 * k}))`)}
      ${set('vb', `(i32.add ${get('vb')} ${get('bs')})`)}
      ${set('blk', `(i32.add ${get('blk')} (i32.const 1))`)}
      (br_if $blocks (i32.lt_u ${get('blk')} ${get('nb')}))))
  (func (export "quad") (param $r i32) (param $rows i32) (param $m i32) (param $v i32) (param $nb i32) (param $bs i32) (param $out i32)
    ${common} (local $i i32) (local $ob i32) (local $ie i32) (local $d v128) ${vecLocals(per((u) => `ql${u} qh${u}`).split(/\s+/))}
    (if (i32.eqz ${get('nb')}) (then (return)))
    (if (i32.eqz ${get('m')}) (then (return)))
    ${set('vb', get('v'))}
    ${set('ob', get('out'))}
    ${set('blk', '(i32.const 0)')}
    (loop $blocks
      ${per((u) => `${set(`ql${u}`, zero64)} ${set(`qh${u}`, zero64)}`)}
      ${set('wp', get('r'))}
      ${set('i', '(i32.const 0)')}
      (loop $rowsI
        ${clearY}
        ;; y = Σ_{j<i} R_ij v_j
        ${set('rp', get('rows'))}
        ${set('ie', `(i32.add ${get('rows')} (i32.shl ${get('i')} (i32.const 2)))`)}
        (if (i32.lt_u ${get('rp')} ${get('ie')}) (then
          (loop $cols
            ${set('wr', `(v128.load32_splat ${get('wp')})`)} ${set('wi', `(v128.load32_splat offset=4 ${get('wp')})`)}
            ${set('p', `(i32.add ${get('vb')} (i32.load ${get('rp')}))`)}
            ${macStep(n, k)}
            ${set('wp', `(i32.add ${get('wp')} (i32.const 8))`)}
            ${set('rp', `(i32.add ${get('rp')} (i32.const 4))`)}
            (br_if $cols (i32.lt_u ${get('rp')} ${get('ie')})))))
        ;; t = R_ii |v_i|² + 2 Re(conj(v_i) y)
        ${set('d', `(v128.load32_splat ${get('wp')})`)}
        ${set('wp', `(i32.add ${get('wp')} (i32.const 8))`)}
        ${set('p', `(i32.add ${get('vb')} (i32.load ${get('ie')}))`)}
        ${per((u) => `${set(`a${u}`, `(v128.load offset=${16 * u} ${get('p')})`)} ${set(`b${u}`, `(v128.load offset=${4 * k + 16 * u} ${get('p')})`)}
        ${set(`t${u}`, add(mul(get('d'), add(mul(get(`a${u}`), get(`a${u}`)), mul(get(`b${u}`), get(`b${u}`)))),
          mul('(v128.const f32x4 2 2 2 2)', add(mul(get(`a${u}`), get(`yr${u}`)), mul(get(`b${u}`), get(`yi${u}`))))))}`)}
        ${per((u) => `${set(`ql${u}`, `(f64x2.add ${get(`ql${u}`)} ${lo64(get(`t${u}`))})`)} ${set(`qh${u}`, `(f64x2.add ${get(`qh${u}`)} ${hi64(`t${u}`)})`)}`)}
        ${set('i', `(i32.add ${get('i')} (i32.const 1))`)}
        (br_if $rowsI (i32.lt_u ${get('i')} ${get('m')})))
      ${per((u) => `(v128.store offset=${32 * u} ${get('ob')} ${get(`ql${u}`)}) (v128.store offset=${32 * u + 16} ${get('ob')} ${get(`qh${u}`)})`)}
      ${set('ob', `(i32.add ${get('ob')} (i32.const ${8 * k}))`)}
      ${set('vb', `(i32.add ${get('vb')} ${get('bs')})`)}
      ${set('blk', `(i32.add ${get('blk')} (i32.const 1))`)}
      (br_if $blocks (i32.lt_u ${get('blk')} ${get('nb')}))))
)`;
}

/** A fresh instance (own memory of at least `bytes`) of the single-precision kernels for k. */
export function instantiateKernelsF32(k: WasmF32BlockSize, bytes: number): Promise<WasmF32KernelExports> {
  return instantiateWat<WasmF32KernelExports>(`nullsteer-fast-f32-k${k}`, () => kernelWatF32(k), bytes);
}
