/**
 * Event clips: the sector's steered beam from before the trigger to after the event, as a WAV with a
 * sidecar (issue 16 item 4). Indicative levels only; a clip is audio of whoever was in the sector:
 * recording people is regulated (README "Cautions").
 *
 * At an event's start the span the pre-trigger ring still holds is synthesised with the weights the
 * sector's beam applies at that moment (pre-trigger.ts), from `preS` before the event's first sample
 * (rounded back onto the live beam's hop grid, so the offline part ends exactly where the live beam
 * audio goes on) up to the next live hop; from there the live beam audio of the same beam is
 * appended hop by hop until the event's end plus `postS`. The file is mono float32 at the stream's
 * rate in `outputs.dir/clips/EVENT-ID-beam.wav`; its sidecar `…-beam.json` names the event, rule,
 * direction, the weights' white noise gain, the span (sample indices and UTC) and the parameters.
 * With `raw: true` the raw channels of the same span go to `…-raw.wav` likewise.
 *
 * Bounds: at most MAX_ACTIVE clips written at once (a further one is refused and counted); a clip
 * ends at MAX_CLIP_S seconds even if its event goes on (marked truncated). Writes go through
 * WavStreamWriter's bounded queue; a failed write is counted and told without paths.
 */
import { mkdirSync } from 'node:fs';
import { writeFile } from 'node:fs/promises';
import { join } from 'node:path';
import type { Rule } from '../../shared/rules.ts';
import { WavStreamWriter } from '../outputs/wav-writer.ts';
import { fsErrorText } from '../io/disk-space.ts';
import type { MonitorEvent } from './events.ts';
import { RawRing, synthesizeFromRing } from './pre-trigger.ts';

export const MAX_ACTIVE = 4;
export const MAX_CLIP_S = 600;

export interface ClipCounters {
  started: number;
  finished: number;
  refused: number;
  truncated: number;
  failed: number;
  lastError: string | null;
}

export interface ClipOptions {
  dir: string;
  sampleRateHz: number;
  channels: number;
  fftSize: number;
  /** The pre-trigger ring now (null while there is none: no rules). */
  ring: () => RawRing | null;
  band: () => { startBin: number; count: number };
  /** The sector's beam now: id, its weights as applied, look direction, WNG (dB). */
  beamOf: (sector: string) => { id: number; weights: Float64Array | null; azimuthDeg: number | null; elevationDeg: number | null; wngDb: number | null } | null;
  utcOfSample: (sampleIndex: number) => number;
  onClip?: (eventId: string, file: string) => void;
}

interface Job {
  ev: MonitorEvent;
  rule: Rule;
  beamId: number;
  beam: WavStreamWriter;
  raw: WavStreamWriter | null;
  from: number;
  /** Next sample the live part must write (the offline part ended here). */
  next: number;
  stopAt: number;
  ended: boolean;
  truncated: boolean;
  meta: Record<string, unknown>;
}

export class ClipRecorder {
  readonly counters: ClipCounters = { started: 0, finished: 0, refused: 0, truncated: 0, failed: 0, lastError: null };
  readonly #o: ClipOptions;
  readonly #jobs = new Map<string, Job>();

  constructor(o: ClipOptions) {
    this.#o = o;
  }

  get active(): number {
    return this.#jobs.size;
  }

  /** Memory held by the pre-trigger ring, bytes (0 without one). */
  get ringBytes(): number {
    return this.#o.ring()?.bytes ?? 0;
  }

