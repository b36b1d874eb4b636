/**
 * `npm run bench [-- --workload W32] [--json] [--quick]`: the project's benchmark. A script, not a
 * test: it prints medians and ratios and asserts nothing. `--ingest` runs only the ingest benches
 * (with `--background N`: N busy processes beside the server, standing in for other work), the
 * capture source's throughput among them.
 *
 * Per workload of ../shared/DESIGN.md §4: the full live engine offline as fast as it goes (rtf,
 * cpu_rtf, one pooled MVDR spectrum update), then paced in real time (row latency), peak RSS; for
 * W32 the largest ring that still runs in real time; and the numpy peer (bench/numpy_peer.py) on the
 * same signal with the ratios ours/numpy. Without --workload it also runs the ingest, simulator and
 * single-thread DSP kernel benches.
 */
import { mkdtempSync } from 'node:fs';
import { availableParallelism, tmpdir } from 'node:os';
import { join } from 'node:path';
import { parseArgs } from 'node:util';
import { PROJECT_CONFIG_DIR } from '../server/config/load.ts';
import { benchW32Spectrum } from './dsp.ts';
import { FFT, FS, geometryOf, maxRealtimeMics, paramsFor, ringGeometry, runOffline, runPaced, sceneBlocks, WORKLOADS, type Workload } from './engine.ts';
import { benchCapture, type CaptureBenchResult } from './capture.ts';
import { benchIngest } from './ingest.ts';
import { ingestLoadBench, type IngestLoadResults } from './ingest-load.ts';
import { loadGeometry } from '../server/config/array-file.ts';
import { interleaveInto, runNumpyPeer, writeRawFloat32, type PeerResult } from './peer.ts';
import { benchSimulator } from './simulator.ts';
import { peakRssMiB } from './util.ts';
import { openRaw } from '../server/io/raw.ts';
import { runTimeline } from '../server/tools/timeline.ts';

const { values } = parseArgs({ options: { json: { type: 'boolean' }, workload: { type: 'string' }, quick: { type: 'boolean' }, workers: { type: 'string' }, ingest: { type: 'boolean' }, background: { type: 'string' }, remote: { type: 'string' }, local: { type: 'string' } } });
if (values.remote !== undefined) {
  // Remote bin workers (bench/remote.ts): its own run, then done.
  const { benchRemote } = await import('./remote.ts');
  await benchRemote({ remote: Number(values.remote), workload: values.workload ?? 'W32', local: Number(values.local ?? 1), seconds: values.quick ? 3 : 8, json: values.json === true });
  process.exit(0);
}
const workers = values.workers ? Number(values.workers) : availableParallelism();
const seconds = values.quick ? 3 : 8;
const say = (s: string) => {
  if (!values.json) console.log(s);
};

interface WorkloadResult {
  workload: string;
  workers: number;
  channels: number;
  directions: number;
  spectrum_rate_hz: number;
  rtf: number;
  cpu_rtf: number;
  mvdr_spectrum_ms_p50: number;
  latency_ms_p50: number;
  latency_ms_p99: number;
  rss_mb_peak: number;
  shed_step_offline: number;
  shed_step_paced: number;
  hops_skipped_paced: number;
  max_realtime_mics?: number;
  max_realtime_trials?: { m: number; rtf: number }[];
  numpy?: PeerResult | null;
  ratio_spectrum?: number | null;
  ratio_chain?: number | null;
  beams_note: string;
  /** `analyze --timeline` on the same signal from a file: seconds of signal per wall second. */
  reanalysis_speed_x: number;
  /** Until the first chunk of the capture is in: engine creation and worker start-up, s. */
  reanalysis_startup_s?: number;
}

