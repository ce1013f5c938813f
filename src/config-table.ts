import { configSchema, loadConfig } from './config.js';

/** A default as the table shows it: the value loadConfig gives when the variable is unset. */
function shownDefault(value: unknown): string {
  if (value === undefined) return '(unset)';
  if (value === '') return '(empty)';
  return `\`${String(value)}\``;
}

/** Markdown table cells hold no '|' or line break. */
function cell(text: string): string {
  return text.replace(/\|/g, '\\|').replace(/\s*\n\s*/g, ' ');
}

/**
 * The configuration table of README.md (variable, default, meaning), generated from
 * configSchema: defaults are what loadConfig({}) returns, meanings are the `.describe()` texts.
 * `node --import tsx scripts/config-table.ts` prints it; a test fails when the doc differs.
 */
export function configTable(): string {
  const defaults = loadConfig({}) as Record<string, unknown>;
  const rows = Object.entries(configSchema.shape).map(([name, schema]) => `| \`${name}\` | ${shownDefault(defaults[name])} | ${cell(schema.description ?? '')} |`);
  return ['| Variable | Default | Meaning |', '| --- | --- | --- |', ...rows].join('\n') + '\n';
}
