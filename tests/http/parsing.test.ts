/** Unit tests of the small parsers: form numbers, the JSON body scan, Accept negotiation, configuration. */
import { describe, expect, it } from 'vitest';
import { ConfigError, loadConfig, sha256 } from '../../server/config.js';
import { MAX_JSON_DEPTH, parseJsonBody, scanJson } from '../../server/http/json-body.js';
import { MAX_NUMBER_LENGTH, OverlongNumber } from '../../server/schemas/field-errors.js';
import { prefersHtml, qualityOf } from '../../server/http/negotiate.js';
import { FormNumberFailure, parseFormNumber } from '../../server/services/ingest/numbers.js';

describe('parseFormNumber (WHATWG valid floating-point number)', () => {
  it('accepts the grammar', () => {
    const ok: [string, number][] = [
      ['7', 7],
      ['7.5', 7.5],
      ['-7.25', -7.25],
      ['.5', 0.5],
      ['-.5', -0.5],
      ['007', 7],
      ['1e2', 100],
      ['1E-3', 0.001],
      ['2.5e+1', 25],
      ['0', 0],
    ];
    for (const [text, value] of ok) expect(parseFormNumber(text), text).toBe(value);
    expect(Object.is(parseFormNumber('-0'), -0)).toBe(true);
  });

  it('refuses everything else with a reason', () => {
    const bad: [string, string][] = [
      ['7abc', 'not_a_number'],
      ['', 'not_a_number'],
      [' 7', 'not_a_number'],
      ['7 ', 'not_a_number'],
      ['+7', 'not_a_number'],
      ['0x10', 'not_a_number'],
      ['5.', 'not_a_number'],
      ['1,5', 'not_a_number'],
      ['1e', 'not_a_number'],
      ['--1', 'not_a_number'],
      ['NaN', 'not_a_number'],
      ['Infinity', 'not_a_number'],
      ['٣', 'not_a_number'], // an Arabic-Indic digit three
      ['1e999', 'not_finite'],
      ['-1e400', 'not_finite'],
      ['1'.repeat(MAX_NUMBER_LENGTH + 1), 'too_many_digits'],
    ];
    for (const [text, reason] of bad) {
      const r = parseFormNumber(text);
      expect(r, JSON.stringify(text)).toBeInstanceOf(FormNumberFailure);
      expect((r as FormNumberFailure).reason, JSON.stringify(text)).toBe(reason);
    }
    expect(parseFormNumber('1'.repeat(MAX_NUMBER_LENGTH))).toBe(Number('1'.repeat(MAX_NUMBER_LENGTH)));
  });
});

