/**
 * SDP of RTP sessions (server/ingest/rtp/sdp.ts). The AES67-style descriptions are written here for
 * invented units (documentation addresses: 192.0.2.0/24 of RFC 5737, multicast 233.252.0.0/24 of
 * RFC 5771); the refused examples are those of RFC 4566 (section named beside each).
 */
import { describe, expect, it } from 'vitest';
import { parseSessionSdp, SDP_ERRORS, SdpError, type SdpErrorCode } from '../../server/ingest/rtp/sdp.ts';

const sdp = (...lines: string[]) => lines.join('\r\n') + '\r\n';

/** An invented 8-channel unit on a mast, sending AES67-style: L24/48000/8, 125 µs, PTP media clock. */
const MAST_UNIT = sdp(
  'v=0',
  'o=- 1311738121 1311738121 IN IP4 192.0.2.31',
  's=north-mast unit 3 (8 ch)',
  'c=IN IP4 233.252.0.31/32',
  't=0 0',
  'a=ts-refclk:ptp=IEEE1588-2008:02-00-5E-FF-FE-00-53-01:0',
  'a=mediaclk:direct=1623478300',
  'm=audio 5004 RTP/AVP 97',
  'i=mast microphones 1-8',
  'a=rtpmap:97 L24/48000/8',
  'a=ptime:0.125',
  'a=source-filter: incl IN IP4 233.252.0.31 192.0.2.31',
  'a=recvonly',
);

function refused(text: string): SdpError {
  try {
    parseSessionSdp(text, 'unit-x');
  } catch (e) {
    expect(e).toBeInstanceOf(SdpError);
    return e as SdpError;
  }
  throw new Error('expected an SdpError');
}