async function runWorkload(w: Workload, withMics: boolean): Promise<WorkloadResult> {
  const g = await geometryOf(w);
  const p = paramsFor(w);
  const blocks = sceneBlocks(g, seconds + 1);
  say(`\n${w.name}: ${g.positions.length} mics, ${p.grid.elevationDeg ? '2-D grid' : 'azimuth grid'}, ${w.spectrumRateHz} Hz rows, ${workers} workers`);
  const off = await runOffline(g, p, blocks, workers);
  const rtf = off.wallS / off.seconds;
  say(`  offline: rtf ${rtf.toFixed(3)}, cpu_rtf ${(off.cpuS / off.seconds).toFixed(3)}, one MVDR+conventional spectrum update ${off.scanMsP50.toFixed(2)} ms (pooled)`);
  const paced = await runPaced(g, p, sceneBlocks(g, values.quick ? 3 : 6), workers);
  say(`  paced:   latency p50 ${paced.p50.toFixed(2)} ms, p99 ${paced.p99.toFixed(2)} ms over ${paced.rows} rows, shed step ${paced.shedStep}, hops skipped ${paced.hopsSkipped}`);
  const rss = peakRssMiB();
  const result: WorkloadResult = {
    workload: w.name,
    workers,
    channels: g.positions.length,
    directions: off.status.directions as number,
    spectrum_rate_hz: w.spectrumRateHz,
    rtf,
    cpu_rtf: off.cpuS / off.seconds,
    mvdr_spectrum_ms_p50: off.scanMsP50,
    latency_ms_p50: paced.p50,
    latency_ms_p99: paced.p99,
    rss_mb_peak: rss,
    shed_step_offline: off.shedStep,
    shed_step_paced: paced.shedStep,
    hops_skipped_paced: paced.hopsSkipped,
    beams_note: `DESIGN.md lists ${w.beams} beam(s) for ${w.name}; the workloads run without beams`,
    reanalysis_speed_x: 0,
  };
  // The numpy peer on the same signal.
  const dir = mkdtempSync(join(tmpdir(), 'nullsteer-bench-'));
  const M = g.positions.length;
  const frames = blocks.reduce((n, b) => n + b.frames, 0);
  const x = new Float32Array(frames * M);
  let o = 0;
  for (const b of blocks) {
    interleaveInto(x, o, b.data, M, b.frames);
    o += b.frames * M;
  }
  const raw = join(dir, `${w.name}.f32`);
  await writeRawFloat32(raw, x);
  // Re-analysis of a capture file, as `nullsteer analyze FILE --timeline DIR` runs it: a 30 s file
  // (8 s with --quick) of the same scene, start-up (engine and workers) included.
  const capS = values.quick ? 8 : 30;
  const cap = sceneBlocks(g, capS);
  const cx = new Float32Array(cap.reduce((n, b) => n + b.frames, 0) * M);
  let co = 0;
  for (const b of cap) {
    interleaveInto(cx, co, b.data, M, b.frames);
    co += b.frames * M;
  }
  const capPath = join(dir, `${w.name}-capture.f32`);
  await writeRawFloat32(capPath, cx);
  const reader = await openRaw(capPath, { channels: M, sampleRateHz: FS, encoding: 'float32' });
  try {
    let firstChunkS = 0;
    const t0 = performance.now();
    const t = await runTimeline(reader, { geometry: g, params: p, changes: [], startSampleIndex: 0, workers, speedOfSoundMps: 343.2, progress: (d) => (firstChunkS ||= (performance.now() - t0) / 1000) });
    result.reanalysis_speed_x = t.frames / FS / t.wallS;
    result.reanalysis_startup_s = firstChunkS;
    say(`  re-analysis of a ${capS} s capture (analyze --timeline): ${result.reanalysis_speed_x.toFixed(1)}× real time including ${firstChunkS.toFixed(2)} s start-up, ${t.rows.length} rows`);
  } finally {
    await reader.close();
  }
  const peer = await runNumpyPeer({ rawPath: raw, channels: M, sampleRateHz: FS, arrayPath: `${PROJECT_CONFIG_DIR}/arrays/${w.array}`, grid: p.grid, bandHz: p.bandHz, lambda: p.lambda, spectrumRateHz: w.spectrumRateHz, fftSize: FFT, loadingRatio: 0.01 });
  result.numpy = peer;
  if (peer) {
    // The peer times MVDR and conventional separately; ours computes both in one pooled scan.
    const peerScan = peer.mvdr_spectrum_ms_p50 + peer.conventional_ms_p50;
    result.ratio_spectrum = off.scanMsP50 / peerScan;
    result.ratio_chain = rtf / peer.chain_rtf;
    say(`  numpy:   chain rtf ${peer.chain_rtf.toFixed(3)}, MVDR ${peer.mvdr_spectrum_ms_p50.toFixed(2)} ms + conventional ${peer.conventional_ms_p50.toFixed(2)} ms per update`);
    say(`  ours/numpy: spectrum update ${result.ratio_spectrum.toFixed(2)}, whole chain ${result.ratio_chain.toFixed(2)}`);
  }
  if (withMics) {
    const mics = await maxRealtimeMics(workers, values.quick ? 1.5 : 2.5);
    result.max_realtime_mics = mics.mics;
    result.max_realtime_trials = mics.trials;
    say(`  largest ring in real time at W32 settings: ${mics.mics} mics (trials ${mics.trials.map((t) => `${t.m}:${t.rtf.toFixed(2)}`).join(', ')})`);
  }
  return result;
}

