#!/usr/bin/env node
import { CairnError } from '../errors.js';
import { buildProgram } from './program.js';

buildProgram().parseAsync(process.argv).catch((err: unknown) => {
  if (err instanceof CairnError) {
    process.stderr.write(`cairn: ${err.code}: ${err.message}\n`);
    if (Object.keys(err.details).length) process.stderr.write(`${JSON.stringify(err.details)}\n`);
    process.exit(2);
  }
  process.stderr.write(`cairn: internal error: ${err instanceof Error ? (err.stack ?? err.message) : String(err)}\n`);
  process.exit(1);
});
