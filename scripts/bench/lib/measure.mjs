// Whole-process measurement of a child command: wall time from spawn to exit, peak RSS, CPU time.
import { spawn } from 'node:child_process';
import { existsSync, readFileSync } from 'node:fs';
import { mkdtemp, readFile, rm } from 'node:fs/promises';
import os from 'node:os';
import { clearInterval, setInterval } from 'node:timers';
import { join } from 'node:path';
import { performance } from 'node:perf_hooks';

const GNU_TIME = '/usr/bin/time';

/** True when GNU time is available; its -v report gives the child's peak RSS from the kernel (wait4 rusage). */
export function hasGnuTime() {
  return existsSync(GNU_TIME);
}

/**
 * Runs `cmd args` and resolves { wallSeconds, peakRssMb, userSeconds, systemSeconds, code, stderr, rssSource }.
 * Wall time is taken here (spawn → 'exit'), not from GNU time, so it is measured the same way with
 * or without it; GNU time's own startup is a few ms and applies to both tools alike.
 * Without GNU time, peak RSS is VmHWM polled from /proc/<pid>/status: VmHWM is the kernel's
 * high-water mark, so the last sample before exit misses at most the final ~20 ms of growth.
 */
export async function measureProcess(cmd, args, { env = process.env, cwd = process.cwd() } = {}) {
  const useTime = hasGnuTime();
  const tmp = useTime ? await mkdtemp(join(os.tmpdir(), 'cairn-bench-time-')) : null;
  const timeOut = tmp ? join(tmp, 'time.txt') : null;
  const argv = useTime ? ['-v', '-o', timeOut, cmd, ...args] : args;
  const exe = useTime ? GNU_TIME : cmd;

  const t0 = performance.now();
  const child = spawn(exe, argv, { env, cwd, stdio: ['ignore', 'pipe', 'pipe'] });
  let stderr = '';
  let stdout = '';
  child.stdout.on('data', (b) => (stdout += b));
  child.stderr.on('data', (b) => (stderr += b));
  let hwmKb = 0;
  const poll = useTime
    ? null
    : setInterval(() => {
        try {
          const m = /VmHWM:\s+(\d+) kB/.exec(readFileSync(`/proc/${child.pid}/status`, 'utf8'));
          if (m) hwmKb = Math.max(hwmKb, Number(m[1]));
        } catch {
          // the process has just exited
        }
      }, 20);
  const code = await new Promise((resolve, reject) => {
    child.on('error', reject);
    child.on('exit', (c, sig) => resolve(c ?? sig));
  });
  const wallSeconds = (performance.now() - t0) / 1000;
  if (poll) clearInterval(poll);

  let peakRssMb = hwmKb / 1024;
  let userSeconds = null;
  let systemSeconds = null;
  if (useTime) {
    const report = await readFile(timeOut, 'utf8').catch(() => '');
    const num = (re) => {
      const m = re.exec(report);
      return m ? Number(m[1]) : null;
    };
    const rssKb = num(/Maximum resident set size \(kbytes\):\s*(\d+)/);
    peakRssMb = rssKb === null ? NaN : rssKb / 1024;
    userSeconds = num(/User time \(seconds\):\s*([\d.]+)/);
    systemSeconds = num(/System time \(seconds\):\s*([\d.]+)/);
    await rm(tmp, { recursive: true, force: true });
  }
  return { wallSeconds, peakRssMb, userSeconds, systemSeconds, code, stdout, stderr, rssSource: useTime ? 'GNU time -v' : '/proc VmHWM poll' };
}
