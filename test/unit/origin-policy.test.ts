/**
 * Host and Origin checks (http/origin-policy.ts) and the text of internal errors fit for answers
 * (public-text.ts). Host header syntax: RFC 9110 §7.2 (host [":" port], an IPv6 literal in
 * brackets); an origin is scheme://host[:port] (RFC 6454), default port left out.
 */
import { describe, expect, it } from 'vitest';
import { hostName, OriginPolicy } from '../../server/http/origin-policy.ts';
import { jsonDepthExceeds, parseJsonBody } from '../../server/http/json-body.ts';
import { publicText } from '../../server/public-text.ts';

describe('Host and Origin', () => {
  it('reads the name of a Host header: lower case, no port, no brackets, no trailing dot; malformed ones are null', () => {
    expect(['127.0.0.1:8750', 'LocalHost', '[::1]:8750', 'array-box.local.', 'a.b:80'].map(hostName)).toEqual(['127.0.0.1', 'localhost', '::1', 'array-box.local', 'a.b']);
    expect([undefined, '', '::1', 'a:b', '[::1', 'a b', 'x:99999999', 'ev\u0131l.example'].map(hostName)).toEqual([null, null, null, null, null, null, null, null]);
  });

  it('allows the bound address, loopback names and allowed hosts; refuses any other name', () => {
    const p = new OriginPolicy({ host: '127.0.0.1', allowedHosts: ['array-box.local'] });
    for (const h of ['127.0.0.1:8750', 'localhost:1', '[::1]:8750', 'ARRAY-BOX.local']) expect(p.hostAllowed(h), h).toBe(true);
    for (const h of ['evil.example', 'localhost.evil.example', '127.0.0.2', '10.0.0.5:8750', undefined]) expect(p.hostAllowed(h), String(h)).toBe(false);
    // Bound to every interface: the machine's own addresses count as bound (127.0.0.1 is one of them).
    const any = new OriginPolicy({ host: '0.0.0.0' });
    expect(any.hostAllowed('127.0.0.1:8750')).toBe(true);
    expect(any.hostAllowed('evil.example')).toBe(false);
  });

  it("allows no Origin (not a browser), the server's own and the allowed ones; refuses null and others", () => {
    const p = new OriginPolicy({ host: '127.0.0.1', allowedOrigins: ['http://console.site.test:8080'] });
    expect(p.originAllowed(undefined, '127.0.0.1:8750')).toBe(true);
    expect(p.originAllowed('http://127.0.0.1:8750', '127.0.0.1:8750')).toBe(true);
    expect(p.originAllowed('http://console.site.test:8080', '127.0.0.1:8750')).toBe(true);
    for (const o of ['null', 'http://127.0.0.1:8751', 'https://127.0.0.1:8750', 'http://evil.example', 'not a url', 'http://console.site.test']) expect(p.originAllowed(o, '127.0.0.1:8750'), o).toBe(false);
  });
});

describe('JSON bodies', () => {
  it('counts nesting outside strings only, and refuses beyond 32 levels', () => {
    expect(jsonDepthExceeds('{"a":"[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[["}', 2)).toBe(false);
    expect(jsonDepthExceeds('{"a\\"[[[":[[1]]}', 3)).toBe(false);
    expect(jsonDepthExceeds('{"a":[[[1]]]}', 3)).toBe(true);
    expect(parseJsonBody('  ')).toBeUndefined();
    expect(parseJsonBody(`${'['.repeat(32)}${']'.repeat(32)}`)).toBeInstanceOf(Array);
    expect(() => parseJsonBody(`${'['.repeat(33)}${']'.repeat(33)}`)).toThrow('request body is nested deeper than 32 levels');
    expect(() => parseJsonBody('{not json')).toThrow(/^request body is not valid JSON: /);
  });
});

describe('public text of internal errors', () => {
  it('keeps the first line, cuts absolute paths to their names, tells system errors by code', () => {
    const e = new Error('Cannot find module /root/work/server/x.ts\n    at load (/root/work/server/y.ts:1:2)');
    expect(publicText(e)).toBe('Cannot find module x.ts');
    expect(publicText(new RangeError("bad table '/tmp/a/b/c.json'"))).toBe("RangeError: bad table 'c.json'");
    const sys = Object.assign(new Error("ENOSPC: no space left on device, write '/srv/rec/a.wav'"), { code: 'ENOSPC', errno: -28, syscall: 'write' });
    expect(publicText(sys)).toBe('no space left on device (ENOSPC)');
    expect(publicText('x'.repeat(400))).toHaveLength(300);
  });
});
