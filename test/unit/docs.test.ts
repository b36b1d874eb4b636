/** Checks that generated documentation is up to date and the README carries what it must. */
import { readFileSync } from 'node:fs';
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

  it('the wire-format document names every reject reason the server counts', () => {
    for (const r of [...FRAME_REJECT_REASONS, ...STREAM_REJECT_REASONS, 'not_binary', 'too_large']) expect(wire).toContain(`\`${r}\``);
  });
});