describe('JSON body scan', () => {
  const parse = (s: string) => parseJsonBody(s, (x) => JSON.parse(x));

  it('finds overlong number tokens outside strings only, and the nesting depth', () => {
    const long = `1.${'0'.repeat(40)}1`;
    const text = `{"a":${long},"b":"${long}","c":[1,-2.5e-3],"d":"\\"${long}"}`;
    const scan = scanJson(text);
    expect(scan.overlong).toHaveLength(1);
    expect(text.slice(...scan.overlong[0])).toBe(long);
    expect(scan.maxDepth).toBe(2);
  });

  it('turns overlong numbers into OverlongNumber objects and leaves everything else as JSON.parse does', () => {
    const long = `-9${'9'.repeat(45)}`;
    const result = parse(`{"values":{"x":${long},"y":1e999,"z":"${long}"},"list":[${long},2]}`) as {
      values: Record<string, unknown>;
      list: unknown[];
    };
    expect(result.values.x).toBeInstanceOf(OverlongNumber);
    expect((result.values.x as OverlongNumber).text).toBe(long);
    expect(result.values.y).toBe(Infinity);
    expect(result.values.z).toBe(long);
    expect(result.list[0]).toBeInstanceOf(OverlongNumber);
    expect(result.list[1]).toBe(2);
  });

  it('a client cannot forge the marker: a U+0000 in any string (the marker starts with one) is refused, an escaped backslash before "u0000" is not one', () => {
    expect(() => parse(`{"a":"\\u0000overlong:abc:0","b":${'1'.repeat(50)}}`)).toThrow('U+0000 (NUL)');
    expect(() => parse(`{"k\\u0000":1}`)).toThrow('U+0000 (NUL)');
    expect(() => parse(`{"a":"x\\U0000"}`)).toThrow(SyntaxError); // \U is no JSON escape: the base parser's own error, not ours
    const r = parse(`{"a":"\\\\u0000overlong:abc:0","b":${'1'.repeat(50)}}`) as Record<string, unknown>;
    expect(r.a).toBe('\\u0000overlong:abc:0');
    expect(r.b).toBeInstanceOf(OverlongNumber);
  });

  it(`refuses nesting deeper than ${MAX_JSON_DEPTH}`, () => {
    expect(() => parse(`${'['.repeat(MAX_JSON_DEPTH)}${']'.repeat(MAX_JSON_DEPTH)}`)).not.toThrow();
    expect(() => parse(`${'{"a":'.repeat(MAX_JSON_DEPTH + 1)}1${'}'.repeat(MAX_JSON_DEPTH + 1)}`)).toThrow(`nested more than ${MAX_JSON_DEPTH} levels`);
    // Brackets inside strings do not count.
    expect(scanJson(`{"a":"${'['.repeat(100)}"}`).maxDepth).toBe(1);
  });
});

describe('Accept negotiation', () => {
  it('prefers HTML only when text/html is strictly preferred to JSON', () => {
    expect(prefersHtml('text/html,application/xhtml+xml,application/xml;q=0.9,*/*;q=0.8')).toBe(true); // Firefox/Chrome navigation
    expect(prefersHtml('text/html')).toBe(true);
    expect(prefersHtml('*/*')).toBe(false); // curl
    expect(prefersHtml(undefined)).toBe(false);
    expect(prefersHtml('application/json')).toBe(false);
    expect(prefersHtml('application/json, text/html')).toBe(false);
    expect(prefersHtml('text/html;q=0.5, application/json;q=0.9')).toBe(false);
    expect(prefersHtml('text/*, application/json;q=0.1')).toBe(true);
    expect(prefersHtml('text/html;q=0, */*')).toBe(false);
  });

  it('uses the most specific matching range', () => {
    expect(qualityOf('text/*;q=0.3, text/html;q=0.7, */*;q=0.1', 'text/html')).toBe(0.7);
    expect(qualityOf('text/*;q=0.3, */*;q=0.1', 'text/html')).toBe(0.3);
    expect(qualityOf('application/json', 'text/html')).toBe(0);
  });
});

