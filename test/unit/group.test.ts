import { describe, expect, it } from 'vitest';
import { correctionFactors } from '../../server/dsp/calibration.ts';
import { GroupMerger, memberDelaysUs, type GroupMember, type GroupMergerOptions } from '../../server/ingest/group.ts';
import type { Block, InputMapping } from '../../shared/types.ts';
import { delayedNoisePair } from '../helpers/delayed-noise.ts';
import { mulberry32, TestRandom } from '../helpers/random.ts';

const FS = 48_000;

/** Known value of array position p at sample s, never zero (a zero means "filled"), float32-exact. */
function value(s: number, p: number): number {
  return Math.fround(((s * 7 + p * 13) % 997) / 1000 + 0.001);
}

/**
 * One block of a member's own stream: channel c carries the position it feeds (value(), so the
 * merged array can be checked bit for bit); channels that feed no position carry −1, which must
 * never reach the output.
 */
function streamBlock(mem: GroupMember, streamChannels: number, s: number, n: number, flags: { gap?: boolean; discontinuity?: boolean } = {}): Block {
  const data = new Float32Array(streamChannels * n);
  if (!flags.gap) {
    for (let c = 0; c < streamChannels; c++) {
      const i = mem.channels.indexOf(c);
      for (let j = 0; j < n; j++) data[c * n + j] = i >= 0 ? value(s + j, mem.positions[i]) : -1;
    }
  }
  return { streamId: 7, sampleIndex: s, sampleRateHz: FS, channels: streamChannels, frames: n, data, gap: !!flags.gap, discontinuity: !!flags.discontinuity };
}

interface Delivery {
  member: number;
  block: Block;
  atMs: number;
}

/** Blocks of `n` samples over [from, to) delivered in real time: each arrives when its last sample exists, plus latencyMs. */
function realTime(member: number, mem: GroupMember, streamChannels: number, from: number, to: number, n: number, latencyMs = 2): Delivery[] {
  const out: Delivery[] = [];
  for (let s = from; s < to; s += n) {
    const len = Math.min(n, to - s);
    out.push({ member, block: streamBlock(mem, streamChannels, s, len), atMs: ((s + len) / FS) * 1000 + latencyMs });
  }
  return out;
}

/** Pushes in arrival order (stable for equal times), ticking at every arrival. */
function deliver(g: GroupMerger, deliveries: Delivery[]): void {
  const order = deliveries.map((d, i) => [d, i] as const).sort((a, b) => a[0].atMs - b[0].atMs || a[1] - b[1]);
  for (const [d] of order) {
    g.tick(d.atMs);
    g.push(d.member, d.block, d.atMs);
  }
}

function collector() {
  const blocks: Block[] = [];
  return { blocks, sink: (b: Block) => void blocks.push(b) };
}

/**
 * Checks the merged timeline: sample indices contiguous (except at a discontinuity), every real
 * position bit-exact, every absent position zero. Returns, per position, the absent samples.
 */
function checkTimeline(blocks: Block[], m: number, maxFrames: number): { start: number; end: number; absent: number[]; gapSamples: number } {
  expect(blocks.length).toBeGreaterThan(0);
  let next = blocks[0].sampleIndex;
  const absent = new Array<number>(m).fill(0);
  let gapSamples = 0;
  for (const b of blocks) {
    if (!b.discontinuity) expect(b.sampleIndex).toBe(next);
    expect(b.channels).toBe(m);
    expect(b.frames).toBeGreaterThan(0);
    expect(b.frames).toBeLessThanOrEqual(maxFrames);
    expect(b.data.length).toBe(m * b.frames);
    let real = false;
    for (let p = 0; p < m; p++) {
      const off = b.absent?.[p] === 1;
      if (off) absent[p] += b.frames;
      else real = true;
      for (let j = 0; j < b.frames; j++) {
        const got = b.data[p * b.frames + j];
        const want = off ? 0 : value(b.sampleIndex + j, p);
        if (got !== want) expect(got, `position ${p}, sample ${b.sampleIndex + j}`).toBe(want);
      }
    }
    expect(b.gap).toBe(!real);
    if (b.gap) gapSamples += b.frames;
    next = b.sampleIndex + b.frames;
  }
  return { start: blocks[0].sampleIndex, end: next, absent, gapSamples };
}

