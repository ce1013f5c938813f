// What every benchmark prints about the machine, and the build it runs on.
import { spawnSync } from 'node:child_process';
import { existsSync } from 'node:fs';
import os from 'node:os';
import { join } from 'node:path';

export const loadavg = () => os.loadavg().map((v) => v.toFixed(2)).join(' ');

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