describe('configuration', () => {
  it('defaults', () => {
    expect(loadConfig({})).toEqual({
      port: 8080,
      host: '127.0.0.1',
      dbPath: './data/splitballot.db',
      adminKeyHash: null,
      corsOrigins: [],
      logLevel: 'info',
      rateLimitIngestPerMinute: 600,
      rateLimitReadPerMinute: 6000,
      requestTimeoutMs: 60_000,
      shutdownGraceMs: 10_000,
      backupDir: undefined,
      metricsTokenHash: null,
      trustProxy: false,
      databasePoolSize: 10,
    });
  });

  it('reads every variable; keeps only the hashes of the admin key and the metrics token', () => {
    const secret = 'x'.repeat(40);
    const metricsToken = 'm'.repeat(40);
    const c = loadConfig({
      PORT: '9090',
      HOST: '0.0.0.0',
      SPLITBALLOT_DB: '/var/lib/splitballot/db.sqlite',
      SPLITBALLOT_ADMIN_KEY: secret,
      SPLITBALLOT_CORS_ORIGINS: 'https://survey.example.org, http://localhost:5173',
      LOG_LEVEL: 'WARN',
      SPLITBALLOT_RATE_LIMIT_INGEST: '120',
      SPLITBALLOT_RATE_LIMIT_READ: '900',
      SPLITBALLOT_REQUEST_TIMEOUT: '30',
      SPLITBALLOT_SHUTDOWN_TIMEOUT: '5',
      SPLITBALLOT_BACKUP_DIR: '/var/backups/splitballot',
      SPLITBALLOT_METRICS_TOKEN: metricsToken,
      SPLITBALLOT_DATABASE_URL: 'postgres://sb:pw@db.example.org:5432/splitballot',
      SPLITBALLOT_DATABASE_POOL_SIZE: '25',
    });
    expect(c).toEqual({
      port: 9090,
      host: '0.0.0.0',
      dbPath: '/var/lib/splitballot/db.sqlite',
      adminKeyHash: sha256(secret),
      corsOrigins: ['https://survey.example.org', 'http://localhost:5173'],
      logLevel: 'warn',
      rateLimitIngestPerMinute: 120,
      rateLimitReadPerMinute: 900,
      requestTimeoutMs: 30_000,
      shutdownGraceMs: 5_000,
      backupDir: '/var/backups/splitballot',
      metricsTokenHash: sha256(metricsToken),
      trustProxy: false,
      databaseUrl: 'postgres://sb:pw@db.example.org:5432/splitballot',
      databasePoolSize: 25,
    });
    expect(JSON.stringify(c)).not.toContain(secret);
    expect(JSON.stringify(c)).not.toContain(metricsToken);
  });

  it('a bad value stops with one line naming the variable', () => {
    const cases: [Record<string, string>, string][] = [
      [{ PORT: 'eighty' }, 'Configuration error: PORT must be a whole number from 0 to 65535 (got "eighty")'],
      [{ PORT: '65536' }, 'Configuration error: PORT must be a whole number from 0 to 65535 (got "65536")'],
      [{ HOST: 'local host' }, 'Configuration error: HOST must be a host name or address (got "local host")'],
      [{ LOG_LEVEL: 'loud' }, 'Configuration error: LOG_LEVEL must be one of fatal, error, warn, info, debug, trace, silent (got "loud")'],
      [{ SPLITBALLOT_DATABASE_POOL_SIZE: '0' }, 'Configuration error: SPLITBALLOT_DATABASE_POOL_SIZE must be a whole number of connections from 1 to 1000 (got "0")'],
      [
        { SPLITBALLOT_ADMIN_KEY: 'short-secret' },
        'Configuration error: SPLITBALLOT_ADMIN_KEY must be at least 32 characters (for example the output of `openssl rand -hex 32`)',
      ],
      [
        { SPLITBALLOT_CORS_ORIGINS: 'https://survey.example.org/form' },
        'Configuration error: SPLITBALLOT_CORS_ORIGINS "https://survey.example.org/form" must be an origin only (scheme, host and optional port), without a path or trailing slash (got "https://survey.example.org/form")',
      ],
      [
        { SPLITBALLOT_CORS_ORIGINS: 'ftp://files.example.org' },
        'Configuration error: SPLITBALLOT_CORS_ORIGINS "ftp://files.example.org" must start with http:// or https:// (got "ftp://files.example.org")',
      ],
    ];
    for (const [env, message] of cases) {
      let err: unknown;
      try {
        loadConfig(env);
      } catch (e) {
        err = e;
      }
      expect(err, JSON.stringify(env)).toBeInstanceOf(ConfigError);
      expect((err as Error).message).toBe(message);
      expect((err as Error).message).not.toContain('\n');
    }
    // The admin secret is never echoed, even when refused.
    expect(() => loadConfig({ SPLITBALLOT_ADMIN_KEY: 'has space in it but is long enough to pass' })).toThrow(
      /^Configuration error: SPLITBALLOT_ADMIN_KEY must be printable ASCII without spaces$/,
    );
  });
});