/** Four 8-channel units feeding a 32-position array, interleaved and in reverse channel order. */
function fourUnits(): GroupMember[] {
  return [0, 1, 2, 3].map((k) => ({
    name: `unit-${'abcd'[k]}`,
    channels: [7, 6, 5, 4, 3, 2, 1, 0],
    positions: [0, 1, 2, 3, 4, 5, 6, 7].map((c) => 4 * c + k),
  }));
}

function merger(opts: Partial<GroupMergerOptions> & { members: GroupMember[] }, sink: (b: Block) => void): GroupMerger {
  const m = opts.members.reduce((a, x) => a + x.positions.length, 0);
  return new GroupMerger({ channels: m, sampleRateHz: FS, holdMs: 200, ...opts }, sink);
}

describe('GroupMerger: several units, one array', () => {
  it('four 8-channel units with different starts and jittered delivery give the 32-channel original bit for bit', () => {
    for (const seed of [1, 2, 3]) {
      const rand = mulberry32(seed);
      const members = fourUnits();
      const firsts = [1000, 1137, 1051, 1300];
      const end = 1000 + 2 * FS;
      const { blocks, sink } = collector();
      const g = merger({ members, maxBlockFrames: 256 }, sink);
      const deliveries: Delivery[] = [];
      members.forEach((mem, k) => {
        // Each unit cuts its stream in its own block sizes (32–700 samples); each block arrives
        // 1–41 ms after its last sample exists, never before the unit's previous block.
        let last = 0;
        for (let s = firsts[k]; s < end; ) {
          const n = Math.min(end - s, 32 + Math.floor(rand() * 669));
          const at = Math.max(last, ((s + n) / FS) * 1000 + 1 + 40 * rand());
          last = at;
          deliveries.push({ member: k, block: streamBlock(mem, 10, s, n), atMs: at });
          s += n;
        }
      });
      deliver(g, deliveries);
      g.flush();
      const tl = checkTimeline(blocks, 32, 256);
      // The start is the largest first sample; every sample from there to the end, none absent.
      expect(tl.start).toBe(1300);
      expect(tl.end).toBe(end);
      expect(tl.absent.every((a) => a === 0)).toBe(true);
      expect(blocks.every((b) => b.absent === null && !b.discontinuity)).toBe(true);
      const st = g.status(deliveries.reduce((a, d) => Math.max(a, d.atMs), 0));
      expect(st.releasedSamples).toBe(end - 1300);
      expect(st.holdReleases).toBe(0);
      expect(st.members.map((x) => x.beforeStart)).toEqual(firsts.map((f) => 1300 - f));
      expect(st.members.map((x) => x.samples)).toEqual(firsts.map((f) => end - f));
      expect(st.members.every((x) => x.absentSamples === 0 && x.lateSamples === 0 && x.lagMs === 0)).toBe(true);
    }
  });

  it('a member that stops is absent (flags, counters), the others continue, and it rejoins when it resumes', () => {
    for (const resume of ['gap blocks', 'discontinuity'] as const) {
      const members = fourUnits();
      const { blocks, sink } = collector();
      const g = merger({ members, silentAfterMs: 400 }, sink);
      const stopAt = FS; // unit-c stops after 1 s …
      const resumeAt = 2 * FS; // … and is back at 2 s
      const end = 3 * FS;
      const d: Delivery[] = [];
      for (const k of [0, 1, 3]) d.push(...realTime(k, members[k], 8, 0, end, 480));
      d.push(...realTime(2, members[2], 8, 0, stopAt, 480));
      const back = realTime(2, members[2], 8, resumeAt, end, 480);
      if (resume === 'gap blocks') {
        // Its sequencer fills the outage with zeros (pieces of 4096) just before the first new block.
        for (let s = stopAt; s < resumeAt; s += 4096) {
          d.push({ member: 2, block: streamBlock(members[2], 8, s, Math.min(4096, resumeAt - s), { gap: true }), atMs: back[0].atMs });
        }
      } else back[0].block.discontinuity = true;
      d.push(...back);
      // Status in the middle of the outage.
      deliver(g, d.filter((x) => x.atMs <= 1500));
      const mid = g.status(1500);
      const c = mid.members[2];
      expect(c.lastFrameAgoS).toBeCloseTo((1500 - (stopAt / FS) * 1000 - 2) / 1000, 6);
      expect(c.warning).toMatch(/no frames for 0\.5 s/);
      expect(c.lagMs).toBeCloseTo(500 - 10, 6);
      expect(mid.holdReleases).toBeGreaterThan(0);
      deliver(g, d.filter((x) => x.atMs > 1500));
      g.flush();
      const tl = checkTimeline(blocks, 32, 1024);
      expect(tl.start).toBe(0);
      expect(tl.end).toBe(end);
      // Exactly unit-c's positions, exactly over [1 s, 2 s).
      for (let p = 0; p < 32; p++) expect(tl.absent[p], `position ${p}`).toBe(p % 4 === 2 ? resumeAt - stopAt : 0);
      for (const b of blocks) {
        const inOutage = b.sampleIndex >= stopAt && b.sampleIndex < resumeAt;
        expect(b.absent?.[2] === 1).toBe(inOutage);
      }
      const st = g.status(3000);
      expect(st.members[2].absentSpans).toBe(1);
      expect(st.members[2].absentSamples).toBe(resumeAt - stopAt);
      expect(st.members[2].lateSamples).toBe(0);
      expect(st.members[2].rejoins).toBe(resume === 'discontinuity' ? 1 : 0);
      expect(st.members[2].gapSamples).toBe(resume === 'gap blocks' ? resumeAt - stopAt : 0);
      for (const k of [0, 1, 3]) expect(st.members[k].absentSamples).toBe(0);
      expect(st.releasedSamples).toBe(end);
    }
  });

  it('gap blocks: a member\'s gap is absent for exactly its span; when every member has a gap the output is a gap', () => {
    const members = fourUnits();
    const { blocks, sink } = collector();
    const g = merger({ members }, sink);
    const d: Delivery[] = [];
    for (let k = 0; k < 4; k++) {
      for (const x of realTime(k, members[k], 8, 0, FS, 480)) {
        const s = x.block.sampleIndex;
        if ((k === 1 && s === 9600) || s === 19200) x.block = streamBlock(members[k], 8, s, 480, { gap: true });
        d.push(x);
      }
    }
    deliver(g, d);
    g.flush();
    const tl = checkTimeline(blocks, 32, 1024);
    expect(tl.gapSamples).toBe(480);
    for (let p = 0; p < 32; p++) expect(tl.absent[p]).toBe(p % 4 === 1 ? 960 : 480);
    const gapBlock = blocks.find((b) => b.gap)!;
    expect(gapBlock.sampleIndex).toBe(19200);
    const st = g.status(1100);
    expect(st.members.map((x) => x.gaps)).toEqual([1, 2, 1, 1]);
    expect(st.members[1].absentSpans).toBe(2);
    expect(st.holdReleases).toBe(0);
  });

  it('a member running far ahead is held only a ring ahead: the others are absent, memory stays bounded, then the group follows the live ones', () => {
    const members = fourUnits();
    const { blocks, sink } = collector();
    const g = merger({ members, holdMs: 100 }, sink);
    expect(g.bufferSamples).toBe(16384); // next power of two ≥ 48·(100 + 100) + 1024
    const d: Delivery[] = [];
    for (let k = 0; k < 4; k++) d.push(...realTime(k, members[k], 8, 0, FS / 2, 480));
    deliver(g, d);
    // unit-a dumps 10 s at once (a replay running flat out).
    let worstAhead = 0;
    for (let s = FS / 2; s < FS / 2 + 10 * FS; s += 4800) {
      g.push(0, streamBlock(members[0], 8, s, 4800), 510);
      const st = g.status(510);
      worstAhead = Math.max(worstAhead, st.leadSample! - st.nextSample!);
    }
    expect(worstAhead).toBeLessThanOrEqual(g.bufferSamples);
    const mid = g.status(510);
    expect(mid.forcedReleases).toBeGreaterThan(0);
    expect(mid.nextSample).toBe(FS / 2 + 10 * FS - g.bufferSamples);
    // The others, still in real time, are now 10 s behind: off the clock, dropped, counted.
    const later: Delivery[] = [];
    for (let k = 1; k < 4; k++) later.push(...realTime(k, members[k], 8, FS / 2, 3 * FS, 480));
    deliver(g, later.filter((x) => x.atMs < 1000));
    const st = g.status(1000);
    for (let k = 1; k < 4; k++) {
      expect(st.members[k].offClock).toBe(true);
      expect(st.members[k].offClockBlocks).toBeGreaterThan(0);
      expect(st.members[k].warning).toMatch(/off the group's clock/);
    }
    // unit-a has been silent longer than silentAfterMs (1 s): the live members agree on their
    // clock, so the group follows them (a discontinuity), unit-a absent.
    deliver(g, later.filter((x) => x.atMs >= 1000));
    g.tick(3100);
    const end = g.status(3100);
    expect(end.resyncs).toBe(1);
    const disc = blocks.filter((b) => b.discontinuity);
    expect(disc).toHaveLength(1);
    expect(disc[0].sampleIndex).toBeLessThan(3 * FS);
    const after = blocks.slice(blocks.indexOf(disc[0]));
    const tl = checkTimeline(after, 32, 1024);
    for (let p = 0; p < 32; p++) expect(tl.absent[p]).toBe(p % 4 === 0 ? tl.end - tl.start : 0);
    checkTimeline(blocks.slice(0, blocks.indexOf(disc[0])), 32, 1024);
  });

  it('an off-clock member (a unit restarted on its own clock) is absent and counted, and rejoins when it is back on the clock', () => {
    const members = fourUnits();
    const { blocks, sink } = collector();
    const g = merger({ members }, sink);
    const d: Delivery[] = [];
    for (const k of [0, 2, 3]) d.push(...realTime(k, members[k], 8, 0, 3 * FS, 480));
    d.push(...realTime(1, members[1], 8, 0, FS, 480));
    // From 1 s to 2 s unit-b numbers its samples from 0 again (arriving at the right times) …
    const own = realTime(1, members[1], 8, 0, FS, 480).map((x) => ({ ...x, atMs: x.atMs + 1000 }));
    own[0].block.discontinuity = true;
    d.push(...own);
    // … then it is locked to the group clock again.
    const back = realTime(1, members[1], 8, 2 * FS, 3 * FS, 480);
    back[0].block.discontinuity = true;
    d.push(...back);
    deliver(g, d.filter((x) => x.atMs < 1500));
    const mid = g.status(1500);
    expect(mid.members[1].offClock).toBe(true);
    expect(mid.members[1].lagMs).toBeNull();
    expect(mid.members[1].warning).toMatch(/off the group's clock \(its samples are -0\.8 s from the others'\)/);
    deliver(g, d.filter((x) => x.atMs >= 1500));
    g.flush();
    const tl = checkTimeline(blocks, 32, 1024);
    expect(tl.end).toBe(3 * FS);
    for (let p = 0; p < 32; p++) expect(tl.absent[p]).toBe(p % 4 === 1 ? FS : 0);
    const st = g.status(3100);
    expect(st.members[1]).toMatchObject({ offClock: false, offClockBlocks: 100, offClockSamples: FS, rejoins: 1, discontinuities: 2, absentSpans: 1, absentSamples: FS });
    expect(st.resyncs).toBe(0);
  });

  it('every member jumping together resynchronises the group: one discontinuity, nothing lost on either side', () => {
    const members = fourUnits();
    const { blocks, sink } = collector();
    const g = merger({ members }, sink);
    const jump = 10_000_000;
    const d: Delivery[] = [];
    for (let k = 0; k < 4; k++) {
      d.push(...realTime(k, members[k], 8, 0, FS, 480));
      const after = realTime(k, members[k], 8, jump, jump + FS, 480).map((x) => ({ ...x, atMs: x.atMs - (jump / FS) * 1000 + 1000 }));
      after[0].block.discontinuity = true;
      d.push(...after);
    }
    deliver(g, d);
    g.flush();
    const disc = blocks.findIndex((b) => b.discontinuity);
    expect(disc).toBeGreaterThan(0);
    const before = checkTimeline(blocks.slice(0, disc), 32, 1024);
    expect([before.start, before.end]).toEqual([0, FS]);
    const after = checkTimeline(blocks.slice(disc), 32, 1024);
    // The first three units' first blocks on the new clock were dropped as off-clock while a unit was
    // still on the old one; the new start is the largest first sample, as at the beginning.
    expect(after.start).toBe(jump + 480);
    expect(after.end).toBe(jump + FS);
    expect(after.absent.every((a) => a === 0)).toBe(true);
    const st = g.status(2100);
    expect(st.resyncs).toBe(1);
    expect(blocks.filter((b) => b.discontinuity)).toHaveLength(1);
    expect(st.members.map((x) => x.offClockSamples)).toEqual([480, 480, 480, 0]);
  });

  it('a member that arrives after the start joins as absent until present; earlier samples count as before the start', () => {
    const members = fourUnits();
    const { blocks, sink } = collector();
    const g = merger({ members }, sink);
    const d: Delivery[] = [];
    for (const k of [0, 1, 2]) d.push(...realTime(k, members[k], 8, 0, 2 * FS, 480));
    // unit-d's first block arrives at 0.5 s, carrying samples from 0.49 s on.
    d.push(...realTime(3, members[3], 8, 23_520, 2 * FS, 480));
    deliver(g, d.filter((x) => x.atMs < 400));
    expect(g.status(400).state).toBe('running');
    expect(g.status(400).members[3].warning).toMatch(/no frames yet/);
    deliver(g, d.filter((x) => x.atMs >= 400));
    g.flush();
    const tl = checkTimeline(blocks, 32, 1024);
    expect([tl.start, tl.end]).toEqual([0, 2 * FS]);
    // Absent from the start up to its first sample: the hold released [0, 14 400) before its first
    // block came (at 502 ms the spans of up to 302 ms had waited 200 ms), and [14 400, 23 520) is
    // the stretch before its first sample.
    const st = g.status(2100);
    expect(st.members[3]).toMatchObject({ absentSamples: 23_520, absentSpans: 1, lateSamples: 0, beforeStart: 0 });
    for (let p = 0; p < 32; p++) expect(tl.absent[p]).toBe(p % 4 === 3 ? 23_520 : 0);
  });

  it('refuses blocks it cannot map, by reason, in plain words', () => {
    const members = fourUnits();
    const { blocks, sink } = collector();
    const g = merger({ members }, sink);
    g.push(0, { ...streamBlock(members[0], 8, 0, 480), sampleRateHz: 44_100 }, 10);
    g.push(1, streamBlock({ ...members[1], channels: [0, 1, 2, 3, 4, 5] }, 6, 0, 480), 10);
    g.push(2, { ...streamBlock(members[2], 8, 0, 480), data: new Float32Array(10) }, 10);
    g.push(3, { ...streamBlock(members[3], 8, 0, 480), sampleIndex: -5 }, 10);
    const st = g.status(20);
    expect(st.members[0].dropped).toEqual({ channels: 0, rate: 1, malformed: 0 });
    expect(st.members[0].lastDrop).toBe('member unit-a: 44100 Hz blocks refused: the array runs at 48000 Hz');
    expect(st.members[1].dropped.channels).toBe(1);
    expect(st.members[1].lastDrop).toBe('member unit-b: 6-channel blocks refused: its mapping reads channel 7');
    expect(st.members[1].warning).toMatch(/6-channel blocks refused/);
    expect(st.members[2].dropped.malformed).toBe(1);
    expect(st.members[3].dropped.malformed).toBe(1);
    expect(st.state).toBe('waiting');
    expect(blocks).toHaveLength(0);
    expect(() => g.push(4, streamBlock(members[0], 8, 0, 480))).toThrow(RangeError);
  });

  it('validates the mapping', () => {
    const sink = () => {};
    const base = { channels: 4, sampleRateHz: FS, holdMs: 100 };
    expect(() => new GroupMerger({ ...base, members: [{ name: 'a', channels: [0, 1], positions: [0, 1] }, { name: 'b', channels: [0, 1], positions: [1, 2] }] }, sink)).toThrow(/position 1 is already fed/);
    expect(() => new GroupMerger({ ...base, members: [{ name: 'a', channels: [0, 1, 2], positions: [0, 1, 2] }] }, sink)).toThrow(/no member feeds position 3/);
    expect(() => new GroupMerger({ ...base, members: [{ name: 'a', channels: [0, 0, 1, 2], positions: [0, 1, 2, 3] }] }, sink)).toThrow(RangeError);
    expect(() => new GroupMerger({ ...base, members: [{ name: 'a', channels: [0, 1, 2, 3], positions: [0, 1, 2, 4] }] }, sink)).toThrow(/outside/);
    expect(() => new GroupMerger({ ...base, holdMs: 0, members: [{ name: 'a', channels: [0, 1, 2, 3], positions: [0, 1, 2, 3] }] }, sink)).toThrow(RangeError);
  });
});

