import { existsSync } from 'node:fs';
import { fileURLToPath } from 'node:url';

/**
 * A module file to start in a worker thread or child process, next to the calling module. From the
 * built package that is the .js file; when cairn runs from its TypeScript sources (tests, `tsx`),
 * the .ts file, started with the tsx loader that is a development dependency.
 */
export function entryFile(callerUrl: string, baseName: string): { path: string; execArgv: string[] } {
  const js = fileURLToPath(new URL(`./${baseName}.js`, callerUrl));
  if (existsSync(js)) return { path: js, execArgv: [] };
  const ts = fileURLToPath(new URL(`./${baseName}.ts`, callerUrl));
  if (existsSync(ts)) return { path: ts, execArgv: ['--import', 'tsx'] };
  throw new Error(`cannot find ${baseName}.js or .ts next to ${callerUrl}`);
}
