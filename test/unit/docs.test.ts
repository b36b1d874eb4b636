/** Checks that generated documentation is up to date and the README carries what it must. */
import { readdirSync, readFileSync } from 'node:fs';
import semver from 'semver';
import { describe, expect, it } from 'vitest';
import { configReference } from '../../scripts/config-reference.ts';
import { FRAME_REJECT_REASONS } from '../../shared/frame.ts';
import { STREAM_REJECT_REASONS } from '../../server/ingest/ingest-hub.ts';

const readme = readFileSync(new URL('../../README.md', import.meta.url), 'utf8');
const wire = readFileSync(new URL('../../docs/wire-format.md', import.meta.url), 'utf8');

describe('documentation', () => {
  it('README holds the configuration reference exactly as generated from the schema', () => {
    expect(readme).toContain(configReference());
  });

  it('README opens with the job and shows the two commands and the cautions', () => {
    const firstParagraph = readme.split('\n\n')[1];
    expect(firstParagraph).toMatch(/engineers/);
    expect(readme).toContain('npm start');
    expect(readme).toContain('npm test');
    expect(readme).toMatch(/Recording people is regulated/);
    expect(readme).toMatch(/Steered audio can be loud/);
  });

  it('the README screenshot shows every panel the dashboard has (regenerate with npm run screenshot)', () => {
    const dir = new URL('../../client/src/components/', import.meta.url);
    const panels = readdirSync(dir)
      .filter((f) => f.endsWith('.svelte'))
      .flatMap((f) => [...readFileSync(new URL(f, dir), 'utf8').matchAll(/<section class="panel[^"]*"[^>]*data-testid="([^"]+)"/g)].map((m) => m[1]))
      .sort();
    const shown = JSON.parse(readFileSync(new URL('../../docs/dashboard-panels.json', import.meta.url), 'utf8')).panels;
    expect(panels.length).toBeGreaterThan(5);
    expect(shown).toEqual(panels);
  });

  it('the wire-format document names every reject reason the server counts', () => {
    for (const r of [...FRAME_REJECT_REASONS, ...STREAM_REJECT_REASONS, 'not_binary', 'too_large']) expect(wire).toContain(`\`${r}\``);
  });

  it('every locked dependency supports the Node.js version package.json and the README state (no engine warning on npm ci)', () => {
    const pkg = JSON.parse(readFileSync(new URL('../../package.json', import.meta.url), 'utf8')) as { engines: { node: string } };
    const lock = JSON.parse(readFileSync(new URL('../../package-lock.json', import.meta.url), 'utf8')) as { packages: Record<string, { engines?: { node?: string } }> };
    const least = semver.minVersion(pkg.engines.node)!.version;
    expect(least).toBe('20.19.0');
    expect(readme).toContain(`Node.js ${least.replace(/\.0$/, '')} or newer`);
    const unmet = Object.entries(lock.packages).flatMap(([name, p]) => (p.engines?.node && !semver.satisfies(least, p.engines.node) ? [`${name} needs node ${p.engines.node}`] : []));
    expect(unmet).toEqual([]);
  });
});
