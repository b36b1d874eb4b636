/**
 * The retention policies of a configuration (outputs.retention, data.retention) and the folders
 * and file names each covers, for {@link RetentionScheduler} (./retention.ts):
 *
 * - 'outputs': the recordings in outputs.dir (the recorder's parts and sidecars, nothing else in
 *   that folder) and the event clips in outputs.dir/clips (WAV and JSON sidecar pairs);
 * - 'data': the per-day level files in data.dir/levels and event logs in data.dir/events (names
 *   holding a YYYY-MM-DD date; a day's CSV and JSON lines share a stem and go together). The newest
 *   day of each is never deleted, since it is still being appended.
 *
 * The journal (data.dir/journal*.jsonl) and presets (data.dir/presets) are not covered: the journal
 * rotates by itself (data.journalMaxBytes) and presets are the user's.
 */
import { join, resolve } from 'node:path';
import { folderLabel } from '../io/disk-space.ts';
import type { RetentionLimits } from '../config/schema.ts';
import { RETENTION_PATTERNS, type RetentionPolicy } from './retention.ts';

/** Clip files: `<name>.wav` with `<name>.json` (a `.json.tmp` being written does not match). */
export const CLIP_PATTERN = /^[A-Za-z0-9._-]+\.(wav|json)$/;
/** Per-day files: a YYYY-MM-DD date in the name, .csv, .jsonl or .json. */
export const DAY_FILE_PATTERN = /^[A-Za-z0-9._-]*\d{4}-\d{2}-\d{2}[A-Za-z0-9._-]*\.(csv|jsonl|json)$/;

export interface RetentionConfig {
  outputs: { dir: string; retention: RetentionLimits };
  data: { dir: string; retention: RetentionLimits };
}

/**
 * The two policies of `config`, folders resolved against `cwd` (default the working directory).
 * Group labels name folders the way the configuration does (never an absolute path).
 */
export function retentionPolicies(config: RetentionConfig, cwd: string = process.cwd()): RetentionPolicy[] {
  const out = resolve(cwd, config.outputs.dir);
  const data = resolve(cwd, config.data.dir);
  const outLabel = folderLabel(config.outputs.dir);
  const dataLabel = folderLabel(config.data.dir);
  return [
    {
      name: 'outputs',
      maxAgeDays: config.outputs.retention.maxAgeDays,
      maxBytes: config.outputs.retention.maxBytes,
      groups: [
        { dir: out, label: outLabel, match: RETENTION_PATTERNS.recordings },
        { dir: join(out, 'clips'), label: `${outLabel}/clips`, match: CLIP_PATTERN },
      ],
    },
    {
      name: 'data',
      maxAgeDays: config.data.retention.maxAgeDays,
      maxBytes: config.data.retention.maxBytes,
      groups: [
        { dir: join(data, 'levels'), label: `${dataLabel}/levels`, match: DAY_FILE_PATTERN, keepNewest: true },
        { dir: join(data, 'events'), label: `${dataLabel}/events`, match: DAY_FILE_PATTERN, keepNewest: true },
      ],
    },
  ];
}

/**
 * The files of a running recording as the scheduler's `inUse` set wants them (`label/file`): every
 * part not yet closed, WAV and sidecar. `parts` is RecorderStatus.files; `label` the recordings
 * group's label (folderLabel(outputs.dir)).
 */
export function openRecordingFiles(label: string, parts: readonly { wav: string; sidecar: string; closed: boolean }[]): Set<string> {
  const open = new Set<string>();
  for (const p of parts) {
    if (p.closed) continue;
    open.add(`${label}/${p.wav}`);
    open.add(`${label}/${p.sidecar}`);
  }
  return open;
}
