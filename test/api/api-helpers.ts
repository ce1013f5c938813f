import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import pino from 'pino';
import request from 'supertest';
import { expect } from 'vitest';
import { startServer, type RunningServer } from '../../src/api/server.js';
import { loadConfig } from '../../src/config.js';

export interface TestServer {
  server: RunningServer;
  dir: string;
  stop(): Promise<void>;
}

/** A real server on a free port over a fresh data folder; `env` overrides the configuration. */
export async function testServer(env: Record<string, string> = {}): Promise<TestServer> {
  const dir = mkdtempSync(join(tmpdir(), 'cairn-api-test-'));
  const config = loadConfig({ CAIRN_DATA_DIR: dir, CAIRN_PORT: '0', CAIRN_COMPUTE_THREADS: '1', CAIRN_SHUTDOWN_GRACE_SECONDS: '0', CAIRN_CHECKPOINT_SECONDS: '0.5', ...env });
  const server = await startServer(config, pino({ level: process.env.TEST_LOG_LEVEL ?? 'silent' }));
  return {
    server,
    dir,
    async stop() {
      await server.close();
      rmSync(dir, { recursive: true, force: true });
    },
  };
}

/** Polls a dataset or job until it is no longer queued or running. */
export async function settle(url: string, path: string, auth: Record<string, string> = {}, timeoutMs = 90_000): Promise<Record<string, unknown>> {
  const started = Date.now();
  for (;;) {
    const res = await request(url).get(path).set(auth);
    expect(res.status).toBe(200);
    if (!['queued', 'running'].includes(res.body.status as string)) return res.body as Record<string, unknown>;
    if (Date.now() - started > timeoutMs) throw new Error(`${path} still ${res.body.status} after ${timeoutMs} ms`);
    await new Promise((r) => setTimeout(r, 100));
  }
}

/** Reads a Server-Sent Events stream to its end; returns the events in order. */
export async function readEvents(url: string, path: string, auth: Record<string, string> = {}): Promise<Array<{ event: string; data: Record<string, unknown> }>> {
  const res = await fetch(url + path, { headers: auth });
  expect(res.status).toBe(200);
  expect(res.headers.get('content-type')).toMatch(/^text\/event-stream/);
  const text = await res.text();
  return text
    .split('\n\n')
    .filter((block) => block.includes('event:'))
    .map((block) => {
      const event = /^event: (.*)$/m.exec(block)![1];
      const data = JSON.parse(/^data: (.*)$/m.exec(block)![1]) as Record<string, unknown>;
      return { event, data };
    });
}
