/**
 * The test parser of the Prometheus text exposition format (test/helpers/prom-text.ts) against
 * the format's documentation ("Exposition formats", "Text format details",
 * https://prometheus.io/docs/instrumenting/exposition_formats/): an exposition written after the
 * documentation's example (from memory: counters with labels and timestamps, escaped label values,
 * +Inf and negative timestamps, a histogram, a summary) parses; each rule broken once is refused.
 */
import { describe, expect, it } from 'vitest';
import { parsePromText, PromTextError, sampleOf } from '../helpers/prom-text.ts';

const EXAMPLE = `# HELP http_requests_total The total number of HTTP requests.
# TYPE http_requests_total counter
http_requests_total{method="post",code="200"} 1027 1395066363000
http_requests_total{method="post",code="400"}    3 1395066363000

# Escaping in label values:
msdos_file_access_time_seconds{path="C:\\\\DIR\\\\FILE.TXT",error="Cannot find file:\\n\\"FILE.TXT\\""} 1.458255915e9

# Minimalistic line:
metric_without_timestamp_and_labels 12.47

# A weird metric from before the epoch:
something_weird{problem="division by zero"} +Inf -3982045

# A histogram, which has a pretty complex representation in the text format:
# HELP http_request_duration_seconds A histogram of the request duration.
# TYPE http_request_duration_seconds histogram
http_request_duration_seconds_bucket{le="0.05"} 24054
http_request_duration_seconds_bucket{le="0.1"} 33444
http_request_duration_seconds_bucket{le="0.2"} 100392
http_request_duration_seconds_bucket{le="0.5"} 129389
http_request_duration_seconds_bucket{le="1"} 133988
http_request_duration_seconds_bucket{le="+Inf"} 144320
http_request_duration_seconds_sum 53423
http_request_duration_seconds_count 144320

# Finally a summary, which has a complex representation, too:
# HELP rpc_duration_seconds A summary of the RPC duration in seconds.
# TYPE rpc_duration_seconds summary
rpc_duration_seconds{quantile="0.01"} 3102
rpc_duration_seconds{quantile="0.5"} 4773
rpc_duration_seconds{quantile="0.99"} 76656
rpc_duration_seconds_sum 1.7560473e+07
rpc_duration_seconds_count 2693
`;

describe('Prometheus text exposition parser (test helper)', () => {
  it("parses the documentation's example", () => {
    const f = parsePromText(EXAMPLE);
    expect([...f.keys()]).toEqual(['http_requests_total', 'msdos_file_access_time_seconds', 'metric_without_timestamp_and_labels', 'something_weird', 'http_request_duration_seconds', 'rpc_duration_seconds']);
    expect(f.get('http_requests_total')).toMatchObject({ type: 'counter', help: 'The total number of HTTP requests.' });
    expect(sampleOf(f, 'http_requests_total', 'http_requests_total', { method: 'post', code: '400' })).toEqual({ name: 'http_requests_total', labels: { method: 'post', code: '400' }, value: 3, timestampMs: 1395066363000 });
    expect(f.get('msdos_file_access_time_seconds')!.samples[0].labels).toEqual({ path: 'C:\\DIR\\FILE.TXT', error: 'Cannot find file:\n"FILE.TXT"' });
    expect(f.get('msdos_file_access_time_seconds')!.type).toBe('untyped');
    expect(sampleOf(f, 'something_weird', 'something_weird', { problem: 'division by zero' })).toMatchObject({ value: Number.POSITIVE_INFINITY, timestampMs: -3982045 });
    expect(f.get('http_request_duration_seconds')!.samples).toHaveLength(8);
    expect(f.get('rpc_duration_seconds')!.type).toBe('summary');
    expect(parsePromText('x NaN\ny -Inf\n').get('x')!.samples[0].value).toBeNaN();
    expect(parsePromText('# HELP h a \\\\ and a\\nnew line\nh{a="1",} 2\n').get('h')).toMatchObject({ help: 'a \\ and a\nnew line', samples: [{ labels: { a: '1' }, value: 2 }] });
  });

  const refused: [string, string][] = [
    ['no final line feed', 'x 1'],
    ['carriage return', 'x 1\r\n'],
    ['metric name with a dash', 'x-y 1\n'],
    ['metric name starting with a digit', '1x 1\n'],
    ['label name with a colon', 'x{a:b="1"} 1\n'],
    ['reserved label name', 'x{__a="1"} 1\n'],
    ['unquoted label value', 'x{a=1} 1\n'],
    ['unknown escape in a label value', 'x{a="\\t"} 1\n'],
    ['unterminated label value', 'x{a="1} 1\n'],
    ['label twice', 'x{a="1",a="2"} 1\n'],
    ['value not a number', 'x one\n'],
    ['infinity spelt Infinity', 'x Infinity\n'],
    ['fractional timestamp', 'x 1 1.5\n'],
    ['three tokens after the name', 'x 1 2 3\n'],
    ['unknown type', '# TYPE x meter\nx 1\n'],
    ['TYPE twice', '# TYPE x gauge\n# TYPE x gauge\nx 1\n'],
    ['HELP twice', '# HELP x a\n# HELP x b\nx 1\n'],
    ['TYPE after the first sample', 'x 1\n# TYPE x gauge\n'],
    ['one metric in two groups', 'x{a="1"} 1\ny 1\nx{a="2"} 1\n'],
    ['same name and labels twice', 'x{a="1"} 1\nx{a="1"} 2\n'],
    ['negative counter', '# TYPE c counter\nc -1\n'],
    ['histogram le descending', '# TYPE h histogram\nh_bucket{le="1"} 1\nh_bucket{le="0.5"} 1\nh_bucket{le="+Inf"} 1\nh_sum 1\nh_count 1\n'],
    ['histogram not cumulative', '# TYPE h histogram\nh_bucket{le="0.5"} 2\nh_bucket{le="1"} 1\nh_bucket{le="+Inf"} 2\nh_sum 1\nh_count 2\n'],
    ['histogram without +Inf', '# TYPE h histogram\nh_bucket{le="1"} 1\nh_sum 1\nh_count 1\n'],
    ['histogram +Inf differs from count', '# TYPE h histogram\nh_bucket{le="+Inf"} 2\nh_sum 1\nh_count 3\n'],
    ['histogram without _sum', '# TYPE h histogram\nh_bucket{le="+Inf"} 2\nh_count 2\n'],
    ['summary quantile above 1', '# TYPE s summary\ns{quantile="1.5"} 1\ns_sum 1\ns_count 1\n'],
  ];
  it.each(refused)('refuses: %s', (_what, text) => {
    expect(() => parsePromText(text)).toThrow(PromTextError);
  });
});
