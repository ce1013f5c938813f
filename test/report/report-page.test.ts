import { describe, expect, it } from 'vitest';
import type { ResultDocument } from '../../src/jobs/result-document.js';
import { escapeHtml, formatNumber, labelHistogram, niceTicks, renderReportPage, TABLE_ROWS_SHOWN, type ReportInput, type ScatterInput } from '../../src/report/report-page.js';

const HOSTILE = `<script>alert("x")</script>&'`;

/** A plausible result document of k representatives of `rows` items (only what the page reads). */
function resultOf(k: number, rows = 500, opts: { labels?: boolean; hostile?: boolean } = {}): ResultDocument {
  const label = (i: number) => (opts.hostile && i === 0 ? `<img src=x onerror=alert(1)>` : `kind-${i % 3}`);
  const weights = Array.from({ length: k }, (_, i) => k - i);
  const total = weights.reduce((a, b) => a + b, 0);
  const doc = {
    version: 1,
    k,
    rows,
    dims: 16,
    space: 'raw',
    kernel: { kind: 'energy', a: 0.04 },
    scale: 4,
    seed: 3,
    weights: 'optimized',
    representatives: Array.from({ length: k }, (_, i) => ({
      rank: i + 1,
      index: i * 7,
      id: opts.hostile && i === 0 ? HOSTILE : `item-${i * 7}`,
      label: opts.labels === false ? null : label(i),
      weight: weights[i] / total,
      share: 1 / k,
      count: Math.round(rows / k),
      meanDistance: 1 + i / 10,
      p90Distance: 2 + i / 10,
      radius: 3 + i / 10,
      labels: opts.labels === false ? null : { [label(i)]: 10, [label(i + 1)]: 3 },
    })),
    fixed: null,
    coverageGain: null,
    stability: null,
    coverage: {
      meanDistance: 1.5,
      p90Distance: 2.5,
      maxDistance: 4.25,
      coveredWithin: [1, 2, 3, 4].map((r) => ({ radius: r, fraction: r / 4 })),
      worstCovered: Array.from({ length: 5 }, (_, i) => ({ index: 300 + i, id: opts.hostile && i === 0 ? `"><b>worst</b>` : `item-${300 + i}`, distance: 4.25 - i / 10, nearestRank: (i % k) + 1 })),
      labels: opts.labels === false ? null : { 'kind-0': { count: 200, representatives: 2, meanDistance: 1.2 }, 'kind-1': { count: 200, representatives: 1, meanDistance: 1.4 }, 'kind-2': { count: 100, representatives: 0, meanDistance: 2 } },
    },
    discrepancy: {
      value: 0.012,
      constant: { value: 5, exact: true, sampleRows: rows, standardError: 0 },
      random: { median: 0.05, draws: [0.05, 0.04, 0.06] },
      ratioToRandom: 0.24,
      prefix: Array.from({ length: k }, (_, i) => ({ m: i + 1, value: 1 / (i + 1) ** 1.5, random: 1.6 / (i + 1) })),
      stages: { seeded: 0.05, descent: 0.02, snapped: 0.03, refined: 0.013, final: 0.012 },
    },
    trace: {
      iterations: 200,
      stopReason: 'iterations',
      scaleDegenerate: false,
      swaps: 4,
      refineStart: 'descent',
      weightSolver: { converged: true, gap: 1e-9, iterations: 40 },
      loss: [],
      seconds: { prepare: 0.01, scale: 0.02, seed: 0.01, descent: 1.2, snap: 0.01, refine: 0.05, coverage: 0.02, baseline: 0.03 },
    },
    dataset: { id: 'ds_1', source: 'parts.npy', format: 'npy', rows, cols: 16, sha256: '0'.repeat(64), droppedNonFinite: 0, skippedImages: 0 },
  };
  // Cast: the page reads only the fields above, and the full type grows with the engine.
  return doc as unknown as ResultDocument;
}

function scatterOf(result: ResultDocument, points: number): ScatterInput {
  return {
    points: Array.from({ length: points }, (_, i) => ({ x: Math.cos(i) * (i % 17), y: Math.sin(i) * (i % 5), label: `kind-${i % 3}` })),
    representatives: result.representatives.map((r) => ({ rank: r.rank, x: r.rank - 4, y: 1, weight: r.weight })),
    rows: result.rows,
    explained: [0.62, 0.21],
    standardized: false,
  };
}

