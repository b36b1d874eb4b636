/**
 * What the Input panel and the status strip show (client/src/lib/input-status.ts), from status
 * documents: one as a live server answered `GET /api/status` (a network source, five 24-channel
 * frames sent to the 4-channel square-4 array; copied from the server's answer and trimmed), one
 * from the simulator, one from a server without the input fields, and one with the capture, RTP
 * and merged-array parts in the shape the status document gives them. The reason codes are
 * checked against the server's own lists (server/ingest/ingest-hub.ts, shared/frame.ts): every code
 * the server can count has plain words.
 */
import { describe, expect, it } from 'vitest';
import { fmtAgo, fmtRanges, fmtSigned, inputCounts, REASON_TEXT, reasonCounts, reasonText, summariseInput, watchRefusals, type RefusalState } from '../../client/src/lib/input-status.ts';
import { summariseStatus } from '../../client/src/lib/status-summary.ts';
import { INGEST_REJECT_REASONS, STREAM_REJECT_REASONS } from '../../server/ingest/ingest-hub.ts';
import { FRAME_REJECT_REASONS } from '../../shared/frame.ts';

const zero = (keys: readonly string[]) => Object.fromEntries(keys.map((k) => [k, 0]));

/** A network source that has received only refused frames (a live server's answer, trimmed). */
function refusedDoc(): Record<string, any> {
  return {
    source: { kind: 'network' },
    input: { sampleRateHz: 48000, encodings: ['int16', 'int24', 'int32', 'float32'], selectedStreamId: null, waiting: true, mode: 'latest-active', selected: null, switches: 0, lastSwitch: null, eligibleAfterMs: 100, switchAfterS: 2, channelsOut: [] },
    streams: [
      {
        streamId: 7,
        selected: false,
        transport: 'websocket',
        remote: '127.0.0.1:51222',
        sampleRateHz: 48000,
        channels: 4,
        encoding: null,
        framesAccepted: 0,
        samplesAccepted: 0,
        framesLost: 0,
        gapSamples: 0,
        rejected: { ...zero(STREAM_REJECT_REASONS), channel_mismatch: 5 },
        inputRateHz: 0,
        lastFrameAgoS: 0.2949180190000002,
        lastFrameAtS: 1.5451669769999998,
        runSamples: 0,
        eligible: false,
        member: false,
      },
    ],
    ingest: {
      messages: 5,
      rejected: zero([...INGEST_REJECT_REASONS, ...STREAM_REJECT_REASONS]),
      lastRejected: { reason: 'channel_mismatch', detail: '24-channel frames refused: the array has 4', transport: 'websocket', streamId: 7, atS: 1.5451669769999998 },
    },
    listeners: { http: { host: '127.0.0.1', port: 35635 }, udp: { port: 33273 }, websocket: { path: '/ingest', connections: 1 } },
  };
}

/** Two streams, 6 processed after a hand switch from 5, 9 bytes of garbage refused on UDP. */
function switchedDoc(): Record<string, any> {
  const stream = (streamId: number, selected: boolean, remote: string, atS: number, agoS: number, samples: number) => ({
    streamId,
    selected,
    transport: 'websocket',
    remote,
    channels: 4,
    encoding: 'float32',
    framesAccepted: samples / 480,
    samplesAccepted: samples,
    framesLost: 0,
    gapSamples: 0,
    rejected: zero(STREAM_REJECT_REASONS),
    lastFrameAgoS: agoS,
    lastFrameAtS: atS,
    eligible: true,
    member: false,
    inputRateHz: 48000,
  });
  return {
    source: { kind: 'network' },
    input: {
      sampleRateHz: 48000,
      encodings: ['float32'],
      selectedStreamId: 6,
      waiting: false,
      mode: 'latest-active',
      selected: { streamId: 6, transport: 'websocket', remote: '127.0.0.1:40002', lastFrameAgoS: 0.01 },
      switches: 2,
      lastSwitch: { from: 5, to: 6, reason: 'manual', atS: 10 },
      eligibleAfterMs: 100,
      switchAfterS: 2,
      channelsOut: [],
    },
    streams: [stream(5, false, '127.0.0.1:40001', 12.49, 0.01, 48000 * 12), stream(6, true, '127.0.0.1:40002', 12.49, 0.01, 48000 * 3)],
    ingest: {
      messages: 3000,
      rejected: { ...zero([...INGEST_REJECT_REASONS, ...STREAM_REJECT_REASONS]), bad_magic: 2, short_header: 1 },
      lastRejected: { reason: 'bad_magic', detail: 'magic 0x64726167', transport: 'udp', streamId: null, atS: 7.5 },
    },
  };
}

