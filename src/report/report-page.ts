import type { ResultDocument } from '../jobs/result-document.js';
import { CAPTION_HEIGHT, SHEET_PADDING } from './contact-sheet.js';

/**
 * The HTML report of one completed selection job: a single self-contained page, readable without
 * JavaScript (there is none), styled by one inline style sheet, with charts as inline SVG and
 * images only from same-origin relative URLs (the job's contact sheet and thumbnails, which sit
 * beside the report at /v1/jobs/{id}/…). Every string that comes from users or their data (names,
 * ids, labels, file names) goes through escapeHtml. Gathering the input from disk is
 * report-data.ts's job; this module only builds text.
 */
export interface ReportInput {
  job: {
    id: string;
    name: string | null;
    createdAt: string | null;
    startedAt: string | null;
    finishedAt: string | null;
  };
  dataset: {
    id: string;
    /** The name given at upload, when the dataset still exists and has one. */
    name: string | null;
    /** The uploaded file's name. */
    source: string;
    format: string;
    rows: number;
    cols: number;
    /** Stored thumbnails exist: the page shows the contact sheet and thumbnails. */
    hasImages: boolean;
    /** The stored dataset still exists (deleted datasets leave the result readable, without pictures). */
    available: boolean;
  };
  result: ResultDocument;
  /** A 2-D projection of a row sample, for vector datasets; null for images or when unavailable. */
  scatter: ScatterInput | null;
  /** The report token the page was opened with (API keys on): passed on to every image and link of the page. */
  access?: string;
}

export interface ScatterInput {
  /** Sample rows on the first two principal axes of the sample, with their labels. */
  points: Array<{ x: number; y: number; label: string | null }>;
  /** Representatives (rank order, possibly only the first ones) on the same axes. */
  representatives: Array<{ rank: number; x: number; y: number; weight: number }>;
  /** Rows in the dataset (the sample is points.length of them). */
  rows: number;
  /** Share of the sample's total variance along each axis, 0..1. */
  explained: [number, number];
  /** The columns were standardized before the projection (the job's space was `standardize`). */
  standardized: boolean;
}

/** At most this many representatives get a table row (all are in the result JSON). */
export const TABLE_ROWS_SHOWN = 500;
/** At most this many worst-covered items are listed. */
export const WORST_ROWS_SHOWN = 100;
/** At most this many representatives go on the contact sheet. */
export const SHEET_CELLS_SHOWN = 48;
const SHEET_COLUMNS = 8;
const SHEET_CELL_SIZE = 112;
/** Prefix curves longer than this are thinned (evenly, keeping both ends) before drawing. */
const MAX_CURVE_POINTS = 600;
/** Representatives on the scatter with a rank label. */
const LABELLED_RANKS = 12;
/** Labels with their own colour on the scatter; the rest share the neutral one. */
const LABEL_COLOURS = ['#3a7ca5', '#cf7f45', '#5a9a66', '#b35450', '#8268a8', '#bf9b32', '#4c9a97', '#96705a'];
const OTHER_COLOUR = '#9aa3a8';
const SELECTION_COLOUR = '#1f6f78';
const RANDOM_COLOUR = '#b8652f';
const INK = '#1d2327';
const MUTED = '#5d6870';
const GRID = '#e4e7e9';

