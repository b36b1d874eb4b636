/** GET /api/levels's closed query (server/http/routes/levels.ts): defaults, limits and refusals by name. */
import { describe, expect, it } from 'vitest';
import { parseLevelsQuery } from '../../server/http/routes/levels.ts';
import { HttpError } from '../../server/http/errors.ts';

const NOW = Date.UTC(2026, 11, 4, 12, 0, 0);

describe('levels query', () => {
  it('defaults: the omnidirectional level, 1-min intervals, the last hour', () => {
    expect(parseLevelsQuery({}, NOW)).toEqual({ sector: 'omni', interval: '1min', fromMs: NOW - 3_600_000, toMs: NOW });
  });

  it('takes ISO 8601 UTC times and milliseconds', () => {
    const q = parseLevelsQuery({ sector: 'gate', interval: '1s', from: '2026-12-04T11:30:00Z', to: String(NOW) }, NOW);
    expect(q).toEqual({ sector: 'gate', interval: '1s', fromMs: NOW - 1_800_000, toMs: NOW });
  });

  it('refuses, naming each problem: unknown parameters, bad names, intervals, times, spans', () => {
    const detail = (q: Record<string, unknown>) => {
      try {
        parseLevelsQuery(q, NOW);
      } catch (e) {
        expect(e).toBeInstanceOf(HttpError);
        return (e as HttpError).message;
      }
      return '';
    };
    expect(detail({ limit: '5' })).toContain('limit: unknown parameter');
    expect(detail({ sector: '../x' })).toContain('sector: must be');
    expect(detail({ interval: '5min' })).toContain('interval: must be one of 1s, 1min, 15min, 1h');
    expect(detail({ from: 'yesterday' })).toContain('from: must be an ISO 8601');
    expect(detail({ from: String(NOW), to: String(NOW - 1) })).toContain('from: must be before to');
    expect(detail({ interval: '1s', from: String(NOW - 7_200_000), to: String(NOW) })).toContain('at most an hour of 1-s values');
    expect(detail({ sector: ['a', 'b'] })).toContain('sector: give it once');
  });
});