describe('reason codes in plain words', () => {
  it('has words for every code the server counts, and only for those', () => {
    // The server's lists: decoding (shared/frame.ts), transports and the stream table, and the
    // stream checks (server/ingest/ingest-hub.ts).
    const server = new Set<string>([...FRAME_REJECT_REASONS, ...INGEST_REJECT_REASONS, ...STREAM_REJECT_REASONS]);
    expect(new Set(Object.keys(REASON_TEXT))).toEqual(server);
    // The brief's list of codes, written out by hand.
    const listed = 'rate_mismatch channel_mismatch encoding_mismatch non_finite beyond_bound out_of_range ahead_of_clock resync_limited short_header bad_magic bad_version bad_header_length bad_encoding bad_field truncated trailing_bytes too_many_streams not_binary too_large queue_full'.split(' ');
    expect(new Set(listed)).toEqual(server);
    for (const code of server) {
      const t = reasonText(code);
      expect(t.label.length, code).toBeGreaterThan(0);
      expect(t.label, code).not.toContain('_');
      expect(t.explain.length, code).toBeGreaterThan(t.label.length - 1);
    }
    expect(reasonText('channel_mismatch').label).toBe('wrong channel count');
  });

  it('reads an unknown code (a newer server, an RTP reason) as its words', () => {
    expect(reasonText('payload_type_mismatch')).toEqual({ label: 'payload type mismatch', explain: 'payload type mismatch' });
    expect(reasonText('toString').label).toBe('toString');
  });

  it('lists only non-zero counts, largest first', () => {
    expect(reasonCounts({ a_b: 1, bad_magic: 3, truncated: 0, short_header: 3, junk: 'x', neg: Number.NaN })).toEqual([
      { reason: 'bad_magic', count: 3, ...REASON_TEXT.bad_magic },
      { reason: 'short_header', count: 3, ...REASON_TEXT.short_header },
      { reason: 'a_b', count: 1, label: 'a b', explain: 'a b' },
    ]);
    expect(reasonCounts(null)).toEqual([]);
    expect(reasonCounts([1, 2])).toEqual([]);
  });
});

