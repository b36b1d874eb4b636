/**
 * ServiceMetrics (server/monitor/metrics.ts) from a made-up status snapshot: what each metric
 * reads, one snapshot per scrape, the caps on label values, the row latency histogram's buckets,
 * and its own registry. The output is checked with the strict parser written from the format's
 * documentation (test/helpers/prom-text.ts).
 */
import { register as globalRegistry } from 'prom-client';
import { describe, expect, it } from 'vitest';
import { MAX_RULE_LABELS, MAX_SECTOR_LABELS, ROW_LATENCY_BUCKETS_S, ServiceMetrics, statusFigures } from '../../server/monitor/metrics.ts';
import { parsePromText, sampleOf } from '../helpers/prom-text.ts';

/** The parts of server/service.ts status() the metrics read, with made-up values. */
function fakeStatus(rows: number): Record<string, unknown> {
  return {
    uptimeS: 12.5,
    listeners: { udp: { kernelDrops: 4 } },
    ingest: { messages: 1000, rejected: { bad_magic: 2, too_large: 1, rate_mismatch: 5 } },
    streams: [
      { framesAccepted: 600, samplesAccepted: 600 * 480, framesLost: 3, framesLate: 1, framesDuplicated: 2, gapSamples: 1440, rejected: { rate_mismatch: 1, non_finite: 7 } },
      { framesAccepted: 300, samplesAccepted: 300 * 480, framesLost: 0, framesLate: 0, framesDuplicated: 0, gapSamples: 0, rejected: { rate_mismatch: 2 } },
    ],
    engine: { load: 0.42, shed: { step: 1 }, rows, hops: 5000, hopsSkipped: 3, workerRestarts: 0 },
    recording: { recording: true },
  };
}

