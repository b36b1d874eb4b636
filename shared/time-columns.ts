/**
 * The time columns every exported table starts with (the dashboard's spectrum CSV, the timeline's
 * history.csv and peaks.csv):
 *   time_s         seconds from the start of the file (timeline) or of the history (dashboard)
 *   stream_time_s  seconds on the stream's clock: sample_index / sample rate
 *   sample_index   the stream-clock index of the row (the last sample of the hop that completed it)
 * Seconds are written to the microsecond with no trailing zeros and no floating-point noise
 * ("2.5", not "2.500000" or "2.4999999999999996"): one sample at 48 kHz is 20.8 µs.
 */

export const TIME_COLUMNS_HEADER = 'time_s,stream_time_s,sample_index';

/** Seconds for a table: rounded to 1 µs, shortest text ("0.005333", "12", "-0.5"). */
export function csvSeconds(s: number): string {
  if (!Number.isFinite(s)) return '';
  const r = Number(s.toFixed(6));
  return String(r === 0 ? 0 : r);
}

/**
 * The three time fields of one row, comma-joined (no trailing comma).
 * @param sampleIndex stream-clock index of the row
 * @param startSampleIndex stream-clock index of the file's (history's) start
 */
export function timeColumns(sampleIndex: number, startSampleIndex: number, sampleRateHz: number): string {
  return `${csvSeconds((sampleIndex - startSampleIndex) / sampleRateHz)},${csvSeconds(sampleIndex / sampleRateHz)},${sampleIndex}`;
}
