// The container files (Dockerfile, .dockerignore, docker-compose.yml) agree with the code: no Docker
// engine runs here, so this is what keeps them from drifting from src/config.ts, the CLI and routes.
import { spawn } from 'node:child_process';
import { mkdtempSync, readFileSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import pino from 'pino';
import { describe, expect, it } from 'vitest';
// `yaml` is not a dependency of cairn: it is installed for @fastify/swagger, and only read here.
import { parse as parseYaml } from 'yaml';
import { openapiDocument } from '../../src/api/openapi-document.js';
import { startServer } from '../../src/api/server.js';
import { buildProgram } from '../../src/cli/program.js';
import { configSchema, loadConfig } from '../../src/config.js';

const root = new URL('../../', import.meta.url);
const read = (path: string) => readFileSync(new URL(path, root), 'utf8');

// ---- Dockerfile ----

interface Instruction {
  op: string;
  args: string;
  /** 0 for the first FROM's stage, 1 for the next, ... */
  stage: number;
}

/** Instructions in order, with `\` continuations joined and comment lines dropped (as Docker does). */
function parseDockerfile(text: string): Instruction[] {
  const out: Instruction[] = [];
  let stage = -1;
  let buf = '';
  for (const raw of text.split('\n')) {
    const line = raw.trim();
    if (line.startsWith('#') || (line === '' && buf === '')) continue;
    if (line.endsWith('\\')) {
      buf += line.slice(0, -1) + ' ';
      continue;
    }
    const whole = (buf + line).trim();
    buf = '';
    const m = /^(\S+)\s*(.*)$/.exec(whole)!;
    const op = m[1].toUpperCase();
    if (op === 'FROM') stage++;
    out.push({ op, args: m[2], stage });
  }
  return out;
}

const dockerfile = parseDockerfile(read('Dockerfile'));
const lastStage = Math.max(...dockerfile.map((i) => i.stage));
const runtime = dockerfile.filter((i) => i.stage === lastStage);
const build = dockerfile.filter((i) => i.stage === 0);
const only = (list: Instruction[], op: string): Instruction => {
  const found = list.filter((i) => i.op === op);
  expect(found, `exactly one ${op} in the stage`).toHaveLength(1);
  return found[0];
};
/** `ENV A=1 B=2` of the runtime stage. */
function runtimeEnv(): Record<string, string> {
  const env: Record<string, string> = {};
  for (const i of runtime.filter((x) => x.op === 'ENV')) {
    for (const pair of i.args.split(/\s+/)) {
      const eq = pair.indexOf('=');
      expect(eq, `ENV ${pair} uses the KEY=value form`).toBeGreaterThan(0);
      env[pair.slice(0, eq)] = pair.slice(eq + 1);
    }
  }
  return env;
}
const dockerEnv = runtimeEnv();
const jsonArgs = (op: string): string[] => JSON.parse(only(runtime, op).args) as string[];
const healthcheckCommand = (): string[] => {
  const m = /\bCMD\s+(\[.*\])\s*$/.exec(only(runtime, 'HEALTHCHECK').args);
  expect(m, 'HEALTHCHECK uses the exec form CMD [...]').not.toBeNull();
  return JSON.parse(m![1]) as string[];
};

// ---- docker-compose.yml ----

interface Service {
  image?: string;
  build?: string;
  command?: string[];
  ports?: string[];
  environment?: Record<string, string>;
  volumes?: string[];
  depends_on?: Record<string, { condition: string }>;
  deploy?: { replicas?: number };
  healthcheck?: { test?: string[]; disable?: boolean };
  stop_grace_period?: string;
}
const compose = parseYaml(read('docker-compose.yml')) as { services: Record<string, Service>; volumes: Record<string, unknown> };
const { api, worker, redis } = compose.services;
const cairnServices = { api, worker };

/** Compose's `${VAR}`, `${VAR:-default}` and `${VAR:?message}` with the given host environment. */
function interpolate(value: string, host: Record<string, string>): string {
  return value.replace(/\$\{([A-Z0-9_]+)(?::([-?])([^}]*))?\}/g, (_all, name: string, kind?: string, rest?: string) => {
    const v = host[name];
    if (v !== undefined && v !== '') return v;
    if (kind === '?') throw new Error(`required variable ${name} is missing: ${rest}`);
    return kind === '-' ? (rest ?? '') : '';
  });
}
const interpolatedNames = (value: string) => [...value.matchAll(/\$\{([A-Z0-9_]+)/g)].map((m) => m[1]);
/** A service's environment as the container sees it: the image's ENV, then compose's. */
const containerEnv = (s: Service, host: Record<string, string>) => ({ ...dockerEnv, ...Object.fromEntries(Object.entries(s.environment ?? {}).map(([k, v]) => [k, interpolate(String(v), host)])) });

const configNames = new Set([...Object.keys(configSchema.shape), 'NODE_ENV']);
const defaults = loadConfig({});
const someKeys = `north-yard:${'ab'.repeat(32)}`;
const pkg = JSON.parse(read('package.json')) as { bin: Record<string, string>; scripts: Record<string, string>; engines: { node: string } };

/** Named-volume mounts `name:/target` of a service. */
const mounts = (s: Service) => (s.volumes ?? []).map((v) => {
  const [source, target] = v.split(':');
  return { source, target };
});

describe('Dockerfile', () => {
  it('builds on node:20-bookworm-slim in two stages, a version package.json engines accepts', () => {
    const froms = dockerfile.filter((i) => i.op === 'FROM').map((i) => i.args.split(/\s+/)[0]);
    expect(froms).toEqual(['node:20-bookworm-slim', 'node:20-bookworm-slim']);
    expect(pkg.engines.node).toMatch(/^>=20\.\d+$/);
  });

  it('copies .npmrc (onnxruntime-node-install=skip) before npm ci, then builds and prunes dev dependencies', () => {
    expect(read('.npmrc')).toMatch(/^onnxruntime-node-install=skip$/m);
    const npmrcAt = build.findIndex((i) => i.op === 'COPY' && i.args.split(/\s+/).includes('.npmrc'));
    const ciAt = build.findIndex((i) => i.op === 'RUN' && /\bnpm ci\b/.test(i.args));
    const buildAt = build.findIndex((i) => i.op === 'RUN' && /\bnpm run build\b/.test(i.args));
    const pruneAt = build.findIndex((i) => i.op === 'RUN' && /\bnpm prune --omit=dev\b/.test(i.args));
    expect(npmrcAt).toBeGreaterThanOrEqual(0);
    expect(npmrcAt).toBeLessThan(ciAt);
    expect(ciAt).toBeLessThan(buildAt);
    expect(buildAt).toBeLessThanOrEqual(pruneAt);
    // The build script's tsconfig and what it includes are copied before `npm run build`.
    const tsconfig = /tsc -p (\S+)/.exec(pkg.scripts.build)![1];
    const included = (JSON.parse(read(tsconfig)) as { include: string[] }).include;
    const copied = build.slice(0, buildAt).filter((i) => i.op === 'COPY').flatMap((i) => i.args.split(/\s+/).slice(0, -1));
    for (const path of [tsconfig, 'tsconfig.json', ...included]) expect(copied, path).toContain(path);
  });

  it('keeps out of the build context nothing it copies, and keeps out node_modules, dist and local data', () => {
    const patterns = read('.dockerignore').split('\n').map((l) => l.trim()).filter((l) => l && !l.startsWith('#'));
    const globRe = (p: string) => new RegExp(`^${p.replace(/[.+^${}()|[\]\\]/g, '\\$&').replace(/\*/g, '[^/]*')}(/.*)?$`);
    const ignored = (path: string) => patterns.some((p) => !p.startsWith('!') && globRe(p).test(path));
    const copiedFromContext = dockerfile.filter((i) => i.op === 'COPY' && !i.args.startsWith('--from')).flatMap((i) => i.args.split(/\s+/).slice(0, -1));
    expect(copiedFromContext).toContain('package-lock.json');
    for (const path of copiedFromContext) expect(ignored(path), `${path} is copied but .dockerignore drops it`).toBe(false);
    for (const path of ['node_modules', 'dist', 'test-artifacts', 'cairn-data', 'demo', '.git', '.env']) expect(ignored(path), path).toBe(true);
  });

  it('runs as node, with the bin of package.json as ENTRYPOINT and a cairn command as CMD', () => {
    expect(only(runtime, 'USER').args).toBe('node');
    expect(jsonArgs('ENTRYPOINT')).toEqual(['node', pkg.bin.cairn]);
    const commands = buildProgram().commands.map((c) => c.name());
    expect(commands).toContain(jsonArgs('CMD')[0]);
    expect(jsonArgs('CMD')).toEqual(['serve']);
    for (const path of ['node_modules', 'dist']) {
      expect(runtime.some((i) => i.op === 'COPY' && i.args.startsWith('--from=build') && i.args.includes(`/app/${path} `))).toBe(true);
    }
    expect(runtime.some((i) => i.op === 'COPY' && i.args.split(/\s+/)[0] === 'package.json')).toBe(true);
  });

  it('sets only variables src/config.ts defines (or NODE_ENV), to values it accepts', () => {
    expect(Object.keys(dockerEnv).sort()).toEqual(['CAIRN_DATA_DIR', 'CAIRN_HOST', 'CAIRN_PORT', 'NODE_ENV']);
    for (const name of Object.keys(dockerEnv)) expect(configNames, name).toContain(name);
    expect(dockerEnv.NODE_ENV).toBe('production');
    const config = loadConfig(dockerEnv);
    expect(config.CAIRN_HOST).toBe('0.0.0.0');
    expect(config.CAIRN_DATA_DIR).toBe('/data');
  });

  it('exposes CAIRN_PORT, which is the default port of the configuration', () => {
    expect(only(runtime, 'EXPOSE').args).toBe(dockerEnv.CAIRN_PORT);
    expect(Number(dockerEnv.CAIRN_PORT)).toBe(defaults.CAIRN_PORT);
  });

  it('declares CAIRN_DATA_DIR as a VOLUME owned by node (chown before VOLUME, or it is lost)', () => {
    expect(jsonArgs('VOLUME')).toEqual([dockerEnv.CAIRN_DATA_DIR]);
    const chownAt = runtime.findIndex((i) => i.op === 'RUN' && i.args.includes(`chown node:node ${dockerEnv.CAIRN_DATA_DIR}`));
    expect(chownAt).toBeGreaterThanOrEqual(0);
    expect(chownAt).toBeLessThan(runtime.findIndex((i) => i.op === 'VOLUME'));
  });

  it('health-checks a route the API has (/healthz), with node and no curl', async () => {
    const cmd = healthcheckCommand();
    expect(cmd.slice(0, 2)).toEqual(['node', '-e']);
    const path = /'(\/[^']*)'/.exec(cmd[2])?.[1];
    expect(path).toBe('/healthz');
    expect(cmd[2]).toContain('http://127.0.0.1:');
    const doc = await openapiDocument();
    expect(Object.keys(doc.paths as object)).toContain(path);
  });

  it('whose command passes against a server configured like the container, and fails once it is gone', async () => {
    const dir = mkdtempSync(join(tmpdir(), 'cairn-deploy-test-'));
    // The container's settings, on a free port and a temporary folder, with API keys as compose requires.
    const config = loadConfig({ ...dockerEnv, CAIRN_API_KEYS: someKeys, CAIRN_DATA_DIR: dir, CAIRN_PORT: '0', CAIRN_COMPUTE_THREADS: '1', CAIRN_SHUTDOWN_GRACE_SECONDS: '0' });
    const server = await startServer(config, pino({ level: 'silent' }));
    const port = new URL(server.url).port;
    const [node, ...args] = healthcheckCommand();
    expect(node).toBe('node');
    // Asynchronous: the server answers from this process's event loop.
    const check = () =>
      new Promise<number | null>((resolve, reject) => {
        const child = spawn(process.execPath, args, { env: { ...process.env, CAIRN_PORT: port }, stdio: 'ignore', timeout: 10_000 });
        child.on('error', reject);
        child.on('exit', (code) => resolve(code));
      });
    try {
      expect(await check()).toBe(0);
    } finally {
      await server.close();
      rmSync(dir, { recursive: true, force: true });
    }
    expect(await check()).toBe(1);
  });
});