function inputOf(result: ResultDocument, over: { images?: boolean; available?: boolean; scatter?: ScatterInput | null; jobName?: string | null; datasetName?: string | null } = {}): ReportInput {
  const images = over.images ?? false;
  return {
    job: { id: 'job_abc', name: over.jobName === undefined ? 'week 48' : over.jobName, createdAt: '2025-01-02T03:04:05.000Z', startedAt: '2025-01-02T03:04:06.000Z', finishedAt: '2025-01-02T03:05:00.000Z' },
    dataset: { id: 'ds_1', name: over.datasetName === undefined ? 'sorting line' : over.datasetName, source: 'parts.npy', format: images ? 'tar' : 'npy', rows: result.rows, cols: 16, hasImages: images, available: over.available ?? true },
    result,
    scatter: over.scatter === undefined ? (images ? null : scatterOf(result, 300)) : over.scatter,
  };
}

/** The inner HTML of the first element matching an opening-tag pattern up to its closing tag. */
function block(html: string, open: RegExp, close: string): string {
  const m = open.exec(html);
  expect(m, `no ${open}`).not.toBeNull();
  const start = m!.index;
  const end = html.indexOf(close, start);
  expect(end).toBeGreaterThan(start);
  return html.slice(start, end + close.length);
}

function countOf(text: string, pattern: RegExp): number {
  return (text.match(new RegExp(pattern.source, 'g')) ?? []).length;
}

function polylinePoints(html: string, series: string): Array<[number, number]> {
  const m = new RegExp(`<polyline data-series="${series}" points="([^"]*)"`).exec(html);
  expect(m, `no ${series} polyline`).not.toBeNull();
  return m![1]
    .trim()
    .split(/\s+/)
    .filter((p) => p !== '')
    .map((p) => p.split(',').map(Number) as [number, number]);
}

describe('escapeHtml', () => {
  it('escapes the five characters that matter in content and quoted attributes', () => {
    expect(escapeHtml(`<a href="x" title='y'>&amp;</a>`)).toBe('&lt;a href=&quot;x&quot; title=&#39;y&#39;&gt;&amp;amp;&lt;/a&gt;');
    expect(escapeHtml('plain text, ünïcode ✓')).toBe('plain text, ünïcode ✓');
  });

  it('turns other values into text, and null or undefined into nothing', () => {
    expect(escapeHtml(42)).toBe('42');
    expect(escapeHtml(null)).toBe('');
    expect(escapeHtml(undefined)).toBe('');
    expect(escapeHtml('&&')).toBe('&amp;&amp;');
  });
});

