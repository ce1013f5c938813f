#!/usr/bin/env node
// The project's one test command: type check, lint, then the vitest suite with a JSON report,
// ending with the plain line "N passed, N failed" so a run's count is readable in any log.
import { spawnSync } from 'node:child_process';
import { mkdirSync, readFileSync, existsSync } from 'node:fs';

const extra = process.argv.slice(2);
function run(cmd, args) {
  const r = spawnSync(cmd, args, { stdio: 'inherit' });
  return r.status ?? 1;
}

let failedSteps = 0;
if (run('npx', ['tsc', '-p', 'tsconfig.json', '--noEmit']) !== 0) {
  console.error('type check failed');
  failedSteps++;
}
if (run('npx', ['eslint', '.']) !== 0) {
  console.error('lint failed');
  failedSteps++;
}
mkdirSync('test-artifacts', { recursive: true });
const report = 'test-artifacts/vitest-report.json';
const status = run('npx', ['vitest', 'run', '--reporter=default', '--reporter=json', `--outputFile.json=${report}`, ...extra]);
let passed = 0;
let failed = 0;
if (existsSync(report)) {
  const r = JSON.parse(readFileSync(report, 'utf8'));
  passed = r.numPassedTests ?? 0;
  failed = r.numFailedTests ?? 0;
  // A test file that fails to load reports no failed test; count it once so it cannot pass silently.
  for (const file of r.testResults ?? []) {
    const failedInFile = (file.assertionResults ?? []).filter((a) => a.status === 'failed').length;
    if (file.status === 'failed' && failedInFile === 0) failed++;
  }
} else {
  failed = 1;
}
failed += failedSteps;
console.log(`${passed} passed, ${failed} failed`);
process.exit(status !== 0 || failed > 0 ? 1 : 0);
