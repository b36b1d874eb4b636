import { mkdtempSync, mkdirSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { buildApp } from '../../server/http/app.ts';

describe('dashboard file serving', () => {
  it('serves index.html and assets with their types, never a file outside the folder', async () => {
    const dir = mkdtempSync(join(tmpdir(), 'nullsteer-static-'));
    mkdirSync(join(dir, 'dist', 'assets'), { recursive: true });
    writeFileSync(join(dir, 'dist', 'index.html'), '<!doctype html><title>t</title>');
    writeFileSync(join(dir, 'dist', 'assets', 'app.js'), 'console.log(1)');
    writeFileSync(join(dir, 'secret.txt'), 'TOP-SECRET-CONTENT');
    const app = buildApp({ status: () => ({}), staticDir: join(dir, 'dist') + '/' });
    const index = await app.inject({ url: '/' });
    expect(index.statusCode).toBe(200);
    expect(index.headers['content-type']).toBe('text/html; charset=utf-8');
    const js = await app.inject({ url: '/assets/app.js' });
    expect(js.statusCode).toBe(200);
    expect(js.headers['content-type']).toBe('text/javascript; charset=utf-8');
    for (const url of ['/assets/../../secret.txt', '/assets/%2e%2e/%2e%2e/secret.txt', '/assets/nothing.js']) {
      const r = await app.inject({ url });
      expect(r.statusCode, url).toBe(404);
      expect(r.body).not.toContain('TOP-SECRET-CONTENT');
    }
    const missing = buildApp({ status: () => ({}), staticDir: join(dir, 'nothing') });
    const r = await missing.inject({ url: '/' });
    expect(r.statusCode).toBe(503);
    expect(r.body).toMatch(/npm run build:client/);
  });
});
