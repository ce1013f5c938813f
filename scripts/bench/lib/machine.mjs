// What every benchmark prints about the machine, and the build it runs on.
import { spawnSync } from 'node:child_process';
import { existsSync, rmSync } from 'node:fs';
import { cp, mkdtemp, symlink, writeFile } from 'node:fs/promises';
import os from 'node:os';
import { join } from 'node:path';
import { pathToFileURL } from 'node:url';

export const loadavg = () => os.loadavg().map((v) => v.toFixed(2)).join(' ');

/** The machine facts line every benchmark prints: cores and CPU model, memory, Node version. */
export const machineLine = () =>
  `machine: ${os.availableParallelism()} cores (${os.cpus()[0]?.model ?? '?'}), ${(os.totalmem() / 2 ** 30).toFixed(1)} GiB, node ${process.version}`;

/**
 * MiB/s at which this process can touch memory it has not touched before (allocate and fill
 * `mib` MiB): page faults. On some virtual machines this is far below memory bandwidth, and every
 * large new buffer, file write (page cache) or copy of a dataset pays it.
 */
export function firstTouchMibPerSecond(mib = 256) {
  const t = performance.now();
  Buffer.alloc(mib * 2 ** 20, 1);
  return mib / ((performance.now() - t) / 1000);
}

export const uptime = () => {
  const r = spawnSync('uptime', { encoding: 'utf8' });
  return r.status === 0 ? r.stdout.trim() : `load average: ${loadavg()}`;
};

/**
 * `npm run build` in `root`. Other people may edit src/ concurrently, so a build can report type
 * errors on their half-finished work; tsc still emits what it can (noEmitOnError is off), so dist/
 * is then the current src/ as far as it compiles, and the output says so rather than hiding it.
 */
export function buildDist(root) {
  const t = Date.now();
  const b = spawnSync('npm', ['run', 'build'], { cwd: root, encoding: 'utf8' });
  if (b.status !== 0) {
    if (!existsSync(join(root, 'dist', 'cli', 'main.js'))) {
      process.stderr.write(`npm run build failed and there is no dist/:\n${b.stdout}${b.stderr}`);
      process.exit(1);
    }
    const errors = (b.stdout + b.stderr).split('\n').filter((l) => /error TS\d+/.test(l));
    console.log(`WARNING: npm run build reported ${errors.length} type error(s); benchmarking dist/ as emitted:\n${errors.slice(0, 5).map((l) => `  ${l}`).join('\n')}`);
  } else {
    console.log(`build: npm run build ok (${((Date.now() - t) / 1000).toFixed(1)} s)`);
  }
}

/**
 * A private copy of `root`'s dist/ in a temp folder removed on exit: others may rebuild dist/ while
 * a benchmark runs, and a child started minutes later must be the same cairn that the first one was
 * and that scores them. node_modules is linked, not copied; package.json only marks the .js files
 * as ES modules. Returns the folder, the CLI path and an importer of dist/ modules.
 */
export async function snapshotDist(root, name) {
  const work = await mkdtemp(join(os.tmpdir(), `cairn-bench-${name}-`));
  process.on('exit', () => rmSync(work, { recursive: true, force: true }));
  const snap = join(work, 'cairn');
  await cp(join(root, 'dist'), join(snap, 'dist'), { recursive: true });
  await writeFile(join(snap, 'package.json'), '{"type": "module"}\n');
  await symlink(join(root, 'node_modules'), join(snap, 'node_modules'), 'dir');
  return {
    work,
    cli: join(snap, 'dist', 'cli', 'main.js'),
    dist: (p) => import(pathToFileURL(join(snap, 'dist', p)).href),
  };
}
