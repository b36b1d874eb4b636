/** Start a real service on free loopback ports for integration tests. */
import { mkdtempSync } from 'node:fs';
import WebSocket from 'ws';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { loadConfig } from '../../server/config/load.ts';
import { startService, type Service, type ServiceOptions } from '../../server/service.ts';
import type { Block } from '../../shared/types.ts';

export const FIXTURES = fileURLToPath(new URL('../fixtures/', import.meta.url));

export async function startTestService(layer: Record<string, unknown> = {}, opts: ServiceOptions = {}): Promise<Service> {
  const loaded = await loadConfig({
    env: {},
    layers: [
      {
        server: { host: '127.0.0.1', httpPort: 0 },
        source: { kind: 'network' },
        array: { file: `${FIXTURES}arrays/square-4.json` },
        ingest: { udp: { port: 0 } },
        // Most tests send bursts shorter than the 100 ms a stream needs to become eligible by
        // default; the tests of stream selection (input-select.test.ts) restore it.
        input: { eligibleAfterMs: 0 },
        // Journal and presets in a fresh folder per service unless the test names one.
        data: { dir: mkdtempSync(join(tmpdir(), 'nullsteer-data-')) },
      },
      layer,
    ],
  });
  return startService(loaded, opts);
}

/** Collect every block the service publishes. */
export function collectBlocks(svc: Service): Block[] {
  const blocks: Block[] = [];
  svc.onBlock((b) => blocks.push(b));
  return blocks;
}

export async function getStatus(svc: Service): Promise<any> {
  const res = await fetch(`${svc.url}/api/status`);
  if (res.status !== 200) throw new Error(`status ${res.status}`);
  return res.json();
}

export const sleep = (ms: number) => new Promise<void>((r) => setTimeout(r, ms));

/** Poll until `pred` holds or `ms` pass. */
export async function waitFor(pred: () => boolean | Promise<boolean>, ms = 5000, what = 'condition'): Promise<void> {
  const until = Date.now() + ms;
  while (Date.now() < until) {
    if (await pred()) return;
    await sleep(10);
  }
  throw new Error(`timed out waiting for ${what}`);
}

/**
 * Open a WebSocket to `url` with these headers: 'open' (then closed at once), or the refused
 * upgrade's HTTP status and JSON body (null when it had none).
 */
export function tryUpgrade(url: string, headers: Record<string, string> = {}): Promise<'open' | { status: number; json: any }> {
  const ws = new WebSocket(url, { headers });
  ws.on('error', () => undefined);
  return new Promise((resolve) => {
    ws.on('open', () => {
      ws.terminate();
      resolve('open');
    });
    ws.on('unexpected-response', (req, res) => {
      let text = '';
      res.setEncoding('utf8');
      res.on('data', (d) => (text += d));
      res.on('end', () => {
        req.destroy();
        resolve({ status: res.statusCode ?? 0, json: text ? JSON.parse(text) : null });
      });
    });
  });
}