  /**
   * An event started (its detector's decision came in the hop whose live beam audio ends at
   * `nextLiveSample`): write its pre-trigger part now and follow the live beam from there.
   */
  start(ev: MonitorEvent, rule: Rule, nextLiveSample: number): void {
    if (!rule.clip.beam && !rule.clip.raw) return;
    if (this.#jobs.size >= MAX_ACTIVE || this.#jobs.has(ev.id)) {
      this.counters.refused++;
      return;
    }
    const o = this.#o;
    const beam = o.beamOf(ev.sector);
    const ring = o.ring();
    const span = ring?.span ?? null;
    if (!beam || !beam.weights || !ring || !span) {
      this.counters.refused++;
      return;
    }
    const hop = o.fftSize / 2;
    const wanted = ev.startSample - Math.round(rule.clip.preS * o.sampleRateHz);
    // On the live hop grid, no earlier than the ring allows (one frame of history before it).
    let from = nextLiveSample - Math.ceil((nextLiveSample - wanted) / hop) * hop;
    while (from - (o.fftSize - hop) < span[0]) from += hop;
    if (from >= nextLiveSample) from = nextLiveSample;
    const pre = from < nextLiveSample ? synthesizeFromRing(ring, from, nextLiveSample, beam.weights, { fftSize: o.fftSize, band: o.band(), sampleRateHz: o.sampleRateHz }) : new Float32Array(0);
    if (!pre) {
      this.counters.refused++;
      return;
    }
    const base = join(o.dir, `${ev.id}`);
    // Synchronously, so the job is in place before the next hop of live beam audio (and before the
    // event's end, which a stream processed faster than real time can bring within a few turns).
    try {
      mkdirSync(o.dir, { recursive: true });
    } catch (e) {
      this.#fail(e);
      return;
    }
    const onError = (e: Error) => this.#fail(e);
    const beamWriter = WavStreamWriter.create(`${base}-beam.wav`, { sampleRateHz: o.sampleRateHz, channels: 1, encoding: 'float32', onError });
    beamWriter.write(pre, pre.length);
    let raw: WavStreamWriter | null = null;
    if (rule.clip.raw) {
      raw = WavStreamWriter.create(`${base}-raw.wav`, { sampleRateHz: o.sampleRateHz, channels: o.channels, encoding: 'float32', onError });
      // Everything the ring holds from `from` on (the input runs ahead of the beam audio); the raw
      // blocks that follow go on from its end.
      const n = span[1] - from;
      if (n > 0) {
        const planar = new Float32Array(o.channels * n);
        ring.read(from, span[1], planar);
        raw.write(planar, n);
      }
    }
    this.counters.started++;
    this.#jobs.set(ev.id, {
      ev,
      rule,
      beamId: beam.id,
      beam: beamWriter,
      raw,
      from,
      next: nextLiveSample,
      stopAt: from + MAX_CLIP_S * o.sampleRateHz,
      ended: false,
      truncated: false,
      meta: { azimuthDeg: beam.azimuthDeg, elevationDeg: beam.elevationDeg, wngDb: beam.wngDb, preTriggerS: (ev.startSample - from) / o.sampleRateHz },
    });
  }

  /** The event ended: its clip stops at the end plus postS. */
  end(ev: MonitorEvent): void {
    const j = this.#jobs.get(ev.id);
    if (!j || ev.endSample === null) return;
    j.ev = ev;
    j.ended = true;
    const stop = ev.endSample + Math.round(j.rule.clip.postS * this.#o.sampleRateHz);
    if (stop < j.stopAt) j.stopAt = stop;
    else j.truncated = true;
  }

  /** One hop of live beam audio (engine onBeamAudio: planar, one channel per beam id). */
  beamHop(sampleIndex: number, frames: number, ids: readonly number[], data: Float32Array): void {
    for (const j of this.#jobs.values()) {
      const ch = ids.indexOf(j.beamId);
      if (ch < 0 || sampleIndex + frames <= j.next) continue;
      const a = Math.max(j.next, sampleIndex), b = Math.min(sampleIndex + frames, j.stopAt);
      if (b > a) {
        j.beam.write(data.subarray(ch * frames + (a - sampleIndex), ch * frames + (b - sampleIndex)), b - a);
        j.next = b;
      }
      if (j.next >= j.stopAt) {
        if (!j.ended) j.truncated = true; // MAX_CLIP_S reached while the event goes on
        void this.#finish(j);
      }
    }
  }

  /** Raw input blocks (for raw clips): planar, channel c at c·frames. */
  rawBlock(sampleIndex: number, frames: number, data: Float32Array): void {
    for (const j of this.#jobs.values()) {
      if (!j.raw) continue;
      const done = j.from + j.raw.frames;
      const a = Math.max(done, sampleIndex), b = Math.min(sampleIndex + frames, j.stopAt);
      if (b <= a) continue;
      const n = b - a, out = new Float32Array(this.#o.channels * n);
      for (let c = 0; c < this.#o.channels; c++) out.set(data.subarray(c * frames + (a - sampleIndex), c * frames + (b - sampleIndex)), c * n);
      j.raw.write(out, n);
    }
  }

  async #finish(j: Job): Promise<void> {
    if (!this.#jobs.delete(j.ev.id)) return;
    const o = this.#o;
    if (j.truncated) this.counters.truncated++;
    try {
      await j.beam.close();
      await j.raw?.close();
      const base = join(o.dir, `${j.ev.id}`);
      const sidecar = {
        kind: 'event clip',
        indicative: true,
        caution: 'Steered audio of whoever was in the sector: recording people is regulated; follow local law and your organisation’s rules on consent and retention.',
        event: j.ev,
        rule: j.rule,
        direction: { azimuthDeg: j.meta.azimuthDeg, elevationDeg: j.meta.elevationDeg },
        whiteNoiseGainDb: j.meta.wngDb,
        sampleRateHz: o.sampleRateHz,
        fromSample: j.from,
        toSample: j.next,
        fromUtc: new Date(o.utcOfSample(j.from)).toISOString(),
        toUtc: new Date(o.utcOfSample(j.next)).toISOString(),
        preTriggerS: j.meta.preTriggerS,
        truncated: j.truncated,
        files: [`${j.ev.id}-beam.wav`, ...(j.raw ? [`${j.ev.id}-raw.wav`] : [])],
      };
      await writeFile(`${base}-beam.json`, JSON.stringify(sidecar, null, 2) + '\n');
      this.counters.finished++;
      for (const f of sidecar.files) o.onClip?.(j.ev.id, f);
    } catch (e) {
      this.#fail(e);
    }
  }

  #fail(e: unknown): void {
    this.counters.failed++;
    this.counters.lastError = fsErrorText(e);
  }

  /** Close every clip where it is (shutdown). */
  async close(): Promise<void> {
    for (const j of [...this.#jobs.values()]) {
      j.truncated = true;
      await this.#finish(j);
    }
  }
}
