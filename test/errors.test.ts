import { readdirSync, readFileSync, statSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { CairnError, ERROR_CATALOGUE, type ErrorCode } from '../src/errors.js';

const THIS_FILE = join(import.meta.dirname, 'errors.test.ts');

function testSources(dir: string): string[] {
  return readdirSync(dir).flatMap((name) => {
    const path = join(dir, name);
    if (statSync(path).isDirectory()) return testSources(path);
    // This file lists every code itself, so it does not count.
    return path.endsWith('.ts') && path !== THIS_FILE ? [readFileSync(path, 'utf8')] : [];
  });
}

describe('error catalogue', () => {
  const codes = Object.keys(ERROR_CATALOGUE) as ErrorCode[];

  it('has stable upper-case codes with 4xx/5xx statuses and a message each', () => {
    for (const code of codes) {
      expect(code).toMatch(/^[A-Z][A-Z0-9_]+$/);
      const { status, message } = ERROR_CATALOGUE[code];
      expect(status >= 400 && status < 600).toBe(true);
      expect(message.length).toBeGreaterThan(10);
    }
    // Codes are object keys, hence unique; messages should be too, so a reader can tell errors apart.
    expect(new Set(codes.map((c) => ERROR_CATALOGUE[c].message)).size).toBe(codes.length);
  });

  it('every code is asserted by at least one test', () => {
    const sources = testSources(join(import.meta.dirname, '.')).join('\n');
    const untested = codes.filter((code) => !sources.includes(`'${code}'`));
    expect(untested).toEqual([]);
  });

  it('serialises as {error: {code, message, details}}', () => {
    const err = new CairnError('K_TOO_LARGE', undefined, { k: 5, rows: 3 });
    expect(err.status).toBe(422);
    expect(JSON.parse(JSON.stringify(err))).toEqual({ error: { code: 'K_TOO_LARGE', message: ERROR_CATALOGUE.K_TOO_LARGE.message, details: { k: 5, rows: 3 } } });
  });
});