describe('docker-compose.yml', () => {
  it('has redis, api and worker services; api and worker build this Dockerfile', () => {
    expect(Object.keys(compose.services).sort()).toEqual(['api', 'redis', 'worker']);
    expect(redis.image).toBe('redis:7-alpine');
    expect(api.build).toBe('.');
    expect(worker.build).toBe('.');
  });

  it('runs commands the cairn CLI has', () => {
    const commands = buildProgram().commands.map((c) => c.name());
    expect(api.command).toEqual(['serve']);
    expect(worker.command).toEqual(['worker']);
    for (const s of Object.values(cairnServices)) expect(commands).toContain(s.command![0]);
  });

  it('sets and interpolates only variables src/config.ts defines', () => {
    for (const [name, s] of Object.entries(cairnServices)) {
      for (const [key, value] of Object.entries(s.environment ?? {})) {
        expect(configNames, `${name}: ${key}`).toContain(key);
        for (const used of interpolatedNames(String(value))) expect(configNames, `${name}: \${${used}}`).toContain(used);
      }
    }
  });

  it('requires CAIRN_API_KEYS from the host (a keyless API binds to 127.0.0.1, unreachable through the port)', () => {
    expect(api.environment!.CAIRN_API_KEYS).toMatch(/^\$\{CAIRN_API_KEYS:\?[^}]+\}$/);
    expect(() => containerEnv(api, {})).toThrow(/CAIRN_API_KEYS/);
    const config = loadConfig(containerEnv(api, { CAIRN_API_KEYS: someKeys }));
    expect(config.CAIRN_API_KEYS).toBe(someKeys);
    expect(config.CAIRN_HOST).toBe('0.0.0.0');
  });

  it('gives api and workers settings loadConfig accepts', () => {
    for (const s of Object.values(cairnServices)) expect(() => loadConfig(containerEnv(s, { CAIRN_API_KEYS: someKeys }))).not.toThrow();
    expect(loadConfig(containerEnv(api, { CAIRN_API_KEYS: someKeys, LOG_LEVEL: 'debug' })).LOG_LEVEL).toBe('debug');
  });

  it("publishes the api's port: the Dockerfile's EXPOSE and CAIRN_PORT, and the configuration's default", () => {
    expect(api.ports).toHaveLength(1);
    const [hostPort, containerPort] = api.ports![0].split(':');
    const port = loadConfig(containerEnv(api, { CAIRN_API_KEYS: someKeys })).CAIRN_PORT;
    expect(Number(containerPort)).toBe(port);
    expect(containerPort).toBe(only(runtime, 'EXPOSE').args);
    expect(containerPort).toBe(dockerEnv.CAIRN_PORT);
    expect(port).toBe(defaults.CAIRN_PORT);
    expect(hostPort).toBe(containerPort);
    expect(worker.ports).toBeUndefined();
  });

  it('mounts one named volume at CAIRN_DATA_DIR in api and every worker (the same path as the image)', () => {
    const apiMounts = mounts(api);
    expect(apiMounts).toEqual(mounts(worker));
    expect(apiMounts).toHaveLength(1);
    const [{ source, target }] = apiMounts;
    expect(source).toBe('cairn-data');
    expect(Object.keys(compose.volumes)).toContain(source);
    for (const s of Object.values(cairnServices)) expect(loadConfig(containerEnv(s, { CAIRN_API_KEYS: someKeys })).CAIRN_DATA_DIR).toBe(target);
    expect(target).toBe(dockerEnv.CAIRN_DATA_DIR);
    expect(jsonArgs('VOLUME')).toEqual([target]);
  });

  it('points api and workers at the same Redis, the redis service on its default port', () => {
    expect(api.environment!.REDIS_URL).toBe(worker.environment!.REDIS_URL);
    const url = new URL(api.environment!.REDIS_URL);
    expect(url.protocol).toBe('redis:');
    expect(Object.keys(compose.services)).toContain(url.hostname);
    expect(url.port).toBe('6379');
    expect(compose.services[url.hostname].command).not.toContain('--port');
  });

  it('starts api and workers once redis answers ping', () => {
    expect(redis.healthcheck!.test).toEqual(['CMD', 'redis-cli', 'ping']);
    for (const s of Object.values(cairnServices)) expect(s.depends_on?.redis?.condition).toBe('service_healthy');
  });

  it('runs two workers, without the HTTP health check of the image', () => {
    expect(worker.deploy?.replicas).toBeGreaterThanOrEqual(2);
    expect(worker.healthcheck?.disable).toBe(true);
    expect(api.healthcheck).toBeUndefined();
  });

  it('waits longer than CAIRN_SHUTDOWN_GRACE_SECONDS before killing api and workers', () => {
    for (const s of Object.values(cairnServices)) {
      const m = /^(\d+)s$/.exec(s.stop_grace_period ?? '');
      expect(m, 'stop_grace_period in seconds').not.toBeNull();
      expect(Number(m![1])).toBeGreaterThan(loadConfig(containerEnv(s, { CAIRN_API_KEYS: someKeys })).CAIRN_SHUTDOWN_GRACE_SECONDS);
    }
  });
});