describe('report page', () => {
  it('escapes every user string: job and dataset names, ids, labels', () => {
    const result = resultOf(4, 500, { hostile: true });
    const html = renderReportPage(inputOf(result, { jobName: HOSTILE, datasetName: `<i>line</i> & co` }));
    expect(html).not.toMatch(/<script/i);
    expect(html).not.toContain('<img src=x');
    expect(html).not.toContain('"><b>worst</b>');
    expect(html).not.toContain('<i>line</i>');
    expect(html).toContain('&lt;script&gt;alert(&quot;x&quot;)&lt;/script&gt;&amp;&#39;');
    expect(html).toContain('&lt;img src=x onerror=alert(1)&gt;');
    expect(html).toContain('&quot;&gt;&lt;b&gt;worst&lt;/b&gt;');
    expect(html).toContain('&lt;i&gt;line&lt;/i&gt; &amp; co');
  });

  it('has no scripts, no external assets and no event handlers', () => {
    const html = renderReportPage(inputOf(resultOf(6)));
    expect(html).not.toMatch(/<script/i);
    expect(html).not.toMatch(/\son[a-z]+=/i);
    expect(html).not.toMatch(/(src|href)="(https?:)?\/\//i);
    // One link: the icon, from the report's own route beside it.
    expect(html.match(/<link\b[^>]*>/gi)).toEqual(['<link rel="icon" href="report-icon.svg" type="image/svg+xml">']);
    expect(html.startsWith('<!doctype html>')).toBe(true);
  });

  it('shows the job, dataset, parameters, key figures and timings', () => {
    const html = renderReportPage(inputOf(resultOf(6)));
    expect(html).toContain('<h1>week 48</h1>');
    expect(html).toContain('<code>job_abc</code>');
    expect(html).toContain('<strong>sorting line</strong>');
    expect(html).toMatch(/<dt>k<\/dt><dd>6<\/dd>/);
    expect(html).toMatch(/<dt>space<\/dt><dd>raw \(16 dims\)<\/dd>/);
    expect(html).toMatch(/<dt>kernel<\/dt><dd>energy, a = 0.0400<\/dd>/);
    expect(html).toMatch(/<dt>weights<\/dt><dd>optimized<\/dd>/);
    expect(html).toMatch(/<dt>seed<\/dt><dd>3<\/dd>/);
    expect(html).toContain('0.0120'); // D²
    expect(html).toContain('0.240×'); // ratio to random
    for (const v of ['1.50', '2.50', '4.25']) expect(html).toContain(`<div class="v">${v}</div>`);
    const timings = block(html, /<table class="timings">/, '</table>');
    expect(countOf(timings, /<th scope="row">/)).toBe(8 + 1);
    expect(timings).toContain('1.20 s');
    expect(timings).toContain('1.35 s'); // total
  });

  it('has one table row per representative, in rank order, with weight, share, radius and label counts', () => {
    const result = resultOf(8);
    const html = renderReportPage(inputOf(result));
    const table = block(html, /<table class="reps">/, '</table>');
    const body = block(table, /<tbody>/, '</tbody>');
    const rows = body.match(/<tr>.*?<\/tr>/g) ?? [];
    expect(rows).toHaveLength(8);
    rows.forEach((row, i) => {
      const r = result.representatives[i];
      expect(row).toContain(`<td class="num">${i + 1}</td>`);
      expect(row).toContain(`<code>${r.id}</code>`);
      expect(row).toContain(r.weight.toFixed(3));
      expect(row).toContain('12.5%');
      expect(row).toContain(r.radius.toPrecision(3));
      expect(row).toContain(`kind-${i % 3}&nbsp;10 · kind-${(i + 1) % 3}&nbsp;3`);
    });
  });

  it('draws the prefix curve and the random curve with one point per m', () => {
    for (const k of [1, 2, 8, 40]) {
      const html = renderReportPage(inputOf(resultOf(k)));
      const selection = polylinePoints(html, 'selection');
      const random = polylinePoints(html, 'random');
      expect(selection).toHaveLength(k);
      expect(random).toHaveLength(k);
      // x grows with m; the selection curve lies below the random one here (smaller D² is lower on the chart, larger y).
      for (let i = 1; i < k; i++) expect(selection[i][0]).toBeGreaterThan(selection[i - 1][0]);
      for (let i = 1; i < k; i++) expect(selection[i][1]).toBeGreaterThanOrEqual(random[i][1]);
      const svg = block(html, /<svg class="prefix"/, '</svg>');
      expect(svg).toContain('m, number of representatives');
      expect(svg).toMatch(/>D²( \(log scale\))?</);
    }
  });

  it('thins a long prefix curve and caps the table for a large k', () => {
    const k = 2000;
    const html = renderReportPage(inputOf(resultOf(k, 50_000), { scatter: null }));
    const selection = polylinePoints(html, 'selection');
    expect(selection.length).toBeLessThanOrEqual(600);
    expect(selection.length).toBeGreaterThan(100);
    const body = block(block(html, /<table class="reps">/, '</table>'), /<tbody>/, '</tbody>');
    expect(countOf(body, /<tr>/)).toBe(TABLE_ROWS_SHOWN);
    expect(html).toContain(`The first ${TABLE_ROWS_SHOWN} of 2,000`);
  });

  it('for a vector dataset, draws the sample as points and marks the k representatives', () => {
    const result = resultOf(8);
    const html = renderReportPage(inputOf(result, { scatter: scatterOf(result, 300) }));
    const svg = block(html, /<svg class="scatter"/, '</svg>');
    expect(countOf(svg, /<circle class="pt"/)).toBe(300);
    expect(countOf(svg, /<circle class="rep"/)).toBe(8);
    const ranks = [...svg.matchAll(/<circle class="rep" data-rank="(\d+)"[^>]* r="([\d.]+)"/g)].map((m) => ({ rank: Number(m[1]), r: Number(m[2]) }));
    expect(ranks.map((x) => x.rank).sort((a, b) => a - b)).toEqual([1, 2, 3, 4, 5, 6, 7, 8]);
    // Sized by weight: weights fall with rank here, so radii do too.
    const byRank = ranks.sort((a, b) => a.rank - b.rank).map((x) => x.r);
    for (let i = 1; i < byRank.length; i++) expect(byRank[i]).toBeLessThan(byRank[i - 1]);
    expect(svg).toContain('62.0% of the variance');
    expect(html).toContain('class="legend"');
    expect(html).not.toContain('contact-sheet.png');
  });

  it('for an image dataset, shows the contact sheet and thumbnails from relative same-origin URLs', () => {
    const result = resultOf(8);
    const html = renderReportPage(inputOf(result, { images: true }));
    expect(html).toContain('<img src="contact-sheet.png?limit=8&amp;columns=8&amp;cellSize=112" width="932" height="140"');
    for (const w of result.coverage.worstCovered) expect(html).toContain(`<img src="thumbnails/${w.index}.png"`);
    for (const r of result.representatives) expect(html).toContain(`<img src="thumbnails/${r.index}.png"`);
    expect(html).not.toContain('<svg class="scatter"');
    const srcs = [...html.matchAll(/<img src="([^"]+)"/g)].map((m) => m[1]);
    expect(srcs.every((s) => /^(contact-sheet\.png\?|thumbnails\/\d+\.png$)/.test(s))).toBe(true);
  });

  it('lists the worst-covered items with distance and nearest rank', () => {
    const result = resultOf(3);
    const html = renderReportPage(inputOf(result));
    const body = block(block(html, /<table class="worst">/, '</table>'), /<tbody>/, '</tbody>');
    const rows = body.match(/<tr>.*?<\/tr>/g) ?? [];
    expect(rows).toHaveLength(5);
    expect(rows[0]).toContain('<code>item-300</code>');
    expect(rows[0]).toContain('4.25');
    expect(rows[0]).toContain('#1');
    expect(rows[1]).toContain('#2');
  });

  it('still renders from the result alone when the dataset was deleted', () => {
    const html = renderReportPage(inputOf(resultOf(5, 500, { labels: false }), { available: false, scatter: null, jobName: null, datasetName: null }));
    expect(html).toContain('dataset deleted');
    expect(html).toContain('<h1>job_abc</h1>');
    expect(html).toContain('cannot be drawn');
    expect(html).not.toContain('<table class="labels-table">');
    expect(countOf(block(html, /<table class="reps">/, '</table>'), /<tr>/)).toBe(5 + 1);
  });
});

describe('formatting helpers', () => {
  it('labelHistogram lists labels by count, escaped, with the rest summarised', () => {
    expect(labelHistogram({ a: 1, '<b>': 5, c: 3, d: 2, e: 1 })).toBe('&lt;b&gt;&nbsp;5 · c&nbsp;3 · d&nbsp;2 · a&nbsp;1 <span class="muted">· +1 more</span>');
    expect(labelHistogram(null)).toContain('—');
  });

  it('formatNumber keeps three significant digits and marks non-finite values', () => {
    expect(formatNumber(0.012345)).toBe('0.0123');
    expect(formatNumber(4.25)).toBe('4.25');
    expect(formatNumber(123.4)).toBe('123');
    expect(formatNumber(0.00001234)).toBe('1.23e-5');
    expect(formatNumber(0)).toBe('0');
    expect(formatNumber(Number.NaN)).toBe('—');
  });

  it('niceTicks gives round steps covering the range', () => {
    expect(niceTicks(0, 1, 5)).toEqual([0, 0.2, 0.4, 0.6, 0.8, 1]);
    expect(niceTicks(1, 8, 7)).toEqual([1, 2, 3, 4, 5, 6, 7, 8]);
    expect(niceTicks(0, 0.37, 4)).toEqual([0, 0.1, 0.2, 0.3, 0.4]);
  });
});
