/**
 * `npm run screenshot`: starts the server on the built-in scene, opens the dashboard in Debian's
 * headless chromium, lets it run a few seconds with one beam steered, and writes docs/dashboard.png
 * (shown in the README).
 */
import { fileURLToPath } from 'node:url';
import { chromium } from 'playwright-core';
import { loadConfig } from '../server/config/load.ts';
import { startService } from '../server/service.ts';

const out = fileURLToPath(new URL('../docs/dashboard.png', import.meta.url));
const svc = await startService(await loadConfig({ env: {}, layers: [{ server: { httpPort: 0 }, processing: { bandLowHz: 1000 } }] }));
const browser = await chromium.launch({
  executablePath: '/usr/bin/chromium',
  args: ['--headless', '--no-sandbox', '--disable-gpu', '--disable-quic', '--no-first-run', '--disable-background-networking', '--disable-component-update', '--disable-sync'],
});
try {
  const page = await browser.newPage({ viewport: { width: 1280, height: 800 } });
  await page.goto(`${svc.url}/`);
  await fetch(`${svc.url}/api/beams`, { method: 'POST', headers: { 'content-type': 'application/json' }, body: JSON.stringify({ azimuthDeg: 35 }) });
  await page.waitForTimeout(8000);
  await page.screenshot({ path: out });
  console.log(`wrote ${out}`);
} finally {
  await browser.close();
  await svc.close();
}
