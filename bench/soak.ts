/**
 * `npm run soak [-- --minutes N] [--json] [--workers W]`: the live engine on workload W32 at
 * real-time pace for N minutes (default 1), watching for leaks and stalls. A script, not a test: it
 * prints and asserts nothing.
 *
 * A few seconds of the built-in scene are generated once and replayed on a continuing clock (so the
 * engine sees one unbroken stream), handed over on a timer at the wall-clock rate a live source
 * delivers. Every 5 s it prints RSS, heap used, event-loop delay p50/p99 (beyond the 10 ms sampling
 * interval of monitorEventLoopDelay), engine load and shed step,
 * rows so far; at the end RSS after warm-up (the first 20 % of the run) against the end, the slope
 * after warm-up in MB/min, and "flat" when the growth after warm-up is under 5 %.
 */
import { availableParallelism } from 'node:os';
import { monitorEventLoopDelay } from 'node:perf_hooks';
import { parseArgs } from 'node:util';
import { Engine } from '../server/engine/engine.ts';
import type { Block } from '../shared/types.ts';
import { FS, geometryOf, paramsFor, sceneBlocks, WORKLOADS } from './engine.ts';

const { values } = parseArgs({ options: { minutes: { type: 'string', default: '1' }, json: { type: 'boolean' }, workers: { type: 'string' }, 'sample-s': { type: 'string', default: '5' } } });
const minutes = Number(values.minutes);
if (!(minutes > 0 && minutes <= 24 * 60)) {
  console.error(`--minutes ${values.minutes}: allowed a number in (0, 1440]`);
  process.exit(2);
}
const sampleS = Number(values['sample-s']);
if (!(sampleS >= 0.5 && sampleS <= 600)) {
  console.error(`--sample-s ${values['sample-s']}: allowed a number 0.5–600`);
  process.exit(2);
}
const workers = values.workers ? Number(values.workers) : availableParallelism();
const say = (s: string) => {
  if (!values.json) console.log(s);
};

interface Sample {
  tS: number;
  rssMB: number;
  heapUsedMB: number;
  loopP50Ms: number;
  loopP99Ms: number;
  load: number;
  shedStep: number;
  rows: number;
  hopsSkipped: number;
}

const MB = 1024 * 1024;
const LOOP_RES_MS = 10;
const round = (x: number, d = 2) => Math.round(x * 10 ** d) / 10 ** d;

