/**
 * Events of unattended monitoring: one detector per rule (event-detector.ts) fed with its sector's
 * hop levels and 1-s Leq, events kept in memory (the last MAX_RECENT) and appended per UTC day to
 * `data.dir/events/YYYY-MM-DD.jsonl` (one line per start and per end), and every change handed on
 * (live messages, webhooks, metrics, clips). Indicative levels only: no class-rated meter, no
 * traceable calibration.
 *
 * An event: id, rule, sector, start and end as stream sample indices and UTC, peak and Leq, the
 * direction of the sector's beam at the peak (the strongest direction in the sector, followed while
 * the event lasts), the threshold in force, the unit, and the clip files when a clip was written.
 */
import { appendFile, mkdir } from 'node:fs/promises';
import { join } from 'node:path';
import type { MonitorEvent } from '../../shared/messages.ts';
import type { Rule } from '../../shared/rules.ts';
import { fsErrorText } from '../io/disk-space.ts';
import { EventDetector, type EventChange } from './event-detector.ts';

export const MAX_RECENT = 1000;
export const MAX_PENDING_LINES = 10_000;

export type { MonitorEvent };

export interface EventCounters {
  started: number;
  ended: number;
  linesWritten: number;
  linesDropped: number;
  writeErrors: number;
  lastError: string | null;
}

export interface EventsOptions {
  sampleRateHz: number;
  splOffsetDb: number | null;
  /** data.dir/events, or null to keep events in memory only. */
  dir: string | null;
  utcOfSample: (sampleIndex: number) => number;
  /** The sector beam's look direction now (the detector keeps the one at the peak). */
  lookOf: (sector: string) => { azimuthDeg: number | null; elevationDeg: number | null };
  onChange?: (kind: EventChange['kind'], ev: MonitorEvent) => void;
}

const round2 = (x: number) => (Number.isFinite(x) ? Math.round(x * 100) / 100 : x);

export class EventMonitor {
  readonly counters: EventCounters = { started: 0, ended: 0, linesWritten: 0, linesDropped: 0, writeErrors: 0, lastError: null };
  readonly #o: EventsOptions;
  #detectors: EventDetector[] = [];
  readonly #recent: MonitorEvent[] = [];
  readonly #active = new Map<string, MonitorEvent>();
  #pending: { file: string; line: string }[] = [];
  #writing = false;
  #idle: Promise<void> = Promise.resolve();
  /** One past the last sample metered (the end of an event whose rule goes). */
  #lastSample = 0;

  constructor(o: EventsOptions) {
    this.#o = o;
  }

  get unit(): 'dBFS' | 'dB SPL' {
    return this.#o.splOffsetDb === null ? 'dBFS' : 'dB SPL';
  }