describe('parseSessionSdp', () => {
  it('reads an AES67-style multicast description: format, group, source filter, packet time, RFC 7273 clock', () => {
    expect(parseSessionSdp(MAST_UNIT, 'mast-3')).toEqual({
      name: 'mast-3',
      sessionName: 'north-mast unit 3 (8 ch)',
      payloadType: 97,
      encoding: 'L24',
      sampleRateHz: 48000,
      channels: 8,
      port: 5004,
      connectionAddress: '233.252.0.31',
      multicast: true,
      sourceFilter: ['192.0.2.31'],
      packetTimeMs: 0.125,
      mediaClockOffset: 1623478300,
      tsRefclk: 'ptp=IEEE1588-2008:02-00-5E-FF-FE-00-53-01:0',
      warnings: [],
    });
  });

  it('reads a unicast L16 description without ptime or media clock (nulls, channels 1 by default)', () => {
    const d = parseSessionSdp(sdp('v=0', 'o=- 7 7 IN IP4 192.0.2.8', 's=bench unit', 'c=IN IP4 127.0.0.1', 't=0 0', 'm=audio 6000 RTP/AVP 96', 'a=rtpmap:96 l16/96000'), 'bench');
    expect(d).toMatchObject({ encoding: 'L16', sampleRateHz: 96000, channels: 1, port: 6000, connectionAddress: '127.0.0.1', multicast: false, sourceFilter: [], packetTimeMs: null, mediaClockOffset: null, tsRefclk: null });
  });

  it('takes media-level c=, ts-refclk and mediaclk over the session level (RFC 4566 §5.7, RFC 7273 §4, §5)', () => {
    const d = parseSessionSdp(
      sdp('v=0', 'o=- 1 1 IN IP4 192.0.2.9', 's=-', 'c=IN IP4 233.252.0.1/16', 't=0 0', 'a=ts-refclk:ntp=/traceable/', 'a=mediaclk:sender', 'm=audio 5006 RTP/AVP 98', 'c=IN IP4 233.252.0.9/16', 'a=rtpmap:98 L24/96000/2', 'a=ptime:1', 'a=ts-refclk:ptp=IEEE1588-2008:39-A7-94-FF-FE-07-CB-D0:37', 'a=mediaclk:direct=963214424'),
      'pair',
    );
    // The ts-refclk and mediaclk values are the examples of RFC 7273 §4.8 and §5.6 (from memory).
    expect(d).toMatchObject({ connectionAddress: '233.252.0.9', multicast: true, tsRefclk: 'ptp=IEEE1588-2008:39-A7-94-FF-FE-07-CB-D0:37', mediaClockOffset: 963214424, packetTimeMs: 1 });
    const session = parseSessionSdp(sdp('v=0', 'o=- 1 1 IN IP4 192.0.2.9', 's=-', 'c=IN IP4 233.252.0.1/16', 't=0 0', 'a=ts-refclk:ntp=/traceable/', 'a=mediaclk:sender', 'm=audio 5006 RTP/AVP 98', 'a=rtpmap:98 L24/48000/2'), 'pair');
    expect(session).toMatchObject({ connectionAddress: '233.252.0.1', tsRefclk: 'ntp=/traceable/', mediaClockOffset: null });
  });

  it('knows the static payload types 10 and 11 (L16/44100/2 and /1, RFC 3551 Table 4)', () => {
    const d = parseSessionSdp(sdp('v=0', 'o=- 1 1 IN IP4 192.0.2.1', 's=-', 'c=IN IP4 192.0.2.1', 't=0 0', 'm=audio 5004 RTP/AVP 10'), 's');
    expect(d).toMatchObject({ payloadType: 10, encoding: 'L16', sampleRateHz: 44100, channels: 2 });
  });

  it('takes the first of several audio media and says so; IPv6 groups are multicast', () => {
    const d = parseSessionSdp(
      sdp('v=0', 'o=- 1 1 IN IP6 2001:db8::1', 's=dual', 'c=IN IP6 ff15::31', 't=0 0', 'm=audio 5004 RTP/AVP 96', 'a=rtpmap:96 L24/48000/4', 'm=audio 5006 RTP/AVP 96', 'a=rtpmap:96 L24/48000/4'),
      'dual',
    );
    expect(d).toMatchObject({ port: 5004, connectionAddress: 'ff15::31', multicast: true });
    expect(d.warnings).toEqual(['2 audio media: only the first (port 5004) is received']);
  });

  it('refuses the example of RFC 4566 §5: its audio is payload type 0 (PCMU), not L16/L24', () => {
    const e = refused(
      sdp(
        'v=0',
        'o=jdoe 2890844526 2890842807 IN IP4 10.47.16.5',
        's=SDP Seminar',
        'i=A Seminar on the session description protocol',
        'u=http://www.example.com/seminars/sdp.pdf',
        'e=j.doe@example.com (Jane Doe)',
        'c=IN IP4 224.2.17.12/127',
        't=2873397496 2873404696',
        'a=recvonly',
        'm=audio 49170 RTP/AVP 0',
        'm=video 51372 RTP/AVP 99',
        'a=rtpmap:99 h263-1998/90000',
      ),
    );
    expect(e.code).toBe('ERR_SDP_PAYLOAD');
    expect(e.message).toBe('SDP of RTP session "unit-x": payload type 0 has no "a=rtpmap" line (only the static types 10 and 11 are L16 without one)');
  });

  it('refuses the a=rtpmap examples of RFC 4566 §6: L8/8000 is not L16/L24, L16/16000/2 is not a received rate', () => {
    const base = ['v=0', 'o=- 1 1 IN IP4 192.0.2.1', 's=-', 'c=IN IP4 192.0.2.1', 't=0 0'];
    const l8 = refused(sdp(...base, 'm=audio 49230 RTP/AVP 96 97 98', 'a=rtpmap:96 L8/8000', 'a=rtpmap:97 L16/8000', 'a=rtpmap:98 L16/11025/2'));
    expect([l8.code, l8.message]).toEqual(['ERR_SDP_PAYLOAD', 'SDP of RTP session "unit-x": payload type 96 is L8/8000: only L16 and L24 are received']);
    const l16 = refused(sdp(...base, 'm=audio 49232 RTP/AVP 98', 'a=rtpmap:98 L16/16000/2'));
    expect([l16.code, l16.message]).toEqual(['ERR_SDP_RATE', 'SDP of RTP session "unit-x": sample rate 16000 Hz is not one of 44100, 48000, 96000']);
  });

  it('names each problem', () => {
    const base = ['v=0', 'o=- 1 1 IN IP4 192.0.2.1', 's=-', 'c=IN IP4 233.252.0.5/32', 't=0 0'];
    const cases: [string[], SdpErrorCode, string][] = [
      [['m=video 5004 RTP/AVP 96', 'a=rtpmap:96 raw/90000'], 'ERR_SDP_NO_AUDIO', 'no "m=audio" line (media found: video)'],
      [['m=audio 5004 RTP/SAVP 96', 'a=rtpmap:96 L24/48000/2'], 'ERR_SDP_TRANSPORT', 'transport "RTP/SAVP" is not RTP/AVP'],
      [['m=audio 0 RTP/AVP 96', 'a=rtpmap:96 L24/48000/2'], 'ERR_SDP_PORT', 'port 0 is not in 1–65535'],
      [['m=audio 5004 RTP/AVP 96', 'a=rtpmap:96 L24/48000/0'], 'ERR_SDP_CHANNELS', '0 channels is not in 1–1024'],
      [['m=audio 5004 RTP/AVP 96', 'a=rtpmap:96 L24/48000/1025'], 'ERR_SDP_CHANNELS', '1025 channels is not in 1–1024'],
      [['m=audio 5004 RTP/AVP 96', 'a=rtpmap:96 L24/48000/2', 'a=ptime:0.1'], 'ERR_SDP_PTIME', 'a=ptime:0.1 is not in 0.125–4 ms'],
      [['m=audio 5004 RTP/AVP 96', 'a=rtpmap:96 L24/48000/2', 'a=ptime:5'], 'ERR_SDP_PTIME', 'a=ptime:5 is not in 0.125–4 ms'],
      [['m=audio 5004 RTP/AVP 96', 'a=rtpmap:96 L24/96000/1024', 'a=ptime:4'], 'ERR_SDP_PTIME', 'a packet of 4 ms × 1024 channels L24 is 1179660 bytes, more than a UDP datagram holds (65507)'],
      [['m=audio 5004 RTP/AVP 96', 'a=rtpmap:96 L24/48000/2', 'a=source-filter: excl IN IP4 233.252.0.5 192.0.2.7'], 'ERR_SDP_SOURCE_FILTER', 'a=source-filter: excl is not supported (only incl)'],
      [['m=audio 5004 RTP/AVP 96', 'a=rtpmap:96 L24/48000/2', 'a=source-filter: incl IN IP4 233.252.0.6 192.0.2.7'], 'ERR_SDP_SOURCE_FILTER', 'a=source-filter names destination 233.252.0.6, the c= address is 233.252.0.5'],
      [['m=audio 5004 RTP/AVP 96', 'a=rtpmap:96 L24/48000/2', 'a=mediaclk:direct=4294967296'], 'ERR_SDP_MEDIACLK', 'a=mediaclk:direct=4294967296: the offset must be an integer in 0–4294967295'],
      [['m=audio 5004 RTP/AVP 96', 'a=rtpmap:96 L24/48000/2', 'a=mediaclk:direct=5 rate=1000/1001'], 'ERR_SDP_MEDIACLK', 'a=mediaclk rate=1000/1001: a media clock off the nominal rate is not supported'],
      [['m=audio 5004 RTP/AVP 96'], 'ERR_SDP_PAYLOAD', 'payload type 96 has no "a=rtpmap" line (only the static types 10 and 11 are L16 without one)'],
    ];
    for (const [media, code, problem] of cases) {
      const e = refused(sdp(...base, ...media));
      expect([e.code, e.message]).toEqual([code, `SDP of RTP session "unit-x": ${problem}`]);
    }
    const noC = refused(sdp('v=0', 'o=- 1 1 IN IP4 192.0.2.1', 's=-', 't=0 0', 'm=audio 5004 RTP/AVP 96', 'a=rtpmap:96 L24/48000/2'));
    expect(noC.code).toBe('ERR_SDP_CONNECTION');
    const host = refused(sdp('v=0', 'o=- 1 1 IN IP4 192.0.2.1', 's=-', 'c=IN IP4 unit.example.net', 't=0 0', 'm=audio 5004 RTP/AVP 96', 'a=rtpmap:96 L24/48000/2'));
    expect(host.message).toContain('"unit.example.net" is not an IPv4 or IPv6 address');
    expect(refused('hello, not an SDP').code).toBe('ERR_SDP_SYNTAX');
    expect(refused('v=0\r\n'.padEnd(70000, 'x')).code).toBe('ERR_SDP_SYNTAX');
  });

  it('has one error catalogue: every code ERR_SDP_*, every message non-empty', () => {
    for (const [code, text] of Object.entries(SDP_ERRORS)) {
      expect(code).toMatch(/^ERR_SDP_[A-Z_]+$/);
      expect(text.length).toBeGreaterThan(10);
    }
  });
});