describe('GroupMerger: offset and drift between members', () => {
  it('reference channels that feed no position: GCC-PHAT reads a 100 µs offset within ±2 µs and warns', () => {
    // Two 3-channel units; channel 2 of each carries the shared reference and feeds no position.
    const members: GroupMember[] = [
      { name: 'unit-a', channels: [0, 1], positions: [0, 1], referenceChannel: 2 },
      { name: 'unit-b', channels: [1, 0], positions: [2, 3], referenceChannel: 2 },
    ];
    const n = 8192 * 10;
    const { x, y } = delayedNoisePair(11, n, () => 4.8, 20); // 4.8 samples = 100 µs at 48 kHz
    const refs = [x, y];
    const { blocks, sink } = collector();
    const g = new GroupMerger({ channels: 4, sampleRateHz: FS, holdMs: 200, members }, sink);
    const d: Delivery[] = [];
    for (let k = 0; k < 2; k++) {
      for (const r of realTime(k, members[k], 3, 0, n, 480)) {
        const s = r.block.sampleIndex;
        r.block.data.set(refs[k].subarray(s, s + r.block.frames), 2 * r.block.frames);
        d.push(r);
      }
    }
    deliver(g, d);
    g.flush();
    const tl = checkTimeline(blocks, 4, 1024);
    expect([tl.start, tl.end]).toEqual([0, n]);
    const st = g.status((n / FS) * 1000 + 10);
    expect(st.referenceMember).toBe('unit-a');
    expect(st.members[0].reference).toBeNull();
    const r = st.members[1].reference!;
    expect(r.windows).toBe(10);
    expect(Math.abs(r.offsetUs - 100)).toBeLessThan(2);
    expect(r.quality).toBeGreaterThan(0.9);
    expect(st.members[1].warning).toMatch(/^offset \+100\.\d µs from unit-a exceeds 16\.7 µs/);
  });

  it('a reference channel that also feeds a position works the same', () => {
    const members: GroupMember[] = [
      { name: 'a', channels: [0], positions: [0], referenceChannel: 0 },
      { name: 'b', channels: [0], positions: [1], referenceChannel: 0 },
    ];
    const n = 8192 * 4;
    const { x, y } = delayedNoisePair(12, n, () => -2.4, 20);
    const g = new GroupMerger({ channels: 2, sampleRateHz: FS, holdMs: 200, members }, () => {});
    for (let s = 0; s < n; s += 480) {
      const at = ((s + 480) / FS) * 1000;
      g.push(0, { streamId: 1, sampleIndex: s, sampleRateHz: FS, channels: 1, frames: 480, data: x.slice(s, s + 480), gap: false, discontinuity: false }, at);
      g.push(1, { streamId: 2, sampleIndex: s, sampleRateHz: FS, channels: 1, frames: 480, data: y.slice(s, s + 480), gap: false, discontinuity: false }, at);
    }
    const r = g.status(1000).members[1].reference!;
    expect(Math.abs(r.offsetUs + 50)).toBeLessThan(2);
  });

  it('arrival timing (method a): a unit at +20 ppm reads +20 ± 2 ppm against the first after 60 s of jittered packets', () => {
    const members = fourUnits().slice(0, 2).map((m, k) => ({ ...m, positions: m.positions.map((_, i) => 8 * k + i) }));
    const g = new GroupMerger({ channels: 16, sampleRateHz: FS, holdMs: 200, members }, () => {});
    const rng = new TestRandom(21);
    const ppm = [0, 20];
    for (let s = 0; s < 60 * FS; s += 240) {
      for (let k = 0; k < 2; k++) {
        const sentMs = ((s / FS) * 1000) / (1 + ppm[k] * 1e-6);
        g.timing(k, s, sentMs + 3 - 3 * Math.log(1 - rng.uniform()));
      }
    }
    const st = g.status(60_000);
    expect(st.driftBaseMember).toBe('unit-a');
    expect(st.members[0].drift!.relativePpm).toBeNull();
    const d = st.members[1].drift!;
    expect(Math.abs(d.relativePpm! - 20)).toBeLessThan(2);
    expect(d.spanS).toBeGreaterThan(58);
    expect(st.members[1].warning).toMatch(/packets arrive at \+(19|20|21)\.\d ppm against unit-a/);
  });
});