describe('summariseInput', () => {
  it('a network source with only refused frames: waiting, no stream processed, the refusal counted with the server\'s detail', () => {
    const v = summariseInput(refusedDoc());
    expect(v).toMatchObject({ sourceKind: 'network', live: true, waiting: true, mode: 'latest-active', selectedStreamId: null, selected: null, lastSwitch: null, eligibleAfterMs: 100, switchAfterS: 2 });
    expect(v.refused.total).toBe(5);
    expect(v.refused.byReason).toEqual([{ reason: 'channel_mismatch', count: 5, label: 'wrong channel count', explain: REASON_TEXT.channel_mismatch.explain }]);
    expect(v.refused.last).toMatchObject({ reason: 'channel_mismatch', label: 'wrong channel count', detail: '24-channel frames refused: the array has 4', transport: 'websocket', streamId: 7 });
    // Refused at 1.545 s on the ingest's clock, which stands at 1.545 + 0.295 s now.
    expect(v.refused.last!.agoS).toBeCloseTo(0.2949, 4);
    expect(v.streams).toHaveLength(1);
    expect(v.streams[0]).toMatchObject({ streamId: 7, selected: false, transport: 'websocket', remote: '127.0.0.1:51222', refused: 5, framesAccepted: 0, eligible: false });
    expect(v.choosable).toEqual([7]);
    expect(v.listening).toEqual(['udp port 33273', 'websocket /ingest']);
    expect(inputCounts(v)).toEqual({ accepted: 0, refused: 5 });
  });

  it('the strip no longer takes an unchosen stream for the processed one (no "lost 0 · gaps 0" for it)', () => {
    const s = summariseStatus(refusedDoc());
    expect(s.framesLost).toBeNull();
    expect(s.gapSamples).toBeNull();
    expect(s.inputRateHz).toBeNull();
  });

  it('a processed stream: where it comes from, how it was chosen, the last switch and how long ago', () => {
    const v = summariseInput(switchedDoc());
    expect(v.waiting).toBe(false);
    expect(v.selected).toEqual({ streamId: 6, transport: 'websocket', remote: '127.0.0.1:40002', lastFrameAgoS: 0.01 });
    expect(v.switches).toBe(2);
    // Switched at 10 s; the ingest's clock is 12.49 + 0.01 = 12.5 s.
    expect(v.lastSwitch).toMatchObject({ from: 5, to: 6, reason: 'manual', why: 'chosen by hand', atS: 10 });
    expect(v.lastSwitch!.agoS).toBeCloseTo(2.5, 9);
    expect(v.choosable).toEqual([5, 6]);
    // Refusals before any stream: the ingest-wide counts, and the last one's own words.
    expect(v.refused.total).toBe(3);
    expect(v.refused.byReason.map((r) => [r.reason, r.count])).toEqual([['bad_magic', 2], ['short_header', 1]]);
    expect(v.refused.last).toMatchObject({ reason: 'bad_magic', label: 'not a nullsteer frame', detail: 'magic 0x64726167', transport: 'udp', streamId: null });
    expect(v.refused.last!.agoS).toBeCloseTo(5, 9);
    expect(inputCounts(v)).toEqual({ accepted: 48000 * 15, refused: 3 });
    const s = summariseStatus(switchedDoc());
    expect(s.inputRateHz).toBe(48000);
  });

  it('a switch because the processed stream fell silent says so', () => {
    const d = switchedDoc();
    d.input.lastSwitch = { from: 5, to: 6, reason: 'silent', atS: 10 };
    expect(summariseInput(d).lastSwitch!.why).toBe('stream 5 silent for 2 s');
    d.input.lastSwitch = { from: null, to: 5, reason: 'first', atS: 0.3 };
    expect(summariseInput(d).lastSwitch!.why).toBe('first stream to become eligible');
  });

  it('adds each stream\'s refusals to the ingest-wide ones, each counted once', () => {
    const d = switchedDoc();
    d.streams[0].rejected.rate_mismatch = 4;
    d.streams[1].rejected.rate_mismatch = 1;
    d.ingest.rejected.rate_mismatch = 2; // a forgotten stream's count, moved to the ingest
    const v = summariseInput(d);
    expect(v.refused.byReason.map((r) => [r.reason, r.count])).toEqual([['rate_mismatch', 7], ['bad_magic', 2], ['short_header', 1]]);
    expect(v.refused.total).toBe(10);
  });

  it('the simulator: not live, never waiting, nothing to choose', () => {
    const v = summariseInput({
      source: { kind: 'simulator', scenario: { summary: 'x' } },
      input: { sampleRateHz: 48000, encodings: ['int16'], selectedStreamId: 0, waiting: false, channelsOut: [] },
      streams: [{ streamId: 0, selected: true, transport: 'simulator', samplesAccepted: 96000, inputRateHz: 48000 }],
      ingest: null,
    });
    expect(v).toMatchObject({ sourceKind: 'simulator', live: false, waiting: false, selected: null, choosable: [], capture: null, rtp: [], group: null });
    expect(v.refused).toEqual({ total: 0, byReason: [], last: null });
  });

  it('a server without any input fields: everything unknown, nothing invented', () => {
    for (const doc of [{}, { source: 'x', input: 3, streams: 'no', ingest: [] }, { source: { kind: 'network' }, streams: [null, { streamId: 'a' }, 4] }]) {
      const v = summariseInput(doc as Record<string, unknown>);
      expect(v.waiting).toBe(false);
      expect(v.selected).toBeNull();
      expect(v.mode).toBeNull();
      expect(v.streams).toEqual([]);
      expect(v.refused).toEqual({ total: 0, byReason: [], last: null });
      expect(v.capture).toBeNull();
      expect(v.group).toBeNull();
      expect(v.rtp).toEqual([]);
      expect(v.channelsOut).toEqual([]);
      expect(v.listening).toEqual([]);
    }
  });

  it('a last refusal without a clock to compare with has no age', () => {
    const d = refusedDoc();
    delete d.streams[0].lastFrameAtS;
    expect(summariseInput(d).refused.last!.agoS).toBeNull();
  });

  it('the capture command, RTP sessions and members of a merged array, as the status gives them', () => {
    const v = summariseInput({
      source: { kind: 'capture' },
      input: {
        sampleRateHz: 48000,
        waiting: false,
        selectedStreamId: null,
        mode: null,
        selected: null,
        channelsOut: [8, 9, 10, 11, 12, 13, 14, 15],
        capture: { command: 'arecord -D hw:2 -c 16', state: 'restarting', restarts: 2, samplesRead: 480000, overruns: 1, droppedSamples: 0, lastExit: 'code 1', stderr: ['overrun!!! (at least 1.2 ms long)'], error: null },
        rtp: [
          { name: 'unit-a', encoding: 'L24', channels: 8, sampleRateHz: 48000, address: '127.0.0.1', port: 5004, multicast: false, packets: 1000, lost: 3, duplicates: 1, reordered: 2, late: 0, ssrc: 0x1234abcd, ssrcChanges: 1, jitterMs: 0.25, tsRefclk: 'ptp=IEEE1588-2008:00-11-22-FF-FE-33-44-55:0', mediaClockOffset: 963, lastPacketAgoS: 0.001, rejected: { wrong_payload_type: 2 }, lastRejected: 'payload type 97, the SDP gives 96' },
        ],
        group: {
          holdMs: 20,
          warnAboveUs: 17,
          holdReleases: 4,
          members: [
            { name: 'unit-a', source: 'unit-a', positions: [0, 1, 2, 3, 4, 5, 6, 7], samples: 480000, nextSample: 480000, lagMs: 0, gaps: 0, absentSpans: 0, absentSamples: 0, lastFrameAgoS: 0.001, drift: null, reference: null, warning: null },
            { name: 'unit-b', source: 'stream:42', positions: [8, 9, 10, 11, 12, 13, 14, 15], samples: 470000, nextSample: 470000, lagMs: 3.5, gaps: 1, absentSpans: 1, absentSamples: 480, lastFrameAgoS: 0.02, drift: { ppm: 20.3, points: 600, spanS: 60 }, reference: { offsetUs: -101.2, driftPpm: 19.8, quality: 0.93, spanS: 60 }, warning: 'offset −101.2 µs exceeds 17 µs' },
          ],
        },
      },
      streams: [],
      ingest: null,
    });
    expect(v.live).toBe(true);
    expect(v.capture).toEqual({ command: 'arecord -D hw:2 -c 16', state: 'restarting', restarts: 2, samplesRead: 480000, overruns: 1, droppedSamples: 0, lastExit: 'code 1', error: null, stderr: ['overrun!!! (at least 1.2 ms long)'] });
    expect(v.rtp).toHaveLength(1);
    expect(v.rtp[0]).toMatchObject({ name: 'unit-a', encoding: 'L24', channels: 8, port: 5004, ssrc: 0x1234abcd, jitterMs: 0.25, mediaClockOffset: 963, refused: 2, lastRejected: 'payload type 97, the SDP gives 96' });
    expect(v.rtp[0].refusedBy[0]).toMatchObject({ reason: 'wrong_payload_type', label: 'wrong payload type', count: 2 });
    expect(v.group!.members.map((m) => m.name)).toEqual(['unit-a', 'unit-b']);
    expect(v.group!.members[1]).toMatchObject({ source: 'stream:42', positions: [8, 9, 10, 11, 12, 13, 14, 15], lagMs: 3.5, drift: { ppm: 20.3, points: 600, spanS: 60 }, reference: { offsetUs: -101.2, driftPpm: 19.8, quality: 0.93, spanS: 60 }, warning: 'offset −101.2 µs exceeds 17 µs' });
    expect(v.channelsOut).toEqual([8, 9, 10, 11, 12, 13, 14, 15]);
    // A merged array is not chosen by stream; RTP packets and captured samples count as accepted.
    expect(v.choosable).toEqual([]);
    expect(inputCounts(v)).toEqual({ accepted: 480000 + 1000, refused: 2 });
    expect(v.listening).toEqual(['rtp unit-a 127.0.0.1:5004']);
  });

  it('takes a capture command given as an argument list', () => {
    const v = summariseInput({ source: { kind: 'capture' }, input: { capture: { command: ['sox', '-n', '-t', 'raw', '-'] } } });
    expect(v.capture!.command).toBe('sox -n -t raw -');
    expect(v.capture!.state).toBeNull();
  });
});

