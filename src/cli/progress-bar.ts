import type { SelectProgress } from '../core/result.js';

/**
 * A one-line progress bar on stderr. On a terminal it redraws in place; otherwise (logs, CI) it
 * prints a line per phase and every 10% so the output stays readable.
 */
export class ProgressBar {
  private lastLine = '';
  private lastPhase = '';
  private lastDecile = -1;
  private lastDraw = 0;

  constructor(
    private readonly stream: NodeJS.WriteStream = process.stderr,
    private readonly enabled = true,
  ) {}

  update(p: SelectProgress): void {
    if (!this.enabled) return;
    const width = 24;
    const filled = Math.round(p.fraction * width);
    const bar = '#'.repeat(filled) + '-'.repeat(width - filled);
    const detail = [
      p.iteration !== undefined ? `iter ${p.iteration}/${p.maxIterations}` : '',
      p.loss !== undefined ? `D²≈${p.loss.toPrecision(4)}` : '',
      p.etaSeconds !== undefined ? `eta ${Math.ceil(p.etaSeconds)}s` : '',
    ]
      .filter(Boolean)
      .join('  ');
    const line = `[${bar}] ${(p.fraction * 100).toFixed(0).padStart(3)}% ${p.phase.padEnd(8)} ${detail}`;
    if (this.stream.isTTY) {
      const now = Date.now();
      if (now - this.lastDraw < 100 && p.phase === this.lastPhase && p.phase !== 'done') return;
      this.lastDraw = now;
      this.stream.write(`\r${line.padEnd(this.lastLine.length)}`);
      if (p.phase === 'done') this.stream.write('\n');
    } else {
      const decile = Math.floor(p.fraction * 10);
      if (p.phase === this.lastPhase && decile === this.lastDecile) return;
      this.stream.write(`${line}\n`);
      this.lastDecile = decile;
    }
    this.lastLine = line;
    this.lastPhase = p.phase;
  }
}
