/**
 * Assembling and instantiating the project's hand-written WebAssembly (WAT text generated per
 * plan-time size) with the wabt npm package (a WebAssembly build of the WebAssembly Binary
 * Toolkit). One compiled module per text name and thread, cached; each user instantiates it with
 * its own memory.
 */
import wabtInit from 'wabt';

/**
 * The slice of the WebAssembly JS API used here (WebAssembly JavaScript Interface spec). Declared
 * locally because the project's TypeScript libs (ES2022 + @types/node, no DOM) do not type it.
 */
export interface WasmMemory {
  readonly buffer: ArrayBuffer;
  grow(deltaPages: number): number;
}
type WasmModule = object;
interface WasmApi {
  compile(bytes: Uint8Array): Promise<WasmModule>;
  instantiate(module: WasmModule, imports: object): Promise<{ exports: object }>;
}
const wasmApi = (globalThis as unknown as { WebAssembly?: WasmApi }).WebAssembly;

const compiled = new Map<string, Promise<WasmModule>>();

/**
 * The compiled module of `wat` (SIMD enabled), assembled once per `name` in this thread.
 * @throws (rejects) when this runtime lacks WebAssembly SIMD or the text fails to assemble
 */
export function assembleWat(name: string, wat: () => string): Promise<WasmModule> {
  let p = compiled.get(name);
  if (p === undefined) {
    p = (async () => {
      if (wasmApi === undefined) throw new Error('WebAssembly is not available in this runtime');
      const wabt = await wabtInit();
      const mod = wabt.parseWat(`${name}.wat`, wat(), { simd: true });
      try {
        mod.validate();
        const { buffer } = mod.toBinary({});
        return await wasmApi.compile(buffer);
      } finally {
        mod.destroy();
      }
    })();
    compiled.set(name, p);
    p.catch(() => compiled.delete(name));
  }
  return p;
}

/** A fresh instance of the module `name`, its exported memory grown to hold at least `bytes`. */
export async function instantiateWat<E extends { memory: WasmMemory }>(name: string, wat: () => string, bytes: number): Promise<E> {
  const module = await assembleWat(name, wat);
  const instance = await (wasmApi as WasmApi).instantiate(module, {});
  const exp = instance.exports as unknown as E;
  const pages = Math.ceil(bytes / 65536);
  const have = exp.memory.buffer.byteLength / 65536;
  if (pages > have) exp.memory.grow(pages - have);
  return exp;
}