describe('the refusal watch (strip badge "input refused")', () => {
  // The clock is an argument: these are counter sequences at chosen instants, not timed waits.
  it('lights when every frame so far was refused, and stays lit while refusals grow and nothing is accepted', () => {
    let w: RefusalState = watchRefusals(null, { accepted: 0, refused: 5 }, 1000);
    expect(w.refusing).toBe(true);
    w = watchRefusals(w, { accepted: 0, refused: 9 }, 2000);
    expect(w.refusing).toBe(true);
    // Refusals stop: the badge holds 5 s after the last growth, then goes.
    w = watchRefusals(w, { accepted: 0, refused: 9 }, 6999);
    expect(w.refusing).toBe(true);
    w = watchRefusals(w, { accepted: 0, refused: 9 }, 7000);
    expect(w.refusing).toBe(false);
  });

  it('goes out as soon as samples are accepted, and stays out while they are', () => {
    let w = watchRefusals(null, { accepted: 0, refused: 5 }, 0);
    w = watchRefusals(w, { accepted: 480, refused: 6 }, 1000);
    expect(w.refusing).toBe(false);
    w = watchRefusals(w, { accepted: 960, refused: 7 }, 2000);
    expect(w.refusing).toBe(false);
    // Accepting stops while refusals go on: lit once the last acceptance is 5 s old.
    w = watchRefusals(w, { accepted: 960, refused: 8 }, 6999);
    expect(w.refusing).toBe(false);
    w = watchRefusals(w, { accepted: 960, refused: 9 }, 7000);
    expect(w.refusing).toBe(true);
  });

  it('on the first look, old refusals beside accepted samples are not news', () => {
    expect(watchRefusals(null, { accepted: 1, refused: 100 }, 0).refusing).toBe(false);
    expect(watchRefusals(null, { accepted: 0, refused: 0 }, 0).refusing).toBe(false);
  });

  it('starts again when the counters fall (a restarted server)', () => {
    let w = watchRefusals(null, { accepted: 1000, refused: 0 }, 0);
    w = watchRefusals(w, { accepted: 0, refused: 3 }, 100);
    expect(w.refusing).toBe(true);
  });
});

describe('small formats', () => {
  it('ranges of positions and channels', () => {
    expect(fmtRanges([0, 1, 2, 3, 8, 9, 12])).toBe('0–3, 8–9, 12');
    expect(fmtRanges([5, 3, 4, 4])).toBe('3–5');
    expect(fmtRanges([])).toBe('');
  });
  it('ages', () => {
    expect(fmtAgo(null)).toBe('—');
    expect(fmtAgo(0.29)).toBe('0.3 s ago');
    expect(fmtAgo(-1)).toBe('0.0 s ago');
    expect(fmtAgo(42.4)).toBe('42 s ago');
    expect(fmtAgo(300)).toBe('5 min ago');
    expect(fmtAgo(3 * 3600 + 360)).toBe('3.1 h ago');
  });
  it('signed figures with a real minus', () => {
    expect(fmtSigned(20.34, 1)).toBe('+20.3');
    expect(fmtSigned(-101.25, 1)).toBe('−101.3');
    expect(fmtSigned(-0.01, 1)).toBe('0.0');
    expect(fmtSigned(null, 1)).toBe('—');
  });
});
