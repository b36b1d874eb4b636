import { mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { validateGeometry } from '../../server/config/array-file.ts';
import { loadConfig, parseFieldText } from '../../server/config/load.ts';
import { ConfigError } from '../../server/config/validate.ts';
import { parseServeArgs } from '../../server/main.ts';

const tmp = mkdtempSync(join(tmpdir(), 'nullsteer-config-'));
function file(name: string, body: unknown): string {
  const p = join(tmp, name);
  writeFileSync(p, typeof body === 'string' ? body : JSON.stringify(body));
  return p;
}

async function issuesOf(p: Promise<unknown>): Promise<string[]> {
  try {
    await p;
  } catch (e) {
    expect(e).toBeInstanceOf(ConfigError);
    expect((e as ConfigError).code).toBe('ERR_CONFIG_INVALID');
    return (e as ConfigError).issues.map((i) => i.message);
  }
  throw new Error('expected a ConfigError');
}

describe('configuration', () => {
  it('loads the defaults with the built-in array', async () => {
    const { config, geometry } = await loadConfig({ env: {} });
    expect(config.server).toEqual({ host: '127.0.0.1', httpPort: 8750, token: null, allowedHosts: [], allowedOrigins: [] });
    expect(config.source.kind).toBe('simulator');
    expect(geometry.positions).toHaveLength(24);
  });

  it('layers file < environment < flags, field by field', async () => {
    const user = file('user.json', { server: { httpPort: 9001 }, ingest: { udp: { port: 9002 }, reorderHoldMs: 70 } });
    const { config } = await loadConfig({
      configFile: user,
      env: { NULLSTEER_HTTP_PORT: '9101', NULLSTEER_UDP_PORT: '9102' },
      overrides: parseServeArgs(['--http-port', '0', '--set', 'ingest.reorderWindowFrames=16']).overrides,
    });
    expect(config.server.httpPort).toBe(0); // flag beats env beats file
    expect(config.ingest.udp.port).toBe(9102); // env beats file
    expect(config.ingest.reorderHoldMs).toBe(70); // file beats default
    expect(config.ingest.reorderWindowFrames).toBe(16);
    expect(config.ingest.udp.receiveBufferBytes).toBe(4194304); // untouched default survives the merge
  });

  it('names the field, the value and the allowed range of every bad value at once', async () => {
    const user = file('bad.json', { server: { httpPort: 70000 }, input: { sampleRateHz: 48000.5, encodings: ['int16', 'int8'] }, ingest: { reorderWindowFrames: 0 }, extra: 1 });
    const msgs = await issuesOf(loadConfig({ configFile: user, env: { NULLSTEER_SOURCE: 'cassette' } }));
    expect(msgs).toContain('server.httpPort = 70000: out of range; allowed integer 0–65535');
    expect(msgs).toContain('input.sampleRateHz = 48000.5: not an integer; allowed integer 8000–384000');
    expect(msgs).toContain('input.encodings = ["int16","int8"]: item "int8" not allowed; allowed list of int16, int24, int32, float32 (at least 1)');
    expect(msgs).toContain('ingest.reorderWindowFrames = 0: out of range; allowed integer 1–1024');
    expect(msgs).toContain('source.kind = "cassette": not allowed; allowed one of simulator, network, capture');
    expect(msgs.some((m) => m.startsWith('extra: unknown field'))).toBe(true);
    expect(msgs).toHaveLength(6);
  });

  it('refuses a non-loopback bind without a token', async () => {
    const msgs = await issuesOf(loadConfig({ env: {}, overrides: [['server.host', '0.0.0.0']] }));
    expect(msgs[0]).toMatch(/^server\.token = null: required when server\.host \(0\.0\.0\.0\) is not loopback/);
    const ok = await loadConfig({ env: {}, overrides: [['server.host', '0.0.0.0'], ['server.token', 'a-long-enough-token-123']] });
    expect(ok.config.server.token).toBe('a-long-enough-token-123');
  });

  it('reports unreadable and malformed files by name', async () => {
    expect((await issuesOf(loadConfig({ configFile: join(tmp, 'missing.json'), env: {} })))[0]).toMatch(/cannot read \(ENOENT\)/);
    expect((await issuesOf(loadConfig({ configFile: file('broken.json', '{ "server": '), env: {} })))[0]).toMatch(/broken\.json: not valid JSON/);
  });

  it('parses flag text by the field type', () => {
    expect(parseFieldText('server.httpPort', '8080')).toBe(8080);
    expect(parseFieldText('server.httpPort', 'eighty')).toBe('eighty'); // left for the validator to name
    expect(parseFieldText('ingest.udp.enabled', 'false')).toBe(false);
    expect(parseFieldText('input.encodings', 'int16, float32')).toEqual(['int16', 'float32']);
    expect(parseFieldText('input.streamId', 'null')).toBeNull();
    expect(() => parseFieldText('server.colour', 'x')).toThrow(/server\.colour: unknown field/);
    expect(() => parseServeArgs(['--set', 'nonsense'])).toThrow(/expected FIELD=VALUE/);
    expect(() => parseServeArgs(['--bogus'])).toThrow(/bogus/);
  });

  it('validates array geometry files', async () => {
    expect(validateGeometry({ positions: [[0, 0, 0], [0.1, 0, 0]] }, 'a.json').positions).toHaveLength(2);
    const bad = (g: unknown) => {
      try {
        validateGeometry(g, 'g.json');
      } catch (e) {
        return (e as ConfigError).issues.map((i) => i.message);
      }
      return [];
    };
    expect(bad({ positions: [[0, 0]] })[0]).toBe('g.json: positions[0] must be [x, y, z], three finite numbers in metres');
    expect(bad({ positions: [[0, 0, 0], [0, 0, 0.0005]] })[0]).toMatch(/positions\[1\] is within 1 mm of positions\[0\]/);
    expect(bad({ positions: [[0, 0, 0], [150, 0, 0]] })[0]).toMatch(/beyond ±100 m/);
    expect(bad({ positions: [] })[0]).toMatch(/positions must be a list of 1–1024/);
    expect(bad([1, 2])[0]).toBe('g.json: not a JSON object');
    const msgs = await issuesOf(loadConfig({ env: {}, overrides: [['array.file', file('geo.json', { positions: [[0, 0, 'x']] })]] }));
    expect(msgs[0]).toMatch(/geo\.json: positions\[0\] must be/);
  });

  it('validates the optional per-channel calibration of an array file', () => {
    const two = [[0, 0, 0], [0.1, 0, 0]];
    expect(validateGeometry({ positions: two }, 'a.json').calibration).toBeUndefined();
    expect(validateGeometry({ positions: two, calibration: { gainDb: [0.5, -1] } }, 'a.json').calibration).toEqual({ gainDb: [0.5, -1], delayUs: [0, 0] });
    expect(validateGeometry({ positions: two, calibration: { delayUs: [3, -12.5] } }, 'a.json').calibration).toEqual({ gainDb: [0, 0], delayUs: [3, -12.5] });
    const bad = (c: unknown) => {
      try {
        validateGeometry({ positions: two, calibration: c }, 'g.json');
      } catch (e) {
        return (e as ConfigError).issues.map((i) => i.message);
      }
      return [];
    };
    expect(bad({ gainDb: [1] })).toEqual(['g.json: calibration.gainDb must list one number (dB) per position, 2 in all']);
    expect(bad({ gainDb: [0, 41] })).toEqual(['g.json: calibration.gainDb[1] must be a number within ±40 dB']);
    expect(bad({ delayUs: [0, 'x'] })).toEqual(['g.json: calibration.delayUs[1] must be a number within ±1000 µs']);
    expect(bad({ delayUs: [1001, 0] })).toEqual(['g.json: calibration.delayUs[0] must be a number within ±1000 µs']);
    expect(bad({ gain: [0, 0] })).toEqual(['g.json: calibration.gain is not a calibration field (gainDb, delayUs, sensitivityMvPerPa, fullScaleVolts, polarity, channelOrder)']);
    expect(bad([0, 0])).toEqual(['g.json: calibration must be an object { "gainDb": [...], "delayUs": [...] }']);
    expect(validateGeometry({ positions: two, calibration: { sensitivityMvPerPa: 50, fullScaleVolts: 1 } }, 'a.json').calibration).toEqual({ gainDb: [0, 0], delayUs: [0, 0], sensitivityMvPerPa: 50, fullScaleVolts: 1 });
    expect(bad({ sensitivityMvPerPa: 50 })).toEqual(['g.json: calibration.fullScaleVolts is needed too: give sensitivityMvPerPa and fullScaleVolts together (or neither)']);
    expect(bad({ sensitivityMvPerPa: 0, fullScaleVolts: 1 })).toEqual(['g.json: calibration.sensitivityMvPerPa must be a number of mV/Pa in 0.01–10000']);
    expect(bad({ sensitivityMvPerPa: 50, fullScaleVolts: -1 })).toEqual(['g.json: calibration.fullScaleVolts must be a number of volts (peak at digital full scale) in 0.001–1000']);
  });
});
