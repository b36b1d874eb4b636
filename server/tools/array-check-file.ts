/**
 * `nullsteer analyze FILE --array-check`: the array check (dsp/array-check.ts) on the start of a
 * recording, and its table.
 */
import { decodeInterleaved } from '../../shared/frame.ts';
import type { ArrayGeometry } from '../../shared/types.ts';
import { checkArray, DEFAULT_CHECK_FFT_SIZE, type ArrayCheckResult } from '../dsp/array-check.ts';
import type { ScanPipelineOptions } from '../dsp/scan-pipeline.ts';
import type { FileSampleReader } from '../io/raw.ts';
import { MAX_CHECK_BYTES, MAX_CHECK_SECONDS } from '../engine/array-check-runner.ts';

/**
 * Run the check on the first MAX_CHECK_SECONDS of the file (fewer when MAX_CHECK_BYTES of float32
 * samples would not hold them), as the live check does on the next seconds of input.
 */
export async function arrayCheckFile(
  reader: FileSampleReader,
  geometry: ArrayGeometry,
  options: ScanPipelineOptions,
  check: { azimuthDeg: number | null; boundUs: number; fftSize: number | null },
): Promise<ArrayCheckResult & { seconds: number }> {
  const info = reader.info;
  const M = info.channels;
  const frames = Math.min(info.frames, Math.round(MAX_CHECK_SECONDS * info.sampleRateHz), Math.floor(MAX_CHECK_BYTES / (4 * M)));
  const data = new Float32Array(M * frames);
  const chunkFrames = 8192;
  const planar = new Float32Array(M * chunkFrames);
  let index = 0;
  for await (const bytes of reader.chunks(chunkFrames)) {
    if (index >= frames) break;
    const n = bytes.byteLength / info.blockAlignBytes;
    const chunk = n === chunkFrames ? planar : new Float32Array(M * n);
    if (!decodeInterleaved(bytes, M, n, info.encoding, chunk)) throw new RangeError(`the file holds NaN or infinite samples between frames ${index} and ${index + n}`);
    const take = Math.min(n, frames - index);
    for (let c = 0; c < M; c++) data.set(chunk.subarray(c * n, c * n + take), c * frames + index);
    index += take;
  }
  const r = checkArray({
    data,
    channels: M,
    frames: index,
    sampleRateHz: info.sampleRateHz,
    positions: geometry.positions,
    speedOfSoundMps: options.speedOfSoundMps,
    bandHz: options.bandHz,
    fftSize: check.fftSize ?? DEFAULT_CHECK_FFT_SIZE,
    direction: check.azimuthDeg === null ? null : { azimuthDeg: check.azimuthDeg },
    misplacedBoundUs: check.boundUs,
  });
  return { ...r, seconds: index / info.sampleRateHz };
}

const cell = (v: number | null, digits: number, width: number) => (v === null ? '—' : v.toFixed(digits)).padStart(width);

export function arrayCheckTable(file: string, arrayName: string, r: ArrayCheckResult & { seconds: number }): string {
  const lines: string[] = [];
  lines.push(`${file}: array check of ${r.seconds.toFixed(2)} s against ${arrayName}; source at azimuth ${r.direction.azimuthDeg.toFixed(2)}° (${r.direction.from === 'stated' ? 'stated' : 'strongest peak'}), band ${r.bandHz[0]}–${r.bandHz[1]} Hz, reference channel ${r.referenceChannel}, bound ${r.misplacedBoundUs} µs`);
  lines.push('', '  channel  level_dbfs  gain_db  delay_us  phase_deg  coherence  carries  faults');
  for (const c of r.channels) {
    lines.push(`  ${String(c.channel).padStart(7)}${cell(c.levelDb, 2, 12)}${cell(c.gainDb, 2, 9)}${cell(c.delayUs, 1, 10)}${cell(c.phaseDeg, 1, 11)}${cell(c.coherence, 3, 11)}${String(c.carriesPosition).padStart(9)}  ${c.faults.join(', ')}`);
  }
  lines.push('', r.faults.length === 0 ? 'no faults found' : `faults:\n${r.faults.map((f) => `  ${f.text}`).join('\n')}`);
  lines.push('', `proposed calibration (array file "calibration", or POST /api/array-check/calibration):`, `  ${JSON.stringify(r.calibration)}`);
  return lines.join('\n');
}
