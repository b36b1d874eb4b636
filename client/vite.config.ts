/**
 * The dashboard build: `npx vite build --config client/vite.config.ts` writes client/dist, which the
 * server serves at `/`. `npx vite --config client/vite.config.ts` runs a dev server that forwards
 * `/api` (REST and the live WebSocket) to a running nullsteer (`NULLSTEER_URL`, default
 * http://127.0.0.1:8750).
 */
import { fileURLToPath } from 'node:url';
import { defineConfig } from 'vite';
import { svelte } from '@sveltejs/vite-plugin-svelte';

const root = fileURLToPath(new URL('.', import.meta.url));
const target = process.env.NULLSTEER_URL ?? 'http://127.0.0.1:8750';
const proxy = { '/api': { target, ws: true, changeOrigin: false } };

export default defineConfig({
  root,
  base: './',
  plugins: [svelte({ configFile: false })],
  build: {
    outDir: fileURLToPath(new URL('./dist', import.meta.url)),
    emptyOutDir: true,
    target: 'es2022',
    // One small app: a single chunk is simplest to serve and cache.
    chunkSizeWarningLimit: 400,
    // Two pages: the dashboard (index.html) and the site page (site.html, served by `nullsteer site`).
    rollupOptions: { input: { main: fileURLToPath(new URL('./index.html', import.meta.url)), site: fileURLToPath(new URL('./site.html', import.meta.url)) } },
  },
  server: { proxy, port: 5173, strictPort: false },
  preview: { proxy },
});
