/**
 * What the session-tool endpoints answer (GET /api/journal, /api/presets): one definition for the
 * server that writes these objects and the dashboard that reads them.
 */
import type { ProcessingParams } from './messages.ts';

export const JOURNAL_KINDS = ['processing', 'reset', 'beam-add', 'beam-update', 'beam-remove', 'mask', 'preset-apply', 'preset-save', 'preset-delete', 'recording-start', 'recording-stop', 'compare-on', 'compare-set', 'compare-off', 'compare-promote', 'input-stream', 'landmarks', 'calibration', 'retention', 'rules', 'sectors'] as const;
export type JournalKind = (typeof JOURNAL_KINDS)[number];

/** Who made a change: the client's address and, when it sent one, its User-Agent (truncated). */
export interface Actor {
  remote: string;
  agent: string | null;
}

export interface JournalEntry {
  /** 1, 2, … over the journal file's whole life (continues across restarts). */
  seq: number;
  session: string;
  /** ISO 8601 wall clock of the change. */
  at: string;
  /** Next stream sample when the change was applied (null before any input). */
  sampleIndex: number | null;
  actor: Actor;
  kind: JournalKind;
  /** One line for people: what changed, e.g. "lambda 0.99 → 0.995". */
  summary: string;
  before: unknown;
  after: unknown;
}

/** GET /api/journal. */
export interface JournalPage {
  session: { id: string; startedAt: string };
  total: number;
  /** Lines of the journal file that could not be read at start (skipped). */
  corruptLines: number;
  /** Oldest first (newest last). */
  entries: JournalEntry[];
}

export interface Preset {
  name: string;
  savedAt: string;
  params: ProcessingParams;
}

export type PresetListing = { name: string; savedAt: string; valid: true } | { name: string; valid: false; error: string };
