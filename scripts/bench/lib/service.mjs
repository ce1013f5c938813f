// A `cairn serve` child process for the service benchmarks, and the HTTP calls they make to it.
import { spawn } from 'node:child_process';
import { randomBytes } from 'node:crypto';
import { createReadStream, readFileSync } from 'node:fs';
import { stat } from 'node:fs/promises';
import http from 'node:http';
import net from 'node:net';
import { basename } from 'node:path';
import { Readable } from 'node:stream';
import { pipeline } from 'node:stream/promises';
import { setTimeout as sleep } from 'node:timers/promises';

export function freePort() {
  return new Promise((resolve, reject) => {
    const srv = net.createServer();
    srv.unref();
    srv.on('error', reject);
    srv.listen(0, '127.0.0.1', () => {
      const { port } = srv.address();
      srv.close(() => resolve(port));
    });
  });
}

/**
 * `node <cli> serve` with `env`, behind `prefix` if given (e.g. ['taskset', '-c', '0']); keeps the
 * last 40 lines of its output for error messages.
 */
export function startServe(cli, cwd, env, prefix = []) {
  const [cmd, ...args] = [...prefix, process.execPath, cli, 'serve'];
  const child = spawn(cmd, args, { cwd, env, stdio: ['ignore', 'pipe', 'pipe'] });
  const tail = [];
  const keep = (b) => {
    for (const line of String(b).split('\n').filter(Boolean)) {
      tail.push(line);
      if (tail.length > 40) tail.shift();
    }
  };
  child.stdout.on('data', keep);
  child.stderr.on('data', keep);
  const exited = new Promise((resolve) => child.on('exit', (code, signal) => resolve({ code, signal })));
  child.on('error', (err) => keep(`spawn error: ${err.message}`));
  return { child, exited, tail, alive: () => child.exitCode === null && child.signalCode === null };
}

/** SIGTERM, then SIGKILL if it has not exited within `ms`. */
export async function stopServe(server, ms) {
  if (!server || !server.alive()) return server ? await server.exited : null;
  server.child.kill('SIGTERM');
  const timer = setTimeout(() => server.alive() && server.child.kill('SIGKILL'), ms);
  const how = await server.exited;
  clearTimeout(timer);
  return how;
}

/** A JSON (or FormData) request; resolves { status, body (parsed JSON or null), text }. */
export async function api(base, method, path, body, headers = {}) {
  const init = { method, headers: { ...headers } };
  if (body instanceof FormData) init.body = body;
  else if (body !== undefined) {
    init.body = JSON.stringify(body);
    init.headers['content-type'] = 'application/json';
  }
  const res = await fetch(base + path, init);
  const text = await res.text();
  let json = null;
  try {
    json = JSON.parse(text);
  } catch {
    // not JSON
  }
  return { status: res.status, body: json, text };
}

/** Calls `check` every `everyMs` until it returns something truthy; fails when the server exits or on the timeout. */
export async function waitUntil(what, timeoutMs, check, server, everyMs = 100) {
  const started = Date.now();
  for (;;) {
    if (server && !server.alive()) throw new Error(`the server exited while waiting for ${what}`);
    const done = await check();
    if (done) return done;
    if (Date.now() - started > timeoutMs) throw new Error(`timed out after ${timeoutMs / 1000} s waiting for ${what}`);
    await sleep(everyMs);
  }
}

export async function waitReady(base, server, timeoutMs = 30_000) {
  await waitUntil('/readyz', timeoutMs, async () => {
    try {
      return (await fetch(`${base}/readyz`)).status === 200;
    } catch {
      return false;
    }
  }, server);
}

/**
 * POSTs `path` (a file on disk) as the `file` part of a multipart/form-data body, with `fields` as
 * text parts before it. The body is streamed from disk with a known Content-Length, never held in
 * memory whole. Resolves { status, body, text } as api() does.
 */
export async function uploadMultipart(base, route, path, fields = {}, headers = {}) {
  const boundary = `cairn-bench-${randomBytes(12).toString('hex')}`;
  const texts = Object.entries(fields).map(([k, v]) => `--${boundary}\r\nContent-Disposition: form-data; name="${k}"\r\n\r\n${v}\r\n`);
  const head = Buffer.from(`${texts.join('')}--${boundary}\r\nContent-Disposition: form-data; name="file"; filename="${basename(path)}"\r\nContent-Type: application/octet-stream\r\n\r\n`);
  const tail = Buffer.from(`\r\n--${boundary}--\r\n`);
  const length = head.length + (await stat(path)).size + tail.length;
  async function* body() {
    yield head;
    yield* createReadStream(path, { highWaterMark: 1 << 20 });
    yield tail;
  }
  return new Promise((resolve, reject) => {
    const req = http.request(new URL(route, base), {
      method: 'POST',
      headers: { ...headers, 'content-type': `multipart/form-data; boundary=${boundary}`, 'content-length': String(length) },
    });
    req.on('response', (res) => {
      const parts = [];
      res.on('data', (b) => parts.push(b));
      res.on('error', reject);
      res.on('end', () => {
        const text = Buffer.concat(parts).toString('utf8');
        let json = null;
        try {
          json = JSON.parse(text);
        } catch {
          // not JSON
        }
        resolve({ status: res.statusCode, body: json, text });
      });
    });
    // A server that refuses early (413) may close the socket mid-body: its answer still arrives.
    pipeline(Readable.from(body()), req).catch((err) => setTimeout(() => reject(err), 1000));
  });
}

/** A field of /proc/<pid>/status in kB (VmHWM: the peak resident set so far; VmRSS: now), or null. */
export function procStatusKb(pid, field) {
  try {
    const m = new RegExp(`^${field}:\\s+(\\d+) kB`, 'm').exec(readFileSync(`/proc/${pid}/status`, 'utf8'));
    return m ? Number(m[1]) : null;
  } catch {
    return null;
  }
}

const CLOCK_TICKS = 100; // USER_HZ: 100 on every Linux architecture Node supports

/** CPU seconds of a process so far (all its threads), from /proc/<pid>/stat: { user, system }, or null. */
export function processCpu(pid) {
  try {
    const stat = readFileSync(`/proc/${pid}/stat`, 'utf8');
    const fields = stat.slice(stat.lastIndexOf(')') + 2).split(' ');
    return { user: Number(fields[11]) / CLOCK_TICKS, system: Number(fields[12]) / CLOCK_TICKS };
  } catch {
    return null;
  }
}

/** Busy CPU seconds of the whole machine so far (all cores; idle and iowait excluded), or null. */
export function hostBusySeconds() {
  try {
    const f = readFileSync('/proc/stat', 'utf8').split('\n')[0].trim().split(/\s+/).slice(1).map(Number);
    const total = f.slice(0, 8).reduce((a, b) => a + b, 0); // user … steal (guest time is inside user)
    return (total - f[3] - f[4]) / CLOCK_TICKS;
  } catch {
    return null;
  }
}