  /** Follow the rule list; a changed or removed rule's open event ends where it is. */
  setRules(rules: readonly Rule[]): void {
    const keep = new Map(this.#detectors.map((d) => [d.rule.name, d]));
    this.#detectors = rules.map((r) => {
      const old = keep.get(r.name);
      return old && JSON.stringify(old.rule) === JSON.stringify(r) ? old : new EventDetector(r, this.#o.sampleRateHz, this.#o.splOffsetDb ?? 0);
    });
    // Open events of a removed rule, or of one replaced (its new detector counts events from 1 again).
    const kept = new Set(this.#detectors.filter((d) => keep.get(d.rule.name) === d).map((d) => d.rule.name));
    for (const [key, ev] of this.#active) if (!kept.has(ev.rule)) {
      this.#active.delete(key);
      this.#endDropped(ev);
    }
  }

  /**
   * An open event whose rule was removed or replaced ends at the last sample metered: told like any
   * end (state, file line, onChange: live message, webhooks, the clip's post-roll).
   */
  #endDropped(ev: MonitorEvent): void {
    ev.state = 'ended';
    ev.endSample = Math.max(ev.startSample, this.#lastSample);
    ev.endUtc = new Date(this.#o.utcOfSample(ev.endSample)).toISOString();
    this.counters.ended++;
    this.#append(ev.startUtc.slice(0, 10), JSON.stringify({ change: 'ended', ...ev }));
    this.#o.onChange?.('ended', { ...ev, clips: [...ev.clips] });
  }

  get rules(): Rule[] {
    return this.#detectors.map((d) => d.rule);
  }

  /** One hop of a sector's level (sector-meters.ts's mean square). */
  hopLevel(sector: string, sampleIndex: number, frames: number, meanSquare: number): void {
    if (sampleIndex + frames > this.#lastSample) this.#lastSample = sampleIndex + frames;
    for (const d of this.#detectors) {
      if (d.rule.sector !== sector) continue;
      const look = this.#o.lookOf(sector);
      const c = d.hop(sampleIndex, frames, meanSquare, look.azimuthDeg, look.elevationDeg);
      if (c) this.#change(c);
    }
  }

  /** One 1-s Leq of a sector (its background for above-background rules), with the unit's offset. */
  second(sector: string, leqDb: number): void {
    for (const d of this.#detectors) if (d.rule.sector === sector) d.second(leqDb);
  }

  #change(c: EventChange): void {
    const key = `${c.rule}#${c.seq}`;
    let ev = this.#active.get(key);
    if (!ev) {
      if (c.kind !== 'started') return;
      const startUtc = new Date(this.#o.utcOfSample(c.startSample)).toISOString();
      ev = { id: `${c.rule}-${startUtc.replace(/[-:.]/g, '').slice(0, 15)}Z-${c.startSample}`, rule: c.rule, sector: c.sector, state: 'active', startSample: c.startSample, endSample: null, startUtc, endUtc: null, peakDb: 0, leqDb: 0, azimuthDeg: null, elevationDeg: null, thresholdDb: c.thresholdDb, unit: this.unit, clips: [] };
      this.#active.set(key, ev);
      this.#recent.push(ev);
      if (this.#recent.length > MAX_RECENT) this.#recent.splice(0, this.#recent.length - MAX_RECENT);
      this.counters.started++;
    }
    ev.peakDb = round2(c.peakDb);
    ev.leqDb = round2(c.leqDb);
    ev.azimuthDeg = c.azimuthDeg;
    ev.elevationDeg = c.elevationDeg;
    if (c.kind === 'ended') {
      ev.state = 'ended';
      ev.endSample = c.endSample;
      ev.endUtc = new Date(this.#o.utcOfSample(c.endSample!)).toISOString();
      this.#active.delete(key);
      this.counters.ended++;
    }
    if (c.kind !== 'updated') this.#append(ev.startUtc.slice(0, 10), JSON.stringify({ change: c.kind, ...ev }));
    this.#o.onChange?.(c.kind, { ...ev, clips: [...ev.clips] });
  }

  /** Note a clip file written for an event (the clip writer calls it). */
  addClip(id: string, file: string): void {
    const ev = this.#recent.find((e) => e.id === id);
    if (ev && !ev.clips.includes(file)) ev.clips.push(file);
  }

  /** Events (recent, in memory) that overlap [fromMs, toMs), optionally of one rule, oldest first. */
  list(fromMs = -Infinity, toMs = Infinity, rule?: string): MonitorEvent[] {
    return this.#recent
      .filter((e) => (!rule || e.rule === rule) && Date.parse(e.startUtc) < toMs && (e.endUtc === null || Date.parse(e.endUtc) >= fromMs))
      .map((e) => ({ ...e, clips: [...e.clips] }));
  }

  /** Resolves when every line queued so far is written. */
  flushed(): Promise<void> {
    return this.#idle;
  }

  #append(day: string, line: string): void {
    if (!this.#o.dir) return;
    if (this.#pending.length >= MAX_PENDING_LINES) {
      this.counters.linesDropped++;
      return;
    }
    this.#pending.push({ file: `${day}.jsonl`, line });
    if (!this.#writing) this.#idle = this.#drain();
  }

  async #drain(): Promise<void> {
    this.#writing = true;
    try {
      while (this.#pending.length > 0) {
        const batch = this.#pending;
        this.#pending = [];
        try {
          await mkdir(this.#o.dir!, { recursive: true });
          const byFile = new Map<string, string[]>();
          for (const p of batch) byFile.set(p.file, [...(byFile.get(p.file) ?? []), p.line]);
          for (const [file, lines] of byFile) {
            await appendFile(join(this.#o.dir!, file), lines.join('\n') + '\n');
            this.counters.linesWritten += lines.length;
          }
        } catch (e) {
          this.counters.writeErrors++;
          this.counters.lastError = fsErrorText(e);
        }
      }
    } finally {
      this.#writing = false;
    }
  }
}