describe('memberDelaysUs', () => {
  it("gives each position its member's offsetUs, 0 where none", () => {
    const inputs: InputMapping[] = [
      { source: 'unit-a', channels: [0, 1], positions: [0, 2] },
      { source: 'unit-b', channels: [0, 1], positions: [1, 3], offsetUs: 23.5 },
      { source: 'stream:9', channels: [3], positions: [4], offsetUs: -8 },
    ];
    expect(memberDelaysUs(inputs, 5)).toEqual([0, 23.5, 0, 23.5, -8]);
    expect(memberDelaysUs([], 2)).toEqual([0, 0]);
    expect(() => memberDelaysUs(inputs, 4)).toThrow(/position 4 is outside/);
  });

  it('a measured offset set as offsetUs undoes the lag through the calibration delay (the signs agree)', () => {
    // ReferenceOffset reads +100 µs for a member lagging 100 µs (drift.test.ts); as offsetUs it becomes
    // that member's positions' extra delay, and the front end multiplies bin f by e^{+j2πfd}
    // (server/dsp/calibration.ts), which cancels the lag's e^{−j2πfd}.
    const delays = memberDelaysUs([{ source: 'a', channels: [0], positions: [0] }, { source: 'b', channels: [0], positions: [1], offsetUs: 100 }], 2);
    const f = 1000;
    const c = correctionFactors({ gainDb: [0, 0], delayUs: delays }, 2, [f])!;
    const lag = -2 * Math.PI * f * 100e-6;
    const re = c[2] * Math.cos(lag) - c[3] * Math.sin(lag);
    const im = c[2] * Math.sin(lag) + c[3] * Math.cos(lag);
    expect(re).toBeCloseTo(1, 12);
    expect(im).toBeCloseTo(0, 12);
    expect([c[0], c[1]]).toEqual([1, 0]);
  });
});
