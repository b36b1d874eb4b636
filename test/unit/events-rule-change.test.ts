/**
 * EventMonitor (server/monitor/events.ts) when a rule goes while its event is open: the event ends
 * at the last sample metered and is told like any end ('ended' to onChange, which the service
 * turns into the live message, the webhooks and the clip's post-roll), both when the rule is
 * removed and when it is replaced (the new detector counts its events from 1 again, so its first
 * event must not be taken for the old one). Levels are made up: a hop of mean square 1e-3 is
 * 10·log10(1e-3) = −30 dBFS, far above a −80 dBFS threshold.
 */
import { describe, expect, it } from 'vitest';
import { EventMonitor, type MonitorEvent } from '../../server/monitor/events.ts';
import { validateRule } from '../../shared/rules.ts';

const FS = 48_000;
const HOP = 256;

function setup() {
  const changes: { kind: string; ev: MonitorEvent }[] = [];
  const m = new EventMonitor({ sampleRateHz: FS, splOffsetDb: null, dir: null, utcOfSample: (k) => Date.UTC(2026, 11, 4, 2, 0, 0) + (k * 1000) / FS, lookOf: () => ({ azimuthDeg: 35, elevationDeg: 0 }), onChange: (kind, ev) => changes.push({ kind, ev }) });
  const rule = (db: number) => validateRule('gate-loud', { sector: 'gate', threshold: { mode: 'absolute', db }, minDurationS: 0.5, releaseS: 1 }, 10, (p, msg) => {
    throw new Error(`${p} ${msg}`);
  })!;
  let k = 0;
  const hops = (n: number) => {
    for (let i = 0; i < n; i++, k += HOP) m.hopLevel('gate', k, HOP, 1e-3);
  };
  return { m, changes, rule, hops, at: () => k };
}

describe('an open event whose rule goes', () => {
  it('ends at the last sample metered when its rule is removed', () => {
    const { m, changes, rule, hops, at } = setup();
    m.setRules([rule(-80)]);
    hops(Math.ceil(FS / HOP)); // one second: past minDurationS 0.5 s
    const started = changes.filter((c) => c.kind === 'started');
    expect(started).toHaveLength(1);
    m.setRules([]);
    const ended = changes.filter((c) => c.kind === 'ended');
    expect(ended).toHaveLength(1);
    expect(ended[0].ev).toMatchObject({ id: started[0].ev.id, state: 'ended', endSample: at() });
    expect(ended[0].ev.endUtc).toBe(new Date(Date.UTC(2026, 11, 4, 2, 0, 0) + (at() * 1000) / FS).toISOString());
    expect(m.list().map((e) => e.state)).toEqual(['ended']);
    expect(m.counters).toMatchObject({ started: 1, ended: 1 });
    hops(10);
    expect(changes.filter((c) => c.kind === 'ended')).toHaveLength(1);
  });

  it('ends when its rule is replaced, and the new rule makes a new event', () => {
    const { m, changes, rule, hops } = setup();
    m.setRules([rule(-80)]);
    hops(Math.ceil(FS / HOP));
    const first = changes.find((c) => c.kind === 'started')!.ev;
    // The same rule again changes nothing.
    m.setRules([rule(-80)]);
    expect(changes.filter((c) => c.kind === 'ended')).toHaveLength(0);
    m.setRules([rule(-70)]);
    expect(changes.filter((c) => c.kind === 'ended').map((c) => c.ev.id)).toEqual([first.id]);
    hops(Math.ceil(FS / HOP));
    const starts = changes.filter((c) => c.kind === 'started').map((c) => c.ev);
    expect(starts).toHaveLength(2);
    expect(starts[1].id).not.toBe(first.id);
    expect(starts[1].startSample).toBeGreaterThan(first.startSample);
    expect(m.list().map((e) => e.state)).toEqual(['ended', 'active']);
  });
});