/** The ingest benches: the single-thread path, then the live server over UDP from another process. */
async function runIngest(): Promise<{ ingest: ReturnType<typeof benchIngest>[]; ingestLoad: IngestLoadResults; capture: CaptureBenchResult[] }> {
  const ingest = [benchIngest(8, 'int24'), benchIngest(24, 'int16'), benchIngest(32, 'float32'), benchIngest(64, 'int24')];
  say('\ningest (decode + check + sequence, MTU-sized UDP frames, 5 % loss, local reordering), one thread');
  for (const r of ingest) say(`  ${r.name.padEnd(24)} ${String(r.samplesPerFrame).padStart(3)} samples/frame  ${r.framesPerS.toFixed(0).padStart(7)} frames/s  rtf ${r.rtf.toFixed(4)}`);
  const ring24 = await loadGeometry(`${PROJECT_CONFIG_DIR}/arrays/ring-24.json`);
  const ingestLoad = await ingestLoadBench({ quick: values.quick ?? false, background: Number(values.background ?? 0), ring24, ring: ringGeometry, say });
  const capture = await benchCapture(values.quick ?? false, say);
  return { ingest, ingestLoad, capture };
}

if (values.ingest) {
  say(`nullsteer ingest benchmark (${process.version}, ${availableParallelism()} cores)`);
  const r = await runIngest();
  if (values.json) console.log(JSON.stringify({ node: process.version, ...r }));
} else if (values.workload) {
  const w = WORKLOADS.find((x) => x.name === values.workload);
  if (!w) {
    console.error(`unknown workload ${values.workload}; known: ${WORKLOADS.map((x) => x.name).join(', ')}`);
    process.exit(2);
  }
  const r = await runWorkload(w, w.name === 'W32');
  if (values.json) console.log(JSON.stringify(r));
} else {
  say(`nullsteer benchmark (${process.version}, ${availableParallelism()} cores); rtf = wall seconds per second of signal`);
  const results: WorkloadResult[] = [];
  for (const w of WORKLOADS) results.push(await runWorkload(w, w.name === 'W32'));
  say('\nworkload   M     D   rate    rtf  cpu_rtf  spectrum_ms  lat_p50  lat_p99   rss_MB  ours/numpy(spectrum, chain)');
  for (const r of results) {
    say(
      `${r.workload.padEnd(8)}${String(r.channels).padStart(4)}${String(r.directions).padStart(6)}${String(r.spectrum_rate_hz).padStart(6)}${r.rtf.toFixed(3).padStart(8)}${r.cpu_rtf.toFixed(3).padStart(9)}${r.mvdr_spectrum_ms_p50.toFixed(2).padStart(13)}${r.latency_ms_p50.toFixed(1).padStart(9)}${r.latency_ms_p99.toFixed(1).padStart(9)}${r.rss_mb_peak.toFixed(0).padStart(9)}    ${r.ratio_spectrum?.toFixed(2) ?? '—'}, ${r.ratio_chain?.toFixed(2) ?? '—'}`,
    );
  }
  const simulator = [await benchSimulator('ring-24.json'), await benchSimulator('line-8.json')];
  const dsp = await benchW32Spectrum();
  const { ingest, ingestLoad, capture } = await runIngest();
  say('\nbuilt-in scene generator, 48 kHz, one thread');
  for (const r of simulator) say(`  ${r.name.padEnd(24)} ${String(r.channels).padStart(3)} ch  rtf ${r.rtf.toFixed(4)}`);
  say(`\nsingle-thread plain kernels, W32: MVDR update ${dsp.mvdrUpdateMs.toFixed(2)} ms, conventional ${dsp.conventionalUpdateMs.toFixed(2)} ms, STFT ${dsp.stftHopMs.toFixed(3)} ms/hop (fft.js; ${dsp.stftFastHopMs.toFixed(3)} ms/hop as the engine runs it, WebAssembly, band only), covariance ${dsp.covarianceHopMs.toFixed(3)} ms/hop`);
  if (values.json) console.log(JSON.stringify({ node: process.version, workloads: results, ingest, ingestLoad, capture, simulator, dsp }));
}
