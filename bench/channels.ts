/**
 * `npm run bench:channels [-- --channels 24,128,1024] [--json]`: how the server fares with large
 * arrays. For each channel count a real server process starts on a planar grid array (2 cm pitch)
 * with the built-in scene and, separately, idle on network ingest; after a warm-up it reports the
 * time to start, `GET /api/status` answer times (20 calls, 100 ms apart: median and worst), the
 * process's resident memory (now and peak), the plan memory, and whether the scene kept real time
 * (blocks skipped, load shedding). A script, not a test: it prints and asserts nothing.
 */
import { spawn } from 'node:child_process';
import { mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { parseArgs } from 'node:util';

const BIN = fileURLToPath(new URL('../bin/nullsteer.mjs', import.meta.url));
const { values } = parseArgs({ options: { channels: { type: 'string' }, json: { type: 'boolean' }, warmup: { type: 'string' } } });
const counts = (values.channels ?? '24,128,256,512,768,1024').split(',').map(Number);
const warmupMs = Number(values.warmup ?? 5) * 1000;
const dir = mkdtempSync(join(tmpdir(), 'nullsteer-bench-channels-'));

/** A square-ish planar grid of M microphones, 2 cm apart, centred on the origin. */
function gridArray(m: number): string {
  const n = Math.ceil(Math.sqrt(m));
  const positions = Array.from({ length: m }, (_, i) => [((i % n) - (n - 1) / 2) * 0.02, (Math.floor(i / n) - (n - 1) / 2) * 0.02, 0]);
  const file = join(dir, `grid-${m}.json`);
  writeFileSync(file, JSON.stringify({ name: `bench grid ${m}`, positions }));
  return file;
}

interface Result {
  channels: number;
  source: 'simulator' | 'network';
  start_s: number;
  status_ms_p50: number;
  status_ms_max: number;
  rss_mb: number;
  rss_mb_peak: number;
  plan_mib: number;
  shed_step: number;
  skipped_s: number;
  error?: string;
}

const memory = (pid: number) => {
  const t = readFileSync(`/proc/${pid}/status`, 'utf8');
  const kb = (k: string) => Number(new RegExp(`${k}:\\s+(\\d+)`).exec(t)?.[1] ?? NaN);
  return { rss: kb('VmRSS') / 1024, peak: kb('VmHWM') / 1024 };
};

async function run(m: number, source: 'simulator' | 'network'): Promise<Result> {
  const args = ['serve', '--http-port', '0', '--udp-port', '0', '--source', source, '--array', gridArray(m), '--set', `data.dir=${join(dir, 'data')}`, '--set', 'engine.maxPlanMiB=8192'];
  const t0 = performance.now();
  const p = spawn(process.execPath, [BIN, ...args], { stdio: ['ignore', 'pipe', 'pipe'] });
  let url: string | null = null;
  let err = '';
  p.stderr.on('data', (d) => (err += d));
  p.stdout.on('data', (d) => {
    const hit = /listening on (http:\/\/\S+)/.exec(String(d));
    if (hit) url = hit[1];
  });
  const base: Result = { channels: m, source, start_s: NaN, status_ms_p50: NaN, status_ms_max: NaN, rss_mb: NaN, rss_mb_peak: NaN, plan_mib: NaN, shed_step: NaN, skipped_s: NaN };
  try {
    while (url === null && p.exitCode === null && performance.now() - t0 < 120_000) await new Promise((r) => setTimeout(r, 50));
    if (url === null) return { ...base, error: err.trim().split('\n').slice(-2).join(' ') || 'did not start' };
    const startS = (performance.now() - t0) / 1000;
    await new Promise((r) => setTimeout(r, warmupMs));
    const times: number[] = [];
    let st: any = null;
    for (let k = 0; k < 20; k++) {
      const a = performance.now();
      st = await (await fetch(`${url}/api/status`)).json();
      times.push(performance.now() - a);
      await new Promise((r) => setTimeout(r, 100));
    }
    times.sort((a, b) => a - b);
    const mem = memory(p.pid!);
    const stream = st.streams[0];
    return {
      ...base,
      start_s: +startS.toFixed(2),
      status_ms_p50: +times[10].toFixed(1),
      status_ms_max: +times[19].toFixed(1),
      rss_mb: +mem.rss.toFixed(0),
      rss_mb_peak: +mem.peak.toFixed(0),
      plan_mib: st.engine.planMiB,
      shed_step: st.engine.shed.step,
      skipped_s: stream ? +((stream.skippedSamples ?? 0) / 48000).toFixed(1) : 0,
    };
  } finally {
    p.kill('SIGTERM');
    await new Promise((r) => (p.exitCode !== null ? r(null) : p.once('exit', r)));
  }
}

const results: Result[] = [];
for (const m of counts) for (const source of ['network', 'simulator'] as const) results.push(await run(m, source));
if (values.json) console.log(JSON.stringify(results, null, 2));
else {
  console.log(`channel counts (${(await import('node:os')).cpus()[0]?.model ?? 'cpu'}, ${(await import('node:os')).availableParallelism()} cores, Node ${process.version}); warm-up ${warmupMs / 1000} s`);
  console.log('M     source     start s  status ms p50/max  RSS MB (peak)  plan MiB  shed  scene skipped s');
  for (const r of results) {
    if (r.error) console.log(`${String(r.channels).padEnd(5)} ${r.source.padEnd(10)} ${r.error}`);
    else console.log(`${String(r.channels).padEnd(5)} ${r.source.padEnd(10)} ${r.start_s.toFixed(2).padStart(7)}  ${`${r.status_ms_p50} / ${r.status_ms_max}`.padStart(17)}  ${`${r.rss_mb} (${r.rss_mb_peak})`.padStart(13)}  ${String(r.plan_mib).padStart(8)}  ${String(r.shed_step).padStart(4)}  ${r.source === 'simulator' ? r.skipped_s : '—'}`);
  }
}