describe('ServiceMetrics', () => {
  it('reads every figure from one status snapshot per scrape', async () => {
    let calls = 0;
    let failures = 0;
    const m = new ServiceMetrics({ status: () => fakeStatus(10 * ++calls), webhookFailures: () => failures });
    const f = parsePromText(await m.render());
    expect(calls).toBe(1);
    const v = (family: string, labels: Record<string, string> = {}, name = family) => sampleOf(f, family, name, labels).value;
    const types = Object.fromEntries([...f.values()].map((x) => [x.name, x.type]));
    expect(types).toMatchObject({
      nullsteer_ingest_messages_total: 'counter',
      nullsteer_ingest_frames_total: 'counter',
      nullsteer_ingest_rejects_total: 'counter',
      nullsteer_ingest_losses_total: 'counter',
      nullsteer_engine_load_ratio: 'gauge',
      nullsteer_engine_shed_step: 'gauge',
      nullsteer_engine_rows_total: 'counter',
      nullsteer_engine_row_latency_seconds: 'histogram',
      nullsteer_recording_active: 'gauge',
      nullsteer_sector_leq_1s_db: 'gauge',
      nullsteer_events_total: 'counter',
      nullsteer_webhook_failures_total: 'counter',
    });
    expect(v('nullsteer_ingest_messages_total')).toBe(1000);
    expect(v('nullsteer_ingest_frames_total')).toBe(900);
    expect(v('nullsteer_ingest_samples_total')).toBe(900 * 480);
    // Hub-wide counts (forgotten streams, transport refusals) plus every listed stream's: 5 + 1 + 2.
    expect(v('nullsteer_ingest_rejects_total', { reason: 'rate_mismatch' })).toBe(8);
    expect(v('nullsteer_ingest_rejects_total', { reason: 'non_finite' })).toBe(7);
    expect(v('nullsteer_ingest_rejects_total', { reason: 'bad_magic' })).toBe(2);
    expect(v('nullsteer_ingest_rejects_total', { reason: 'queue_full' })).toBe(0);
    expect(v('nullsteer_ingest_losses_total', { reason: 'lost' })).toBe(3);
    expect(v('nullsteer_ingest_losses_total', { reason: 'late' })).toBe(1);
    expect(v('nullsteer_ingest_losses_total', { reason: 'duplicated' })).toBe(2);
    expect(v('nullsteer_ingest_losses_total', { reason: 'kernel_dropped' })).toBe(4);
    expect(v('nullsteer_ingest_gap_samples_total')).toBe(1440);
    expect(v('nullsteer_engine_load_ratio')).toBe(0.42);
    expect(v('nullsteer_engine_shed_step')).toBe(1);
    expect(v('nullsteer_engine_rows_total')).toBe(10);
    expect(v('nullsteer_recording_active')).toBe(1);
    expect(v('nullsteer_webhook_failures_total')).toBe(0);
    failures = 3;
    const g = parsePromText(await m.render());
    expect(calls).toBe(2);
    expect(sampleOf(g, 'nullsteer_engine_rows_total', 'nullsteer_engine_rows_total').value).toBe(20);
    expect(sampleOf(g, 'nullsteer_webhook_failures_total', 'nullsteer_webhook_failures_total').value).toBe(3);
    // Never the library's global registry.
    expect((await globalRegistry.metrics()).trim()).toBe('');
    expect(globalRegistry.getMetricsAsArray()).toEqual([]);
  });

  it('a snapshot without ingest, streams or engine reads as zeros', () => {
    const z = statusFigures({});
    expect(z.rows + z.framesAccepted + z.messages + z.engineLoad + z.losses.lost).toBe(0);
    expect(z.recording).toBe(false);
    // The simulator's stream counts blocks.
    expect(statusFigures({ streams: [{ blocks: 7, samplesAccepted: 70 }] }).framesAccepted).toBe(7);
  });

  it('row latency histogram: cumulative counts at the stated bounds', async () => {
    const m = new ServiceMetrics({ status: () => ({}) });
    for (const ms of [0.5, 3, 70, 10_000, Number.NaN, -1]) m.observeRowLatency(ms);
    const f = parsePromText(await m.render());
    const fam = 'nullsteer_engine_row_latency_seconds';
    const buckets = f.get(fam)!.samples.filter((s) => s.name === `${fam}_bucket`);
    expect(buckets.map((b) => b.labels.le)).toEqual([...ROW_LATENCY_BUCKETS_S.map(String), '+Inf']);
    // 0.5 ms ≤ every bound from 0.0005 s; 3 ms ≤ 0.005 s and up; 70 ms ≤ 0.1 s and up; 10 s only in +Inf. NaN and −1 ignored.
    const expected = [...ROW_LATENCY_BUCKETS_S, Number.POSITIVE_INFINITY].map((le) => [0.0005, 0.003, 0.07, 10].filter((x) => x <= le).length);
    expect(buckets.map((b) => b.value)).toEqual(expected);
    expect(expected.slice(0, 6)).toEqual([0, 1, 1, 1, 2, 2]);
    expect(sampleOf(f, fam, `${fam}_count`).value).toBe(4);
    expect(sampleOf(f, fam, `${fam}_sum`).value).toBeCloseTo(10.0735, 9);
  });

  it('sector Leq and events by rule: set, escaped, capped, removable', async () => {
    const m = new ServiceMetrics({ status: () => ({}) });
    expect(m.setSectorLeq('gate', -31.25)).toBe(true);
    expect(m.setSectorLeq('silent', Number.NEGATIVE_INFINITY)).toBe(true);
    expect(m.setSectorLeq('odd "name" \\ here', -40)).toBe(true);
    expect(m.setSectorLeq('gate', Number.NaN)).toBe(false);
    expect(m.countEvent('gate-loud')).toBe(true);
    expect(m.countEvent('gate-loud')).toBe(true);
    let f = parsePromText(await m.render());
    const leq = (sector: string) => sampleOf(f, 'nullsteer_sector_leq_1s_db', 'nullsteer_sector_leq_1s_db', { sector }).value;
    expect(leq('gate')).toBe(-31.25);
    expect(leq('silent')).toBe(Number.NEGATIVE_INFINITY);
    expect(leq('odd "name" \\ here')).toBe(-40);
    expect(sampleOf(f, 'nullsteer_events_total', 'nullsteer_events_total', { rule: 'gate-loud' }).value).toBe(2);

    for (let k = 3; k < MAX_SECTOR_LABELS; k++) expect(m.setSectorLeq(`s${k}`, -50)).toBe(true);
    expect(m.setSectorLeq('one-too-many', -50)).toBe(false);
    expect(m.setSectorLeq('x'.repeat(65), -50)).toBe(false);
    for (let k = 1; k < MAX_RULE_LABELS; k++) expect(m.countEvent(`r${k}`)).toBe(true);
    expect(m.countEvent('one-too-many')).toBe(false);
    f = parsePromText(await m.render());
    expect(f.get('nullsteer_sector_leq_1s_db')!.samples).toHaveLength(MAX_SECTOR_LABELS);
    expect(f.get('nullsteer_events_total')!.samples).toHaveLength(MAX_RULE_LABELS);
    expect(sampleOf(f, 'nullsteer_metrics_label_values_refused_total', 'nullsteer_metrics_label_values_refused_total', { metric: 'sector' }).value).toBe(3);
    expect(sampleOf(f, 'nullsteer_metrics_label_values_refused_total', 'nullsteer_metrics_label_values_refused_total', { metric: 'rule' }).value).toBe(1);

    m.removeSector('gate');
    m.removeRule('gate-loud');
    expect(m.setSectorLeq('one-too-many', -50)).toBe(true);
    expect(m.countEvent('one-too-many')).toBe(true);
    f = parsePromText(await m.render());
    expect(() => sampleOf(f, 'nullsteer_sector_leq_1s_db', 'nullsteer_sector_leq_1s_db', { sector: 'gate' })).toThrow();
    expect(() => sampleOf(f, 'nullsteer_events_total', 'nullsteer_events_total', { rule: 'gate-loud' })).toThrow();
  });
});