async function main(): Promise<void> {
  const w = WORKLOADS[1];
  const geometry = await geometryOf(w);
  const unique = sceneBlocks(geometry, 4, 4); // 4 s generated once, replayed
  const frames = unique[0].frames;
  let rows = 0;
  const engine = await Engine.create({ geometry, sampleRateHz: FS, params: paramsFor(w), workers, speedOfSoundMps: 343.2, onRow: () => rows++ });
  // The histogram records each whole sampling interval; the delay is what exceeds it.
  const loop = monitorEventLoopDelay({ resolution: LOOP_RES_MS });
  loop.enable();
  say(`soak: ${w.name} (${geometry.positions.length} mics, ${workers} workers), ${minutes} min at real-time pace, sample every ${sampleS} s`);
  say('   t s   RSS MB  heap MB  loop p50 ms  loop p99 ms  load  shed   rows  skipped');

  const samples: Sample[] = [];
  const durationMs = minutes * 60_000;
  const t0 = performance.now();
  let k = 0; // blocks pushed so far
  let stopped = false;

  const sample = () => {
    const st = engine.status() as { load: number; shed: { step: number }; hopsSkipped: number };
    const mem = process.memoryUsage();
    const s: Sample = {
      tS: round((performance.now() - t0) / 1000, 1),
      rssMB: round(mem.rss / MB, 1),
      heapUsedMB: round(mem.heapUsed / MB, 1),
      loopP50Ms: round(Math.max(0, loop.percentile(50) / 1e6 - LOOP_RES_MS)),
      loopP99Ms: round(Math.max(0, loop.percentile(99) / 1e6 - LOOP_RES_MS)),
      load: round(st.load),
      shedStep: st.shed.step,
      rows,
      hopsSkipped: st.hopsSkipped,
    };
    loop.reset();
    samples.push(s);
    say(
      `${s.tS.toFixed(1).padStart(6)} ${s.rssMB.toFixed(1).padStart(8)} ${s.heapUsedMB.toFixed(1).padStart(8)} ${s.loopP50Ms.toFixed(2).padStart(12)} ${s.loopP99Ms.toFixed(2).padStart(12)} ${s.load.toFixed(2).padStart(5)} ${String(s.shedStep).padStart(5)} ${String(s.rows).padStart(6)} ${String(s.hopsSkipped).padStart(8)}`,
    );
  };

  await new Promise<void>((resolve) => {
    const finish = () => {
      if (stopped) return;
      stopped = true;
      clearInterval(pacer);
      clearInterval(sampler);
      process.off('SIGINT', finish);
      sample();
      resolve();
    };
    // Hand over every block that is due on the wall clock (a live source's pace).
    const pacer = setInterval(() => {
      const elapsed = performance.now() - t0;
      if (elapsed >= durationMs) return finish();
      const due = Math.floor((elapsed / 1000) * (FS / frames));
      for (; k < due; k++) engine.push({ ...(unique[k % unique.length] as Block), sampleIndex: k * frames });
    }, 5);
    const sampler = setInterval(sample, sampleS * 1000);
    process.once('SIGINT', finish);
  });

  loop.disable();
  await engine.close();

  // Warm-up: the first 20 % of the run. Compare the first sample after it with the last.
  const warmEnd = (0.2 * (performance.now() - t0)) / 1000;
  const after = samples.filter((s) => s.tS >= warmEnd);
  const first = after[0] ?? samples[0];
  const last = samples[samples.length - 1];
  let slope = 0;
  if (after.length >= 2) {
    const mt = after.reduce((a, s) => a + s.tS, 0) / after.length;
    const mr = after.reduce((a, s) => a + s.rssMB, 0) / after.length;
    const num = after.reduce((a, s) => a + (s.tS - mt) * (s.rssMB - mr), 0);
    const den = after.reduce((a, s) => a + (s.tS - mt) ** 2, 0);
    slope = den > 0 ? (num / den) * 60 : 0;
  }
  const growth = (last.rssMB - first.rssMB) / first.rssMB;
  const audioS = (k * frames) / FS;
  const summary = {
    workload: w.name,
    mics: geometry.positions.length,
    workers,
    minutes,
    audioS: round(audioS, 1),
    blocks: k,
    rows,
    rowsPerS: round(rows / audioS, 2),
    hopsSkipped: last.hopsSkipped,
    maxShedStep: Math.max(...samples.map((s) => s.shedStep)),
    maxLoadPerSample: Math.max(...samples.map((s) => s.load)),
    loopP99MsMax: Math.max(...samples.map((s) => s.loopP99Ms)),
    rssAfterWarmupMB: first.rssMB,
    rssAfterWarmupAtS: first.tS,
    rssEndMB: last.rssMB,
    rssPeakMB: Math.max(...samples.map((s) => s.rssMB)),
    heapUsedAfterWarmupMB: first.heapUsedMB,
    heapUsedEndMB: last.heapUsedMB,
    rssGrowthPct: round(growth * 100),
    rssSlopeMBPerMin: round(slope),
    flat: growth < 0.05,
    samples,
  };
  if (values.json) {
    console.log(JSON.stringify(summary));
    return;
  }
  say('');
  say(`audio ${summary.audioS} s in ${summary.blocks} blocks, ${rows} rows (${summary.rowsPerS}/s), hops skipped ${summary.hopsSkipped}, max shed step ${summary.maxShedStep}, max event-loop p99 ${summary.loopP99MsMax} ms`);
  say(`RSS after warm-up (t=${first.tS} s) ${first.rssMB} MB → end ${last.rssMB} MB: ${summary.rssGrowthPct >= 0 ? '+' : ''}${summary.rssGrowthPct} %, slope ${summary.rssSlopeMBPerMin} MB/min after warm-up; heap used ${first.heapUsedMB} → ${last.heapUsedMB} MB`);
  say(summary.flat ? 'memory: flat (growth after warm-up < 5 %)' : 'memory: NOT flat (growth after warm-up ≥ 5 %)');
}

await main();
