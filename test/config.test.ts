import { readFileSync } from 'node:fs';
import { Writable } from 'node:stream';
import { describe, expect, it } from 'vitest';
import { hashApiKey } from '../src/api/auth.js';
import { runKeygen } from '../src/cli/service-commands.js';
import { configTable } from '../src/config-table.js';
import { ConfigError, configSchema, loadConfig, parseApiKeys } from '../src/config.js';

const names = Object.keys(configSchema.shape) as Array<keyof typeof configSchema.shape>;
const UNITS: Record<string, number> = { KiB: 1024, MiB: 1024 ** 2, GiB: 1024 ** 3, TiB: 1024 ** 4 };

/**
 * The single default a `.describe()` text states, as loadConfig should return it: "Default X."
 * (a number, optionally with a binary unit, or a word/path), "X (default)", "Empty (default)",
 * or "Unset: ..." for a setting without a default. null when the text states none.
 */
function statedDefault(description: string): { value: string | number | undefined } | null {
  const unit = /\bDefault (\d+(?:\.\d+)?) (KiB|MiB|GiB|TiB)\b/.exec(description);
  if (unit) return { value: Number(unit[1]) * UNITS[unit[2]] };
  const plain = /\bDefault (\S+?)[.;,]?(?=\s|$)/.exec(description);
  if (plain) return { value: plain[1] };
  const marked = /(\S+) \(default\)/.exec(description);
  if (marked) return { value: marked[1].toLowerCase() === 'empty' ? '' : marked[1] };
  if (/(^|\.\s+)Unset:/.test(description)) return { value: undefined };
  return null;
}

function configErrorOf(fn: () => unknown): ConfigError {
  try {
    fn();
  } catch (err) {
    if (err instanceof ConfigError) return err;
    throw err;
  }
  throw new Error('expected a ConfigError');
}

const hex = (c: string) => c.repeat(64);

describe('loadConfig', () => {
  it('every setting states its default in its description, and loadConfig({}) returns exactly that', () => {
    const defaults = loadConfig({}) as Record<string, unknown>;
    for (const name of names) {
      const description = configSchema.shape[name].description ?? '';
      const stated = statedDefault(description);
      expect(stated, `${name}: description states no single default: ${JSON.stringify(description)}`).not.toBeNull();
      const actual = defaults[name];
      if (typeof actual === 'number') expect(actual, name).toBe(Number(stated!.value));
      else expect(actual, name).toBe(stated!.value);
    }
  });

  it('reads the stated defaults correctly (spot checks of the description parser)', () => {
    expect(statedDefault('Largest upload. Default 8 GiB.')).toEqual({ value: 8 * 1024 ** 3 });
    expect(statedDefault('Address. Default 0.0.0.0; forced elsewhere.')).toEqual({ value: '0.0.0.0' });
    expect(statedDefault('Folder. Default ./cairn-data.')).toEqual({ value: './cairn-data' });
    expect(statedDefault('Hours. Default 720 (30 days).')).toEqual({ value: '720' });
    expect(statedDefault('Threads; 0 (default) uses every core.')).toEqual({ value: '0' });
    expect(statedDefault("Keys. Empty (default): auth is off.")).toEqual({ value: '' });
    expect(statedDefault('Redis. Unset: the embedded queue runs jobs.')).toEqual({ value: undefined });
    expect(statedDefault('No default mentioned.')).toBeNull();
  });

  it.each([
    ['CAIRN_PORT', '70000'],
    ['CAIRN_PORT', 'eighty'],
    ['CAIRN_API_KEYS', 'acme:nothex'],
    ['LOG_LEVEL', 'loud'],
    ['REDIS_URL', 'not a url'],
    ['CAIRN_WORKER_CONCURRENCY', '0'],
    ['CAIRN_CHECKPOINT_SECONDS', '0.01'],
    ['CAIRN_QUEUE_PREFIX', 'has space'],
  ])('rejects %s=%s with a ConfigError naming the variable', (name, value) => {
    const err = configErrorOf(() => loadConfig({ [name]: value }));
    expect(err.problems.map((p) => p.name)).toEqual([name]);
    expect(err.message).toContain(name);
  });

  it('names every bad variable at once', () => {
    const err = configErrorOf(() => loadConfig({ CAIRN_PORT: '-1', LOG_LEVEL: 'loud' }));
    expect(err.problems.map((p) => p.name).sort()).toEqual(['CAIRN_PORT', 'LOG_LEVEL']);
  });

  it('treats empty strings as unset', () => {
    const empty = Object.fromEntries(names.map((n) => [n, '']));
    expect(loadConfig(empty)).toEqual(loadConfig({}));
    expect(loadConfig({ CAIRN_PORT: '' }).CAIRN_PORT).toBe(8080);
    expect(loadConfig({ REDIS_URL: '' }).REDIS_URL).toBeUndefined();
  });

  it('coerces numbers and ignores variables it does not define', () => {
    const c = loadConfig({ CAIRN_PORT: '9090', CAIRN_CHECKPOINT_SECONDS: '0.5', REDIS_URL: 'redis://redis:6379/0', NODE_ENV: 'production', PATH: '/bin' });
    expect(c.CAIRN_PORT).toBe(9090);
    expect(c.CAIRN_CHECKPOINT_SECONDS).toBe(0.5);
    expect(c.REDIS_URL).toBe('redis://redis:6379/0');
    expect(Object.keys(c).sort()).toEqual([...names].sort());
  });
});

