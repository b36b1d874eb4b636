/**
 * `npm run screenshot`: starts the server on the built-in scene, opens the dashboard in Debian's
 * headless chromium, lets it run a few seconds with one beam steered, and writes docs/dashboard.png
 * (shown in the README; the whole page, every panel) and docs/dashboard-panels.json, the panels it
 * shows: test/unit/docs.test.ts fails when a panel exists that the screenshot does not show.
 */
import { writeFileSync } from 'node:fs';
import { fileURLToPath } from 'node:url';
import { chromium } from 'playwright-core';
import { loadConfig } from '../server/config/load.ts';
import { startService } from '../server/service.ts';

const out = fileURLToPath(new URL('../docs/dashboard.png', import.meta.url));
const manifest = fileURLToPath(new URL('../docs/dashboard-panels.json', import.meta.url));
const svc = await startService(await loadConfig({ env: {}, layers: [{ server: { httpPort: 0 }, processing: { bandLowHz: 1000 } }] }));
const browser = await chromium.launch({
  executablePath: '/usr/bin/chromium',
  args: ['--headless', '--no-sandbox', '--disable-gpu', '--disable-quic', '--no-first-run', '--disable-background-networking', '--disable-component-update', '--disable-sync'],
});
try {
  // Tall enough for the side column's panels to be on the page, not behind its scroll bar.
  const page = await browser.newPage({ viewport: { width: 1280, height: 2900 } });
  await page.goto(`${svc.url}/`);
  await fetch(`${svc.url}/api/beams`, { method: 'POST', headers: { 'content-type': 'application/json' }, body: JSON.stringify({ azimuthDeg: 35 }) });
  await page.waitForTimeout(8000);
  await page.screenshot({ path: out, fullPage: true });
  // The panels in the picture: on the page and not cut off by the window.
  const panels = await page.$$eval('section.panel[data-testid]', (els) =>
    els
      .filter((e) => {
        const r = e.getBoundingClientRect();
        return r.height > 0 && r.top >= 0 && r.bottom <= window.innerHeight + 1;
      })
      .map((e) => e.getAttribute('data-testid'))
      .sort(),
  );
  writeFileSync(manifest, `${JSON.stringify({ capturedAt: new Date().toISOString(), panels }, null, 2)}\n`);
  console.log(`wrote ${out} and ${manifest} (${panels.length} panels)`);
} finally {
  await browser.close();
  await svc.close();
}
