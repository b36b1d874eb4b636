/**
 * `npm run bench [-- --json]`: the project's benchmark. Prints medians of repeated runs; it is a
 * script, not a test, and asserts nothing.
 */
import { parseArgs } from 'node:util';
import { benchIngest } from './ingest.ts';
import { benchSimulator } from './simulator.ts';
import { peakRssMiB } from './util.ts';

const { values } = parseArgs({ options: { json: { type: 'boolean' } } });

const ingest = [benchIngest(8, 'int24'), benchIngest(24, 'int16'), benchIngest(32, 'float32'), benchIngest(64, 'int24')];
const simulator = [await benchSimulator('ring-24.json'), await benchSimulator('line-8.json')];
const result = { node: process.version, ingest, simulator, peakRssMiB: peakRssMiB() };

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
  console.log(`\npeak RSS ${result.peakRssMiB.toFixed(0)} MiB`);
}