describe('parseApiKeys', () => {
  it("accepts comma-separated 'tenant:<64 hex>' entries", () => {
    expect(parseApiKeys(`a:${hex('0')},b:${hex('f')}`)).toEqual([
      { tenant: 'a', hash: hex('0') },
      { tenant: 'b', hash: hex('f') },
    ]);
    expect(parseApiKeys(` north-yard:${hex('1')} , `)).toEqual([{ tenant: 'north-yard', hash: hex('1') }]);
    expect(parseApiKeys('')).toEqual([]);
  });

  it.each([
    ['a bad tenant name', `Acme:${hex('0')}`],
    ['a tenant starting with -', `-acme:${hex('0')}`],
    ['a tenant with a space', `ac me:${hex('0')}`],
    ['a short hash', `acme:${'0'.repeat(63)}`],
    ['an upper-case hash', `acme:${hex('A')}`],
    ['an extra field', `acme:${hex('0')}:x`],
    ['a missing hash', 'acme'],
  ])('rejects %s, naming CAIRN_API_KEYS', (_what, text) => {
    const err = configErrorOf(() => parseApiKeys(text));
    expect(err.problems.map((p) => p.name)).toEqual(['CAIRN_API_KEYS']);
  });
});

describe('cairn keygen --tenant north-yard', () => {
  function keygen(tenant: string): string {
    let text = '';
    const out = new Writable({
      write(chunk: Buffer | string, _enc, done) {
        text += chunk.toString();
        done();
      },
    });
    runKeygen(tenant, out);
    return text;
  }

  it('prints a key and the CAIRN_API_KEYS entry holding its hash', () => {
    const text = keygen('north-yard');
    const key = /^key:\s+(\S+)$/m.exec(text)?.[1];
    const entry = /^config:\s+(\S+)$/m.exec(text)?.[1];
    expect(key).toBeDefined();
    expect(entry).toBeDefined();
    const [parsed] = parseApiKeys(entry!);
    expect(parsed.tenant).toBe('north-yard');
    expect(parsed.hash).toBe(hashApiKey(key!));
    expect(loadConfig({ CAIRN_API_KEYS: entry! }).CAIRN_API_KEYS).toBe(entry);
    // The key itself is not part of the configuration entry.
    expect(entry).not.toContain(key!);
  });

  it('prints a different key each time', () => {
    expect(keygen('north-yard')).not.toBe(keygen('north-yard'));
  });

  it('refuses a tenant name that CAIRN_API_KEYS would reject', () => {
    expect(() => keygen('North Yard')).toThrow(/tenant/);
  });
});

describe('README configuration table', () => {
  it('holds exactly the table generated from configSchema (regenerate it with `npm run config-table` after changing src/config.ts)', () => {
    const doc = readFileSync(new URL('../README.md', import.meta.url), 'utf8');
    const section = /<!-- config-table:start -->\n([\s\S]*?)<!-- config-table:end -->/.exec(doc);
    expect(section).not.toBeNull();
    expect(section![1]).toBe(configTable());
  });

  it('lists every setting once', () => {
    const table = configTable();
    for (const name of names) expect(table.split(`| \`${name}\` |`).length - 1, name).toBe(1);
  });
});
