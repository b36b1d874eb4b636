/**
 * The site's messages and frames (shared/site.ts): closed schemas for what comes off the broker, the
 * array-to-site azimuth turn, subjects. Frame convention: site x east, y north, azimuth
 * counter-clockwise from +x (the project's own convention, DEVELOPERS.md "Conventions").
 */
import { describe, expect, it } from 'vitest';
import { validateGeometry } from '../../server/config/array-file.ts';
import { ConfigError } from '../../server/config/validate.ts';
import { arrayAzimuthDeg, parseJournalMessage, parseNodeStatus, parsePeakMessage, parseSiteSubject, siteAzimuthDeg, siteStreamName, siteSubject, siteWildcard, SiteMessageError } from '../../shared/site.ts';

const peakMsg = { v: 1, site: 'yard', node: 'mast-2', sampleIndex: 480000, sampleRateHz: 48000, utcMs: Date.UTC(2026, 11, 3), peaks: [{ azimuthDeg: 35, elevationDeg: 0, siteAzimuthDeg: 125, siteElevationDeg: 0, levelDb: -31.5, widthDeg: 6.2, aboveFloorDb: 18 }] };
const statusMsg = { v: 1, site: 'yard', node: 'mast-2', sentUtcMs: Date.UTC(2026, 11, 3), uptimeS: 12, arrayName: 'mast ring', channels: 24, pose: { positionM: [10, -5, 3], headingDeg: 90 }, sampleRateHz: 48000, sampleIndex: 480000, sampleUtcMs: Date.UTC(2026, 11, 3), rowsPerS: 20, load: 0.1, input: 'flowing', dashboardUrl: 'http://127.0.0.1:8750/', pending: 0, dropped: 0 };

describe('site messages', () => {
  it('turns array azimuths into site azimuths by the heading, both ways', () => {
    const pose = { positionM: [0, 0, 0] as [number, number, number], headingDeg: 90 };
    expect(siteAzimuthDeg(35, pose)).toBe(125);
    expect(siteAzimuthDeg(300, pose)).toBe(30);
    expect(arrayAzimuthDeg(30, pose)).toBe(300);
    expect(siteAzimuthDeg(10, { ...pose, headingDeg: -20 })).toBe(350);
  });

  it('names subjects and the stream, and reads subjects back (foreign ones are null)', () => {
    expect(siteSubject('yard', 'mast-2', 'peaks')).toBe('nullsteer.yard.mast-2.peaks');
    expect(siteWildcard('yard', 'status')).toBe('nullsteer.yard.*.status');
    expect(siteStreamName('yard')).toBe('NULLSTEER_yard');
    expect(parseSiteSubject('nullsteer.yard.mast-2.status')).toEqual({ site: 'yard', node: 'mast-2', kind: 'status' });
    for (const s of ['nullsteer.yard.mast-2.other', 'other.yard.a.peaks', 'nullsteer.yard.a.b.peaks', 'nullsteer.ya*rd.a.peaks']) expect(parseSiteSubject(s)).toBeNull();
  });

  it('accepts well-formed messages and refuses each kind of bad one with its path', () => {
    expect(parsePeakMessage(JSON.stringify(peakMsg)).peaks[0].siteAzimuthDeg).toBe(125);
    expect(parseNodeStatus(new TextEncoder().encode(JSON.stringify(statusMsg))).pose).toEqual({ positionM: [10, -5, 3], headingDeg: 90 });
    expect(parseNodeStatus(JSON.stringify({ ...statusMsg, pose: null })).pose).toBeNull();
    const bad: [() => unknown, string][] = [
      [() => parsePeakMessage('not json'), ''],
      [() => parsePeakMessage(JSON.stringify({ ...peakMsg, v: 2 })), 'v'],
      [() => parsePeakMessage(JSON.stringify({ ...peakMsg, extra: 1 })), 'extra'],
      [() => parsePeakMessage(JSON.stringify({ ...peakMsg, node: 'a.b' })), 'node'],
      [() => parsePeakMessage(JSON.stringify({ ...peakMsg, utcMs: 5 })), 'utcMs'],
      [() => parsePeakMessage(JSON.stringify({ ...peakMsg, peaks: [{ ...peakMsg.peaks[0], levelDb: 'loud' }] })), 'peaks[0].levelDb'],
      [() => parsePeakMessage(JSON.stringify({ ...peakMsg, peaks: Array(17).fill(peakMsg.peaks[0]) })), 'peaks'],
      [() => parsePeakMessage('x'.repeat(70000)), ''],
      [() => parseNodeStatus(JSON.stringify({ ...statusMsg, input: 'maybe' })), 'input'],
      [() => parseNodeStatus(JSON.stringify({ ...statusMsg, dashboardUrl: 'javascript:alert(1)' })), 'dashboardUrl'],
      [() => parseNodeStatus(JSON.stringify({ ...statusMsg, pose: { positionM: [0, 0], headingDeg: 0 } })), 'pose.positionM'],
      [() => parseJournalMessage(JSON.stringify({ v: 1, site: 'yard', node: 'a', entry: { seq: 0, at: '', kind: 'x', summary: '' } })), 'entry.seq'],
    ];
    for (const [f, path] of bad) {
      let err: unknown;
      try {
        f();
      } catch (e) {
        err = e;
      }
      expect(err, path).toBeInstanceOf(SiteMessageError);
      expect((err as SiteMessageError).path).toBe(path);
    }
  });

  it('reads a pose from an array file and names a bad one', () => {
    const base = { name: 'mast ring', positions: [[0, 0, 0], [0.1, 0, 0]] };
    expect(validateGeometry({ ...base, pose: { positionM: [12, 40, 4], headingDeg: 30 } }, 'm.json').pose).toEqual({ positionM: [12, 40, 4], headingDeg: 30 });
    expect(validateGeometry(base, 'm.json').pose).toBeUndefined();
    expect(() => validateGeometry({ ...base, pose: { positionM: [12, 40, 4], headingDeg: 30, tilt: 2 } }, 'm.json')).toThrow(ConfigError);
    expect(() => validateGeometry({ ...base, pose: { positionM: [12, 'n', 4], headingDeg: 30 } }, 'm.json')).toThrow('m.json: pose.positionM[1] must be a number in -100000–100000');
  });
});
