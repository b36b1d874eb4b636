/**
 * The browser for the end-to-end tests: Debian's chromium driven by playwright-core, headless,
 * never a downloaded browser. In CI a missing browser or client build is an error, not a skip.
 */
import { existsSync } from 'node:fs';
import { chromium, type Browser, type Page } from 'playwright-core';
import { CLIENT_DIST } from '../../server/service.ts';

export const CHROMIUM = '/usr/bin/chromium';
const FLAGS = ['--headless', '--no-sandbox', '--disable-gpu', '--disable-quic', '--no-first-run', '--disable-background-networking', '--disable-component-update', '--disable-sync'];

/** Chromium and the built dashboard are both there. */
export const browserAvailable = existsSync(CHROMIUM) && existsSync(`${CLIENT_DIST}index.html`);
if (!browserAvailable && process.env.CI) throw new Error(`e2e needs ${CHROMIUM} and a built client (${CLIENT_DIST}); .ci/run installs both`);

/** @param extraArgs more chromium flags for one test (e.g. the autoplay policy of the listening test) */
export function launchBrowser(extraArgs: string[] = []): Promise<Browser> {
  return chromium.launch({ executablePath: CHROMIUM, args: [...FLAGS, ...extraArgs] });
}

/**
 * A new page on the dashboard at `url` (the server's base URL); the page's console errors and
 * uncaught errors are collected in `problems`, which the tests expect to stay empty.
 */
export async function openDashboard(browser: Browser, url: string, problems: string[], viewport = { width: 1280, height: 900 }): Promise<Page> {
  const page = await browser.newPage({ viewport });
  page.on('console', (m) => {
    if (m.type() === 'error') problems.push(`console: ${m.text()}`);
  });
  page.on('pageerror', (e) => problems.push(`page: ${e.message}`));
  await page.goto(`${url}/`);
  return page;
}