/** Text for HTML content and double- or single-quoted attribute values (also inside inline SVG). */
export function escapeHtml(value: unknown): string {
  return String(value ?? '').replace(/[&<>"']/g, (c) => ESCAPES[c]);
}

const ESCAPES: Record<string, string> = { '&': '&amp;', '<': '&lt;', '>': '&gt;', '"': '&quot;', "'": '&#39;' };

/** A link relative to the report, carrying the report token when there is one; escaped for an attribute. */
function link(path: string, access: string | undefined): string {
  return escapeHtml(access === undefined ? path : `${path}${path.includes('?') ? '&' : '?'}access=${encodeURIComponent(access)}`);
}

/** The whole page. */
export function renderReportPage(input: ReportInput): string {
  const { job, dataset, result, access } = input;
  const title = job.name ? job.name : `Job ${job.id}`;
  const datasetTitle = dataset.name ?? dataset.source;
  const sections = [
    headerBlock(input),
    figuresSection(result),
    `<div class="two">${parametersSection(input)}${timingsSection(result)}</div>`,
    dataset.hasImages ? contactSheetSection(result, access) : scatterSection(input),
    prefixSection(result),
    representativesSection(input),
    worstSection(input),
    labelsSection(result),
  ];
  return `<!doctype html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<meta name="referrer" content="no-referrer">
<link rel="icon" href="${link('report-icon.svg', access)}" type="image/svg+xml">
<title>${escapeHtml(`${title} · ${datasetTitle} · cairn report`)}</title>
<style>${STYLE}</style>
</head>
<body>
<main>
${sections.filter((s) => s !== '').join('\n')}
<footer>Made by cairn from the job’s result (version ${escapeHtml(result.version)}). The full result: <a href="${link('result', access)}">result JSON</a> · every item’s nearest representative: <a href="${link('assignments?format=csv', access)}">assignments CSV</a>.</footer>
</main>
</body>
</html>
`;
}

function headerBlock({ job, dataset, result }: ReportInput): string {
  const title = job.name ?? job.id;
  const when = job.finishedAt ? `finished ${escapeHtml(formatTime(job.finishedAt))}` : '';
  const dsName = dataset.name ? `<strong>${escapeHtml(dataset.name)}</strong> ` : '';
  const gone = dataset.available ? '' : ' <span class="tag">dataset deleted</span>';
  return `<header>
<p class="kicker">cairn · selection report</p>
<h1>${escapeHtml(title)}</h1>
<p class="sub">${job.name ? `Job <code>${escapeHtml(job.id)}</code> · ` : ''}${result.k} representatives of ${formatCount(result.rows)} items${when ? ` · ${when}` : ''}</p>
<p class="sub">Dataset ${dsName}<code>${escapeHtml(dataset.id)}</code> · ${escapeHtml(dataset.source)} (${escapeHtml(dataset.format)}, ${formatCount(dataset.rows)} × ${formatCount(dataset.cols)})${gone}</p>
</header>`;
}

function figuresSection(result: ResultDocument): string {
  const d = result.discrepancy;
  const c = result.coverage;
  const se = d.constant && !d.constant.exact && d.constant.standardError > 0 ? ` <span class="pm">± ${formatNumber(d.constant.standardError)}</span>` : '';
  const ratio = d.ratioToRandom;
  const ratioNote = ratio === null ? 'random k-subsets already match the data' : ratio < 1 ? `random k-subsets: ${formatNumber(d.random.median)}` : `no better than random (${formatNumber(d.random.median)})`;
  const tiles = [
    figure('D² (discrepancy)', `${formatNumber(d.value)}${se}`, `${result.kernel.kind} kernel, weighted`),
    figure('Ratio to random', ratio === null ? '—' : `${formatNumber(ratio)}×`, ratioNote),
    figure('Mean distance', formatNumber(c.meanDistance), 'item → nearest representative'),
    figure('p90 distance', formatNumber(c.p90Distance), '90% of items are closer'),
    figure('Max distance', formatNumber(c.maxDistance), 'the worst-covered item'),
  ];
  const within = (c.coveredWithin ?? []).map((w) => `<li><span>≤ ${formatNumber(w.radius)}</span> <strong>${formatPercent(w.fraction)}</strong></li>`).join('');
  return `<section aria-labelledby="h-figures">
<h2 id="h-figures">Key figures</h2>
<div class="figures">${tiles.join('')}</div>
${within ? `<p class="note">Items within a distance of a representative (scale s = ${formatNumber(result.scale)}, the median pairwise distance):</p><ul class="within">${within}</ul>` : ''}
</section>`;
}

function figure(name: string, value: string, note: string): string {
  return `<div class="figure"><div class="k">${escapeHtml(name)}</div><div class="v">${value}</div><div class="n">${escapeHtml(note)}</div></div>`;
}

function parametersSection({ result, job }: ReportInput): string {
  const kernel = result.kernel.kind === 'energy' ? `energy, a = ${formatNumber(result.kernel.a)}` : `gaussian, σ = ${formatNumber(result.kernel.sigma)}`;
  const t = result.trace;
  const rows: Array<[string, string]> = [
    ['k', String(result.k)],
    ['space', `${escapeHtml(result.space)} (${result.dims} dims)`],
    ['kernel', escapeHtml(kernel)],
    ['weights', escapeHtml(result.weights)],
    ['seed', String(result.seed)],
  ];
  if (result.embedding) rows.push(['embedding', `${escapeHtml(result.embedding.model)}${result.embedding.normalize ? ', normalized' : ''}`]);
  if (t) {
    rows.push(['descent', `${plural(t.iterations, 'iteration')}, stopped by ${escapeHtml(t.stopReason)}`]);
    rows.push(['refinement', `${plural(t.swaps, 'swap')} from the ${escapeHtml(t.refineStart)} start`]);
    if (t.weightSolver) rows.push(['weight solve', t.weightSolver.converged ? `converged in ${plural(t.weightSolver.iterations, 'iteration')}` : `not converged (gap ${formatNumber(t.weightSolver.gap)})`]);
  }
  if (job.createdAt) rows.push(['created', escapeHtml(formatTime(job.createdAt))]);
  return `<section aria-labelledby="h-params">
<h2 id="h-params">Parameters</h2>
<dl class="params">${rows.map(([k, v]) => `<dt>${escapeHtml(k)}</dt><dd>${v}</dd>`).join('')}</dl>
</section>`;
}

function timingsSection(result: ResultDocument): string {
  const phases = Object.entries(result.trace?.seconds ?? {}).filter(([, s]) => Number.isFinite(s));
  if (result.embedding && Number.isFinite(result.embedding.seconds)) phases.unshift(['embed', result.embedding.seconds]);
  const total = phases.reduce((a, [, s]) => a + s, 0);
  const max = Math.max(1e-9, ...phases.map(([, s]) => s));
  const rows = phases
    .map(
      ([phase, s]) =>
        `<tr><th scope="row">${escapeHtml(phase)}</th><td class="barcell"><span class="bar" style="width:${((100 * s) / max).toFixed(1)}%"></span></td><td class="num">${escapeHtml(formatSeconds(s))}</td></tr>`,
    )
    .join('');
  return `<section aria-labelledby="h-time">
<h2 id="h-time">Timings</h2>
${phases.length ? `<table class="timings"><tbody>${rows}</tbody><tfoot><tr><th scope="row">total</th><td></td><td class="num">${escapeHtml(formatSeconds(total))}</td></tr></tfoot></table>` : '<p class="note">No timings were recorded.</p>'}
</section>`;
}

function contactSheetSection(result: ResultDocument, access: string | undefined): string {
  const n = Math.min(result.representatives.length, SHEET_CELLS_SHOWN);
  if (n === 0) return '';
  const columns = Math.min(n, SHEET_COLUMNS);
  const rows = Math.ceil(n / columns);
  const width = columns * SHEET_CELL_SIZE + (columns + 1) * SHEET_PADDING;
  const height = rows * (SHEET_CELL_SIZE + CAPTION_HEIGHT) + (rows + 1) * SHEET_PADDING;
  const more = result.representatives.length > n ? ` The first ${n} of ${result.k} by rank.` : '';
  return `<section aria-labelledby="h-sheet">
<h2 id="h-sheet">Contact sheet</h2>
<figure class="sheet"><img src="${link(`contact-sheet.png?limit=${n}&columns=${columns}&cellSize=${SHEET_CELL_SIZE}`, access)}" width="${width}" height="${height}" alt="Contact sheet of the first ${n} representatives, captioned with rank and weight">
<figcaption>In rank order, each captioned with its rank and weight.${more}</figcaption></figure>
</section>`;
}

function scatterSection({ scatter, dataset }: ReportInput): string {
  if (!scatter) {
    const why = dataset.available ? 'The projection could not be computed.' : 'The dataset has been deleted, so its rows cannot be drawn.';
    return `<section aria-labelledby="h-map"><h2 id="h-map">Map of the data</h2><p class="note">${why}</p></section>`;
  }
  const { svg, legend } = scatterSvg(scatter);
  const sampleNote = scatter.points.length < scatter.rows ? `a seeded sample of ${formatCount(scatter.points.length)} of the ${formatCount(scatter.rows)} rows` : `all ${formatCount(scatter.rows)} rows`;
  return `<section aria-labelledby="h-map">
<h2 id="h-map">Map of the data</h2>
<figure class="chart">${svg}
<figcaption>${sampleNote[0].toUpperCase()}${sampleNote.slice(1)}${scatter.standardized ? ' (columns standardized)' : ''} on the sample’s first two principal axes; representatives are the dark rings, their area proportional to weight, the first ${Math.min(LABELLED_RANKS, scatter.representatives.length)} numbered by rank. Distances between far-apart points are only roughly kept by a 2-D view.</figcaption>
${legend}</figure>
</section>`;
}

/** The scatter's SVG (equal scales on both axes) and the HTML legend of label colours. */
function scatterSvg(s: ScatterInput): { svg: string; legend: string } {
  const W = 980;
  const H = 520;
  const pad = { left: 40, right: 16, top: 16, bottom: 40 };
  const pw = W - pad.left - pad.right;
  const ph = H - pad.top - pad.bottom;
  const xs = [...s.points.map((p) => p.x), ...s.representatives.map((r) => r.x)].filter(Number.isFinite);
  const ys = [...s.points.map((p) => p.y), ...s.representatives.map((r) => r.y)].filter(Number.isFinite);
  const [x0, x1] = extent(xs);
  const [y0, y1] = extent(ys);
  const span = Math.max(x1 - x0, ((y1 - y0) * pw) / ph, 1e-12);
  const scale = (pw / span) * 0.94;
  const cx = pad.left + pw / 2;
  const cy = pad.top + ph / 2;
  const mx = (x0 + x1) / 2;
  const my = (y0 + y1) / 2;
  const X = (x: number) => cx + (x - mx) * scale;
  const Y = (y: number) => cy - (y - my) * scale;

  const counts = new Map<string, number>();
  for (const p of s.points) if (p.label !== null) counts.set(p.label, (counts.get(p.label) ?? 0) + 1);
  const ranked = [...counts.entries()].sort((a, b) => b[1] - a[1] || a[0].localeCompare(b[0]));
  const colourOf = new Map(ranked.slice(0, LABEL_COLOURS.length).map(([label], i) => [label, LABEL_COLOURS[i]]));
  const others = ranked.length > LABEL_COLOURS.length;
  const pointColour = (label: string | null) => (label === null ? (ranked.length ? OTHER_COLOUR : SELECTION_COLOUR) : (colourOf.get(label) ?? OTHER_COLOUR));

  const dots = s.points
    .filter((p) => Number.isFinite(p.x) && Number.isFinite(p.y))
    .map((p) => `<circle class="pt" cx="${n1(X(p.x))}" cy="${n1(Y(p.y))}" r="2.2" fill="${pointColour(p.label)}"/>`)
    .join('');
  const maxW = Math.max(1e-12, ...s.representatives.map((r) => r.weight));
  // Area ∝ weight, from a minimum that stays visible for tiny weights.
  const radius = (w: number) => 3.5 + 11 * Math.sqrt(Math.max(0, w) / maxW);
  // Heaviest drawn first so lighter ones stay visible on top.
  const reps = [...s.representatives].filter((r) => Number.isFinite(r.x) && Number.isFinite(r.y)).sort((a, b) => b.weight - a.weight);
  const repMarks = reps
    .map((r) => `<circle class="rep" data-rank="${r.rank}" cx="${n1(X(r.x))}" cy="${n1(Y(r.y))}" r="${n1(radius(r.weight))}" fill="${SELECTION_COLOUR}" fill-opacity="0.18" stroke="${INK}" stroke-width="1.6"><title>#${r.rank}, weight ${formatFixed(r.weight, 3)}</title></circle>`)
    .join('');
  const rankTags = reps
    .filter((r) => r.rank <= LABELLED_RANKS)
    .map((r) => `<text class="tag" x="${n1(X(r.x) + radius(r.weight) + 2)}" y="${n1(Y(r.y) - radius(r.weight) * 0.6)}">${r.rank}</text>`)
    .join('');
  const svg = `<svg class="scatter" viewBox="0 0 ${W} ${H}" width="${W}" height="${H}" role="img" aria-label="Scatter plot of sampled rows on two principal axes with the representatives marked" xmlns="http://www.w3.org/2000/svg">
<rect x="${pad.left}" y="${pad.top}" width="${pw}" height="${ph}" fill="#fbfbfa" stroke="${GRID}"/>
<line x1="${n1(X(0))}" y1="${pad.top}" x2="${n1(X(0))}" y2="${pad.top + ph}" stroke="${GRID}"/>
<line x1="${pad.left}" y1="${n1(Y(0))}" x2="${pad.left + pw}" y2="${n1(Y(0))}" stroke="${GRID}"/>
<g class="sample" fill-opacity="0.6">${dots}</g>
<g class="reps">${repMarks}</g>
<g class="ranks" font-size="11" font-weight="600" fill="${INK}">${rankTags}</g>
<text x="${pad.left + pw / 2}" y="${H - 12}" text-anchor="middle" font-size="12" fill="${MUTED}">first principal axis · ${escapeHtml(formatPercent(s.explained[0]))} of the variance</text>
<text transform="translate(16 ${pad.top + ph / 2}) rotate(-90)" text-anchor="middle" font-size="12" fill="${MUTED}">second axis · ${escapeHtml(formatPercent(s.explained[1]))}</text>
</svg>`;
  const legendItems = ranked.slice(0, LABEL_COLOURS.length).map(([label, count]) => `<li><span class="swatch" style="background:${colourOf.get(label)}"></span>${escapeHtml(label)} <span class="muted">${formatCount(count)}</span></li>`);
  if (others) legendItems.push(`<li><span class="swatch" style="background:${OTHER_COLOUR}"></span>other labels</li>`);
  const legend = legendItems.length ? `<ul class="legend" aria-label="Label colours">${legendItems.join('')}</ul>` : '';
  return { svg, legend };
}

function prefixSection(result: ResultDocument): string {
  const prefix = result.discrepancy.prefix ?? [];
  if (prefix.length === 0) return '';
  const svg = prefixChartSvg(prefix, result.weights === 'optimized' ? { m: result.k, value: result.discrepancy.value } : null);
  return `<section aria-labelledby="h-prefix">
<h2 id="h-prefix">D² of the first m representatives</h2>
<figure class="chart">${svg}
<figcaption>Each prefix of the ranking with uniform weights, against the median of ${result.discrepancy.random?.draws?.length ?? 'the'} random subsets of the same size. The lower the curve, the better the first m stand for the data${result.weights === 'optimized' ? '; the diamond is all k with their optimized weights' : ''}.</figcaption></figure>
</section>`;
}

/** Points of a long curve, evenly thinned to at most `max`, first and last kept. */
function thin<T>(points: T[], max: number): T[] {
  if (points.length <= max) return points;
  const out: T[] = [];
  for (let i = 0; i < max; i++) out.push(points[Math.round((i * (points.length - 1)) / (max - 1))]);
  return out;
}

function prefixChartSvg(prefix: Array<{ m: number; value: number; random: number }>, weighted: { m: number; value: number } | null): string {
  const W = 980;
  const H = 340;
  const pad = { left: 64, right: 24, top: 20, bottom: 44 };
  const pw = W - pad.left - pad.right;
  const ph = H - pad.top - pad.bottom;
  const pts = thin(prefix, MAX_CURVE_POINTS);
  const values = [...pts.flatMap((p) => [p.value, p.random]), ...(weighted ? [weighted.value] : [])].filter((v) => Number.isFinite(v));
  const positive = values.filter((v) => v > 0);
  const vmax = Math.max(...values, 0);
  const log = positive.length === values.length && values.length > 0 && vmax / Math.min(...positive) >= 10;
  const mMax = Math.max(...pts.map((p) => p.m));
  const [xLo, xHi] = mMax > 1 ? [1, mMax] : [0, 2];
  const X = (m: number) => pad.left + ((m - xLo) / (xHi - xLo)) * pw;
  let Y: (v: number) => number;
  let yTicks: number[];
  if (log) {
    const lo = Math.floor(Math.log10(Math.min(...positive)));
    const hi = Math.ceil(Math.log10(vmax));
    const top = hi === lo ? hi + 1 : hi;
    Y = (v: number) => pad.top + ph - ((Math.log10(Math.max(v, 10 ** lo)) - lo) / (top - lo)) * ph;
    yTicks = [];
    for (let e = lo; e <= top; e++) for (const f of top - lo <= 2 ? [1, 2, 5] : [1]) if (e + Math.log10(f) <= top + 1e-9) yTicks.push(f * 10 ** e);
  } else {
    yTicks = niceTicks(0, vmax > 0 ? vmax : 1, 5);
    const yTop = yTicks[yTicks.length - 1];
    Y = (v: number) => pad.top + ph - (v / yTop) * ph;
  }
  const xTicks = niceTicks(xLo, xHi, Math.min(8, Math.max(1, xHi - xLo))).filter((t) => Number.isInteger(t) && t >= xLo && t <= xHi && t >= 1);
  const grid = yTicks
    .map((t) => `<line x1="${pad.left}" y1="${n1(Y(t))}" x2="${pad.left + pw}" y2="${n1(Y(t))}" stroke="${GRID}"/><text x="${pad.left - 8}" y="${n1(Y(t) + 4)}" text-anchor="end">${escapeHtml(formatTick(t))}</text>`)
    .join('');
  const xAxis = xTicks.map((t) => `<line x1="${n1(X(t))}" y1="${pad.top + ph}" x2="${n1(X(t))}" y2="${pad.top + ph + 5}" stroke="${MUTED}"/><text x="${n1(X(t))}" y="${pad.top + ph + 18}" text-anchor="middle">${t}</text>`).join('');
  const line = (key: 'value' | 'random') => pts.filter((p) => Number.isFinite(p[key])).map((p) => `${n1(X(p.m))},${n1(Y(p[key]))}`).join(' ');
  const markers = pts.length <= 60;
  const dots = (key: 'value' | 'random', colour: string) =>
    markers ? pts.filter((p) => Number.isFinite(p[key])).map((p) => `<circle cx="${n1(X(p.m))}" cy="${n1(Y(p[key]))}" r="2.6" fill="${colour}"/>`).join('') : '';
  const diamond = weighted && Number.isFinite(weighted.value) ? (() => {
    const x = X(weighted.m);
    const y = Y(weighted.value);
    return `<path class="weighted" d="M${n1(x)} ${n1(y - 6)} L${n1(x + 6)} ${n1(y)} L${n1(x)} ${n1(y + 6)} L${n1(x - 6)} ${n1(y)} Z" fill="#fff" stroke="${SELECTION_COLOUR}" stroke-width="2"><title>k = ${weighted.m} with optimized weights: D² ${formatNumber(weighted.value)}</title></path>`;
  })() : '';
  const lx = pad.left + pw - 236;
  return `<svg class="prefix" viewBox="0 0 ${W} ${H}" width="${W}" height="${H}" role="img" aria-label="Line chart of D² against the number of representatives m, for the ranking and for random subsets" xmlns="http://www.w3.org/2000/svg">
<g font-size="11" fill="${MUTED}">${grid}${xAxis}</g>
<line x1="${pad.left}" y1="${pad.top + ph}" x2="${pad.left + pw}" y2="${pad.top + ph}" stroke="${MUTED}"/>
<line x1="${pad.left}" y1="${pad.top}" x2="${pad.left}" y2="${pad.top + ph}" stroke="${MUTED}"/>
<polyline data-series="random" points="${line('random')}" fill="none" stroke="${RANDOM_COLOUR}" stroke-width="2" stroke-dasharray="6 4"/>
<polyline data-series="selection" points="${line('value')}" fill="none" stroke="${SELECTION_COLOUR}" stroke-width="2.4"/>
<g>${dots('random', RANDOM_COLOUR)}${dots('value', SELECTION_COLOUR)}</g>
${diamond}
<text x="${pad.left + pw / 2}" y="${H - 8}" text-anchor="middle" font-size="12" fill="${MUTED}">m, number of representatives (in rank order)</text>
<text transform="translate(14 ${pad.top + ph / 2}) rotate(-90)" text-anchor="middle" font-size="12" fill="${MUTED}">D²${log ? ' (log scale)' : ''}</text>
<g font-size="12" fill="${INK}">
<rect x="${lx - 12}" y="${pad.top + 2}" width="236" height="${weighted ? 62 : 44}" rx="6" fill="#fff" fill-opacity="0.9" stroke="${GRID}"/>
<line x1="${lx}" y1="${pad.top + 16}" x2="${lx + 26}" y2="${pad.top + 16}" stroke="${SELECTION_COLOUR}" stroke-width="2.4"/><text x="${lx + 34}" y="${pad.top + 20}">first m by rank</text>
<line x1="${lx}" y1="${pad.top + 34}" x2="${lx + 26}" y2="${pad.top + 34}" stroke="${RANDOM_COLOUR}" stroke-width="2" stroke-dasharray="6 4"/><text x="${lx + 34}" y="${pad.top + 38}">random m-subsets (median)</text>
${weighted ? `<path d="M${lx + 13} ${pad.top + 46} l6 6 l-6 6 l-6 -6 Z" fill="#fff" stroke="${SELECTION_COLOUR}" stroke-width="2"/><text x="${lx + 34}" y="${pad.top + 56}">all k, optimized weights</text>` : ''}
</g>
</svg>`;
}

function representativesSection({ result, dataset, access }: ReportInput): string {
  const reps = result.representatives.slice(0, TABLE_ROWS_SHOWN);
  const maxWeight = Math.max(1e-12, ...reps.map((r) => r.weight));
  const images = dataset.hasImages;
  const hasLabels = reps.some((r) => r.labels !== null);
  const body = reps
    .map((r, i) => {
      const thumb = images ? `<td class="thumb">${thumbnail(r.index, `representative ${r.rank}`, 48, i >= 40, access)}</td>` : '';
      const label = r.label !== null && r.label !== undefined ? `<div class="muted small">${escapeHtml(r.label)}</div>` : '';
      return `<tr><td class="num">${r.rank}</td>${thumb}<td class="id"><code>${escapeHtml(r.id)}</code>${label}</td><td class="num wcell"><span class="wbar" style="width:${((48 * r.weight) / maxWeight).toFixed(1)}px"></span>${formatFixed(r.weight, 3)}</td><td class="num">${formatPercent(r.share)}</td><td class="num">${formatCount(r.count)}</td><td class="num">${formatNumber(r.meanDistance)}</td><td class="num">${formatNumber(r.radius)}</td>${hasLabels ? `<td class="labels">${labelHistogram(r.labels)}</td>` : ''}</tr>`;
    })
    .join('\n');
  const more = result.representatives.length > reps.length ? `<p class="note">The first ${reps.length} of ${formatCount(result.representatives.length)}; the result JSON lists them all.</p>` : '';
  // Selections that keep given items list them apart from the k new ones (`fixed` in the result).
  const fixed = (result as { fixed?: unknown[] | null }).fixed;
  const fixedNote = Array.isArray(fixed) && fixed.length > 0 ? `<p class="note">The selection also kept ${formatCount(fixed.length)} fixed item${fixed.length === 1 ? '' : 's'} given with the job; they are in the result JSON.</p>` : '';
  return `<section aria-labelledby="h-reps">
<h2 id="h-reps">Representatives in rank order</h2>
<p class="note">Weight: the share of the data each stands for in the weighted set. Share and count: the items whose nearest representative it is. Radius: the distance to the farthest of them.</p>
<div class="scroll"><table class="reps">
<thead><tr><th class="num" scope="col">rank</th>${images ? '<th scope="col"><span class="sr">image</span></th>' : ''}<th scope="col">id</th><th class="num" scope="col">weight</th><th class="num" scope="col">share</th><th class="num" scope="col">items</th><th class="num" scope="col">mean dist.</th><th class="num" scope="col">radius</th>${hasLabels ? '<th scope="col">labels covered</th>' : ''}</tr></thead>
<tbody>
${body}
</tbody></table></div>${more}${fixedNote}
</section>`;
}

/** Label counts as text, most common first: `gear 12 · bolt 3 · +2 more`. */
export function labelHistogram(labels: Record<string, number> | null, shown = 4): string {
  if (!labels) return '<span class="muted">—</span>';
  const entries = Object.entries(labels).sort((a, b) => b[1] - a[1] || a[0].localeCompare(b[0]));
  if (entries.length === 0) return '<span class="muted">—</span>';
  const head = entries.slice(0, shown).map(([label, count]) => `${escapeHtml(label)}&nbsp;${formatCount(count)}`);
  const rest = entries.length > shown ? ` <span class="muted">· +${entries.length - shown} more</span>` : '';
  return head.join(' · ') + rest;
}

function worstSection({ result, dataset, access }: ReportInput): string {
  const worst = (result.coverage.worstCovered ?? []).slice(0, WORST_ROWS_SHOWN);
  if (worst.length === 0) return '';
  const images = dataset.hasImages;
  const repId = new Map(result.representatives.map((r) => [r.rank, r.id]));
  const body = worst
    .map((w, i) => {
      const thumb = images ? `<td class="thumb">${thumbnail(w.index, `item ${w.id}`, 56, i >= 40, access)}</td>` : '';
      // nearestRank 0: the nearest is a fixed item (selections that keep given items), at nearestFixed.
      const fixedAt = (w as { nearestFixed?: number }).nearestFixed;
      const rank = w.nearestRank === 0 ? `fixed${fixedAt === undefined ? '' : ` ${fixedAt + 1}`}` : `#${w.nearestRank}`;
      const nearest = repId.get(w.nearestRank);
      return `<tr>${thumb}<td class="id"><code>${escapeHtml(w.id)}</code></td><td class="num">${formatNumber(w.distance)}</td><td class="num">${escapeHtml(rank)}</td><td class="id">${nearest === undefined ? '' : `<code>${escapeHtml(nearest)}</code>`}</td></tr>`;
    })
    .join('\n');
  return `<section aria-labelledby="h-worst">
<h2 id="h-worst">Worst-covered items</h2>
<p class="note">The items farthest from every representative, worst first: thin regions of the data worth a look.</p>
<div class="scroll"><table class="worst">
<thead><tr>${images ? '<th scope="col"><span class="sr">image</span></th>' : ''}<th scope="col">id</th><th class="num" scope="col">distance</th><th class="num" scope="col">nearest rank</th><th scope="col">nearest representative</th></tr></thead>
<tbody>
${body}
</tbody></table></div>
</section>`;
}

function labelsSection(result: ResultDocument): string {
  const labels = result.coverage.labels;
  if (!labels) return '';
  const entries = Object.entries(labels).sort((a, b) => b[1].count - a[1].count || a[0].localeCompare(b[0]));
  if (entries.length === 0) return '';
  const shown = entries.slice(0, 60);
  const body = shown
    .map(([label, l]) => `<tr${l.representatives === 0 ? ' class="none"' : ''}><td>${escapeHtml(label)}</td><td class="num">${formatCount(l.count)}</td><td class="num">${formatPercent(l.count / result.rows)}</td><td class="num">${formatCount(l.representatives)}</td><td class="num">${formatNumber(l.meanDistance)}</td></tr>`)
    .join('\n');
  const missing = entries.filter(([, l]) => l.representatives === 0).length;
  return `<section aria-labelledby="h-labels">
<h2 id="h-labels">Labels</h2>
<p class="note">How many representatives have each label as the most common among the items they cover${missing ? `; ${missing} label${missing === 1 ? ' has' : 's have'} none (shaded)` : ''}.${entries.length > shown.length ? ` The ${shown.length} most common of ${entries.length} labels.` : ''}</p>
<div class="scroll"><table class="labels-table">
<thead><tr><th scope="col">label</th><th class="num" scope="col">items</th><th class="num" scope="col">share</th><th class="num" scope="col">representatives</th><th class="num" scope="col">mean dist.</th></tr></thead>
<tbody>
${body}
</tbody></table></div>
</section>`;
}

function thumbnail(row: number, alt: string, size: number, lazy: boolean, access: string | undefined): string {
  return `<img src="${link(`thumbnails/${row}.png`, access)}" width="${size}" height="${size}" alt="${escapeHtml(alt)}"${lazy ? ' loading="lazy"' : ''}>`;
}

// --- formatting ---

/** Round tick values: 1, 2 or 5 × 10^e steps covering lo..hi with about `count` intervals. */
export function niceTicks(lo: number, hi: number, count: number): number[] {
  if (!(hi > lo)) return [lo];
  const raw = (hi - lo) / Math.max(1, count);
  const mag = 10 ** Math.floor(Math.log10(raw));
  const step = [1, 2, 5, 10].map((f) => f * mag).find((s) => s >= raw * 0.999) ?? 10 * mag;
  const first = Math.floor(lo / step + 1e-9) * step;
  const ticks: number[] = [];
  for (let t = first; t < hi + step * 0.999; t += step) ticks.push(Number(t.toPrecision(12)));
  return ticks;
}

function extent(values: number[]): [number, number] {
  if (values.length === 0) return [-1, 1];
  let lo = Infinity;
  let hi = -Infinity;
  for (const v of values) {
    if (v < lo) lo = v;
    if (v > hi) hi = v;
  }
  return [lo, hi];
}

/** A coordinate with one decimal, enough for SVG user units at these sizes. */
function n1(v: number): string {
  return (Math.round(v * 10) / 10).toString();
}

/** Three significant digits, scientific outside 0.001..99,999, `—` for non-finite values. */
export function formatNumber(x: number | null | undefined): string {
  if (x === null || x === undefined || !Number.isFinite(x)) return '—';
  if (x === 0) return '0';
  const a = Math.abs(x);
  if (a < 1e-3 || a >= 1e5) return x.toExponential(2).replace('e+', 'e');
  if (a >= 100) return Math.round(x).toString();
  return x.toPrecision(3);
}

function formatTick(x: number): string {
  if (x === 0) return '0';
  const a = Math.abs(x);
  if (a < 1e-3 || a >= 1e5) return x.toExponential(0).replace('e+', 'e');
  return Number(x.toPrecision(6)).toString();
}

function formatFixed(x: number, digits: number): string {
  return Number.isFinite(x) ? x.toFixed(digits) : '—';
}

function formatPercent(x: number): string {
  if (!Number.isFinite(x)) return '—';
  const p = x * 100;
  return `${p !== 0 && Math.abs(p) < 0.1 ? p.toPrecision(1) : p.toFixed(1)}%`;
}

function formatCount(x: number): string {
  return Number.isFinite(x) ? Math.round(x).toLocaleString('en-US') : '—';
}

function plural(n: number, word: string): string {
  return `${formatCount(n)} ${word}${n === 1 ? '' : 's'}`;
}

function formatSeconds(s: number): string {
  if (s < 0.001) return '<1 ms';
  if (s < 1) return `${Math.round(s * 1000)} ms`;
  if (s < 60) return `${s.toFixed(s < 10 ? 2 : 1)} s`;
  return `${Math.floor(s / 60)} min ${Math.round(s % 60)} s`;
}

/** An ISO timestamp as `2025-03-01 14:02 UTC` (the page must not depend on the viewer's clock). */
function formatTime(iso: string): string {
  const d = new Date(iso);
  if (Number.isNaN(d.getTime())) return iso;
  return `${d.toISOString().slice(0, 16).replace('T', ' ')} UTC`;
}

const STYLE = `
:root{--ink:${INK};--muted:${MUTED};--line:#dde1e4;--paper:#fff;--bg:#f3f4f1;--accent:${SELECTION_COLOUR};--soft:#e6f0f0}
*{box-sizing:border-box}
html{-webkit-text-size-adjust:100%}
body{margin:0;background:var(--bg);color:var(--ink);font:15px/1.55 system-ui,-apple-system,"Segoe UI",Roboto,"Noto Sans","Helvetica Neue",Arial,sans-serif}
main{max-width:1080px;margin:0 auto;padding:36px 24px 40px}
header{padding:4px 4px 8px}
.kicker{margin:0;color:var(--accent);font-size:12px;font-weight:600;letter-spacing:.08em;text-transform:uppercase}
h1{margin:4px 0 6px;font-size:28px;line-height:1.2;font-weight:650;overflow-wrap:anywhere}
.sub{margin:2px 0;color:var(--muted);overflow-wrap:anywhere}
.sub strong{color:var(--ink);font-weight:600}
.tag{display:inline-block;padding:0 8px;border-radius:10px;background:#f6e3d6;color:#7a3d16;font-size:12px}
section{background:var(--paper);border:1px solid var(--line);border-radius:10px;padding:20px 24px;margin-top:18px}
h2{margin:0 0 12px;font-size:17px;font-weight:650}
.two{display:grid;grid-template-columns:repeat(auto-fit,minmax(320px,1fr));gap:18px}
.two>section{margin-top:18px}
.figures{display:grid;grid-template-columns:repeat(auto-fit,minmax(170px,1fr));gap:14px}
.figure{border-left:3px solid var(--accent);padding:2px 0 2px 12px}
.figure .k{font-size:13px;color:var(--muted)}
.figure .v{font-size:26px;font-weight:600;font-variant-numeric:tabular-nums;line-height:1.3}
.figure .n{font-size:12px;color:var(--muted)}
.pm{font-size:14px;color:var(--muted);font-weight:400}
.figures+.note{margin-top:16px}
.within{display:flex;flex-wrap:wrap;gap:8px 24px;list-style:none;margin:4px 0 0;padding:0;font-variant-numeric:tabular-nums}
.within span{color:var(--muted)}
.note{margin:0 0 10px;color:var(--muted);font-size:13.5px}
.params{display:grid;grid-template-columns:max-content 1fr;gap:4px 18px;margin:0}
.params dt{color:var(--muted)}
.params dd{margin:0;font-variant-numeric:tabular-nums;overflow-wrap:anywhere}
table{border-collapse:collapse;width:100%;font-variant-numeric:tabular-nums}
th,td{padding:6px 10px;border-bottom:1px solid var(--line);text-align:left;vertical-align:middle}
thead th{font-size:12.5px;font-weight:600;color:var(--muted);border-bottom:1px solid #c9cfd3;white-space:nowrap}
tbody tr:last-child td,tbody tr:last-child th{border-bottom:0}
.num{text-align:right;white-space:nowrap}
.timings th{font-weight:500;width:90px}
.timings tfoot th,.timings tfoot td{border-top:1px solid #c9cfd3;border-bottom:0;font-weight:600}
.barcell{width:60%}
.bar{display:block;height:8px;min-width:2px;border-radius:4px;background:var(--accent);opacity:.75}
.wcell{min-width:110px}
.wbar{display:inline-block;height:6px;margin-right:8px;border-radius:3px;background:var(--accent);opacity:.55;vertical-align:middle}
td.id{overflow-wrap:anywhere;max-width:340px;line-height:1.35}
td.thumb{width:1%;padding:4px 6px}
td.thumb img{display:block;border-radius:4px;background:#eef0f1}
td.labels{font-size:13px;color:var(--ink)}
tr.none td{background:#fbf1ea}
.labels-table,.worst{max-width:880px}
code{font-family:ui-monospace,SFMono-Regular,Menlo,Consolas,"Liberation Mono",monospace;font-size:12.5px}
.muted{color:var(--muted)}
.small{font-size:12px}
.scroll{overflow-x:auto}
figure{margin:0}
figure img,figure svg{display:block;max-width:100%;height:auto}
.sheet img{border-radius:6px;border:1px solid var(--line);background:#fff}
.chart svg text{font-family:inherit}
figcaption{margin-top:8px;color:var(--muted);font-size:13.5px}
.legend{display:flex;flex-wrap:wrap;gap:6px 18px;list-style:none;margin:10px 0 0;padding:0;font-size:13px}
.swatch{display:inline-block;width:10px;height:10px;border-radius:50%;margin-right:6px;vertical-align:baseline}
.sr{position:absolute;width:1px;height:1px;overflow:hidden;clip:rect(0 0 0 0)}
a{color:var(--accent)}
footer{margin:22px 4px 0;color:var(--muted);font-size:13px}
@media print{body{background:#fff}section{break-inside:avoid;border-color:#ccc}}
`;
