#!/usr/bin/env node
/**
 * `npm run test:loaded [-- RUNS]`: the whole suite (`npm test`) RUNS times in a row (default 5)
 * while another process keeps one core busy, as a slower or shared machine would. Stops at the
 * first failing run and exits non-zero; prints each run's result and duration. The suite must pass
 * this before an issue is resolved (DEVELOPERS.md).
 */
import { spawn } from 'node:child_process';

const runs = Number(process.argv[2] ?? 5);
if (!Number.isInteger(runs) || runs < 1) {
  console.error('usage: npm run test:loaded [-- RUNS]   (RUNS: a whole number ≥ 1, default 5)');
  process.exit(2);
}
const busy = spawn(process.execPath, ['-e', 'for(;;){}'], { stdio: 'ignore' });
const stop = () => busy.kill('SIGKILL');
process.on('exit', stop);
for (const sig of ['SIGINT', 'SIGTERM']) process.on(sig, () => process.exit(130));

const npm = process.platform === 'win32' ? 'npm.cmd' : 'npm';
for (let k = 1; k <= runs; k++) {
  const t0 = performance.now();
  const code = await new Promise((resolve) => spawn(npm, ['test'], { stdio: 'inherit' }).once('exit', (c) => resolve(c ?? 1)));
  const s = ((performance.now() - t0) / 1000).toFixed(0);
  console.log(`\ntest:loaded: run ${k} of ${runs} ${code === 0 ? 'passed' : 'FAILED'} in ${s} s (one core kept busy by pid ${busy.pid})\n`);
  if (code !== 0) process.exit(1);
}
console.log(`test:loaded: all ${runs} runs passed with one core busy`);
// The busy child keeps the event loop alive: leave through exit, which ends it (see `stop`).
process.exit(0);
