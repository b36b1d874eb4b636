/**
 * Ingest path cost: decode + check + sequence + publish for frames as a live array would send them
 * (MTU-sized UDP frames), with 5 % loss and local reordering so the gap and reorder paths run too.
 */
import { encodeFrame, maxSamplesPerFrame, type SampleEncoding } from '../shared/frame.ts';
import { IngestHub } from '../server/ingest/ingest-hub.ts';
import { DEFAULT_SEQUENCER_OPTIONS } from '../server/ingest/sequencer.ts';
import { time } from './util.ts';

export interface IngestResult {
  name: string;
  channels: number;
  encoding: SampleEncoding;
  samplesPerFrame: number;
  framesPerSecondOfSignal: number;
  /** Frames the path handles per wall second. */
  framesPerS: number;
  /** Wall seconds to ingest one second of signal (lower is better; 1 = just real time on one core). */
  rtf: number;
}

export function benchIngest(channels: number, encoding: SampleEncoding, fs = 48000, seconds = 2): IngestResult {
  const n = maxSamplesPerFrame(channels, encoding);
  const frames = Math.floor((seconds * fs) / n);
  const x = new Float32Array(channels * n);
  for (let k = 0; k < x.length; k++) x[k] = Math.sin(k * 0.01) * 0.5;
  const wire: Uint8Array[] = [];
  for (let k = 0; k < frames; k++) {
    if (k % 20 === 10) continue; // 5 % loss
    wire.push(encodeFrame({ streamId: 1, sequence: k, firstSample: k * n, sampleRateHz: fs, channels, samplesPerChannel: n, encoding }, x));
  }
  for (let i = 3; i + 1 < wire.length; i += 7) [wire[i], wire[i + 1]] = [wire[i + 1], wire[i]];
  let sink = 0;
  const t = time(() => {
    const hub = new IngestHub(
      { sampleRateHz: fs, channels, encodings: [encoding], maxFloatLevelDbfs: 60, streamId: null, maxStreams: 4, sequencer: DEFAULT_SEQUENCER_OPTIONS },
      (b) => (sink += b.frames),
      0,
    );
    for (let i = 0; i < wire.length; i++) hub.receive(wire[i], 'udp', 'bench', i * 0.01);
    hub.flush();
  });
  if (sink === 0) throw new Error('nothing ingested');
  return {
    name: `ingest ${channels}ch ${encoding}`,
    channels,
    encoding,
    samplesPerFrame: n,
    framesPerSecondOfSignal: fs / n,
    framesPerS: wire.length / t.medianS,
    rtf: t.medianS / seconds,
  };
}
