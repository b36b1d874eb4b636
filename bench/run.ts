/**
 * `npm run bench [-- --json]`: the project's benchmark. Prints medians of repeated runs; it is a
 * script, not a test, and asserts nothing.
 */
import { parseArgs } from 'node:util';
import { benchW32Spectrum } from './dsp.ts';
import { benchIngest } from './ingest.ts';
import { benchSimulator } from './simulator.ts';
import { peakRssMiB } from './util.ts';

const { values } = parseArgs({ options: { json: { type: 'boolean' } } });

const ingest = [benchIngest(8, 'int24'), benchIngest(24, 'int16'), benchIngest(32, 'float32'), benchIngest(64, 'int24')];
const simulator = [await benchSimulator('ring-24.json'), await benchSimulator('line-8.json')];
const dsp = await benchW32Spectrum();
const result = { node: process.version, ingest, simulator, dsp, peakRssMiB: peakRssMiB() };

if (values.json) {
  console.log(JSON.stringify(result));
} else {
  console.log(`nullsteer benchmark (${process.version}); rtf = wall seconds per second of signal, one thread`);
  console.log('\ningest (decode + check + sequence, MTU-sized UDP frames, 5 % loss, local reordering)');
  console.log('case                        samples/frame  frames/s of signal  frames/s handled      rtf');
  for (const r of ingest) {
    console.log(`${r.name.padEnd(28)}${String(r.samplesPerFrame).padStart(13)}${r.framesPerSecondOfSignal.toFixed(0).padStart(20)}${r.framesPerS.toFixed(0).padStart(18)}${r.rtf.toFixed(4).padStart(9)}`);
  }
  console.log('\nbuilt-in scene generator, 48 kHz');
  for (const r of simulator) console.log(`${r.name.padEnd(28)}${String(r.channels).padStart(4)} ch   rtf ${r.rtf.toFixed(4)}`);
  const d = dsp;
  console.log(`\nDSP core, ${d.workload}: ${d.channels} mics, ${d.bins} bins × ${d.directions} directions, one thread, plain kernels`);
  console.log(`  one MVDR spectrum update          ${d.mvdrUpdateMs.toFixed(2)} ms`);
  console.log(`  one conventional spectrum update  ${d.conventionalUpdateMs.toFixed(2)} ms`);
  console.log(`  STFT per hop (all channels)       ${d.stftHopMs.toFixed(3)} ms`);
  console.log(`  covariance update per hop         ${d.covarianceHopMs.toFixed(3)} ms`);
  console.log(`  MVDR at 20 Hz + STFT + covariance ${d.rtfAt20Hz.toFixed(3)} core-s per s of signal`);
  console.log(`\npeak RSS ${result.peakRssMiB.toFixed(0)} MiB`);
}
