import Fastify from 'fastify';
import pino from 'pino';
import { Writable } from 'node:stream';
import { describe, expect, it } from 'vitest';
import { ApiKeys, hashApiKey, newApiKey } from '../../src/api/auth.js';
import { RequestLog } from '../../src/api/request-log.js';
import { TaskReader } from '../../src/api/task-reader.js';
import { TaskStore } from '../../src/jobs/task-store.js';
import type { TaskRef } from '../../src/jobs/task.js';

describe('the status-poll path', () => {
  it('an accepted key is remembered, and a wrong or missing key is still refused after it', () => {
    const key = newApiKey();
    const keys = new ApiKeys([{ tenant: 'acme', hash: hashApiKey(key) }]);
    for (let i = 0; i < 3; i++) expect(keys.tenant(`Bearer ${key}`)).toBe('acme');
    expect(() => keys.tenant(`Bearer ${key}x`)).toThrow(expect.objectContaining({ code: 'UNAUTHORIZED' }));
    expect(() => keys.tenant(undefined)).toThrow(expect.objectContaining({ code: 'UNAUTHORIZED' }));
    expect(() => keys.tenant(`Basic ${key}`)).toThrow(expect.objectContaining({ code: 'UNAUTHORIZED' }));
  });

  it('a cached body is reused while its inputs are the same objects, rebuilt when one changes, dropped by forget', () => {
    const reader = new TaskReader(new TaskStore('/nonexistent-cairn-data'));
    const ref: TaskRef = { kind: 'job', tenant: 't', id: 'job-1' };
    const spec = { a: 1 };
    let builds = 0;
    const build = (state: object) => () => `${++builds}:${JSON.stringify(state)}`;
    const s1 = { status: 'running' };
    const first = reader.body(ref, [spec, s1], build(s1));
    expect(reader.body(ref, [spec, s1], build(s1))).toBe(first);
    const s2 = { status: 'running' }; // the same content read again is a new object: rebuilt
    expect(reader.body(ref, [spec, s2], build(s2)).toString()).toBe('2:{"status":"running"}');
    expect(reader.body(ref, [spec, s2, null], build(s2)).toString()).toBe('3:{"status":"running"}');
    reader.forget(ref);
    expect(reader.body(ref, [spec, s2, null], build(s2)).toString()).toBe('4:{"status":"running"}');
  });

  it('logs one debug line per answered request (route pattern, status, ms; no query string) and nothing at info', async () => {
    for (const level of ['debug', 'info'] as const) {
      const lines: Record<string, unknown>[] = [];
      const sink = new Writable({
        write(chunk: Buffer, _enc, cb) {
          for (const l of String(chunk).split('\n').filter(Boolean)) lines.push(JSON.parse(l) as Record<string, unknown>);
          cb();
        },
      });
      const app = Fastify({ loggerInstance: pino({ level }, sink), logController: new RequestLog() });
      app.get('/v1/things/:id', async () => ({ ok: true }));
      expect((await app.inject('/v1/things/abc?ids=secret-item')).statusCode).toBe(200);
      await app.close();
      const perRequest = lines.filter((l) => l.reqId !== undefined);
      if (level === 'info') expect(perRequest).toEqual([]);
      else {
        expect(perRequest).toHaveLength(1);
        expect(perRequest[0]).toMatchObject({ level: 20, msg: 'request completed', method: 'GET', route: '/v1/things/:id', status: 200 });
        expect(JSON.stringify(perRequest[0])).not.toContain('secret-item');
      }
    }
  });
});
