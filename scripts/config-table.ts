// Writes README.md's configuration table (between the config-table markers), generated from
// src/config.ts: `npm run config-table` after changing a setting.
import { readFileSync, writeFileSync } from 'node:fs';
import { configTable } from '../src/config-table.js';

const readme = new URL('../README.md', import.meta.url);
const text = readFileSync(readme, 'utf8');
const next = text.replace(/(<!-- config-table:start -->\n)[\s\S]*?(<!-- config-table:end -->)/, (_m, start: string, end: string) => start + configTable() + end);
if (next === text && !text.includes('<!-- config-table:start -->')) throw new Error('README.md has no config-table markers');
writeFileSync(readme, next);
console.log('README.md configuration table updated');
