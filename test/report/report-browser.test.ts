import { copyFileSync, existsSync, mkdirSync, mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { chromium, type Browser } from 'playwright-core';
import sharp from 'sharp';
import request from 'supertest';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { REPORT_CSP } from '../../src/api/report-routes.js';
import { Rng } from '../../src/core/random.js';
import { settle, testServer, type TestServer } from '../api/api-helpers.js';

/**
 * The report page end to end: a real server, the demo image archive, a selection, then the page
 * in Debian's Chromium (driven by playwright-core; no browser is downloaded). Without
 * /usr/bin/chromium the browser part is skipped locally, and fails under CI, where .ci/run installs it.
 * The HTTP part (routes, headers, errors, the vector dataset's map) needs no browser.
 */
const CHROMIUM = '/usr/bin/chromium';
const CHROMIUM_ARGS = ['--headless', '--no-sandbox', '--disable-gpu', '--disable-background-networking', '--disable-component-update', '--no-first-run', '--disable-sync'];
const chromiumMissing = !existsSync(CHROMIUM);
const skipBrowser = chromiumMissing && !process.env.CI;
if (skipBrowser) console.warn(`report-browser.test.ts: skipping the browser checks: ${CHROMIUM} does not exist (apt-get install -y chromium). Under CI this fails instead.`);

type WritePartsArchive = (path: string, count: number, seed: number) => Promise<Record<string, number>>;

async function demoArchive(dir: string): Promise<string> {
  // A plain .mjs script without type declarations: imported by URL so tsc does not resolve it.
  const script = new URL('../../scripts/demo-data.mjs', import.meta.url).href;
  const { writePartsArchive } = (await import(script)) as { writePartsArchive: WritePartsArchive };
  const path = join(dir, 'parts-images.tar.gz');
  await writePartsArchive(path, 120, 7);
  return path;
}

/** id,label,x0..x5 rows: three labelled clusters, one of them stretched along a direction. */
function labelledCsv(rows: number, seed: number): Buffer {
  const rng = new Rng(seed);
  const lines = ['id,label,x0,x1,x2,x3,x4,x5'];
  for (let i = 0; i < rows; i++) {
    const c = i % 3;
    const stretch = c === 0 ? 3 * rng.normal() : 0;
    const v = Array.from({ length: 6 }, (_, j) => (j === c ? 6 : 0) + (j === 3 ? stretch : 0) + rng.normal());
    lines.push([`pt-${i}`, ['north', 'south', 'east'][c], ...v.map((x) => x.toFixed(4))].join(','));
  }
  return Buffer.from(lines.join('\n') + '\n');
}

let t: TestServer;
let url: string;
let work: string;
let imageJob: string;
let vectorJob: string;

beforeAll(async () => {
  t = await testServer();
  url = t.server.url;
  work = mkdtempSync(join(tmpdir(), 'cairn-report-test-'));
  const probe = await request(url).get('/v1/jobs/job_probe/report');
  if (probe.body?.error?.code === 'ROUTE_NOT_FOUND') throw new Error('GET /v1/jobs/:id/report is not served: register reportRoutes (src/api/report-routes.ts) in src/api/app.ts');
  expect(probe.body.error.code).toBe('JOB_NOT_FOUND');

  const archive = await demoArchive(work);
  const images = await request(url).post('/v1/datasets').attach('file', archive).field('name', 'sorting line <demo>');
  expect(images.status).toBe(202);
  const vectors = await request(url).post('/v1/datasets').attach('file', labelledCsv(2600, 5), 'points.csv').field('name', 'three regions');
  expect(vectors.status).toBe(202);
  expect(await settle(url, `/v1/datasets/${images.body.id}`)).toMatchObject({ status: 'completed', rows: 120, hasImages: true });
  expect(await settle(url, `/v1/datasets/${vectors.body.id}`)).toMatchObject({ status: 'completed', rows: 2600, hasImages: false, hasLabels: true });

  const a = await request(url).post('/v1/jobs').send({ datasetId: images.body.id, k: 8, maxIterations: 200, name: 'week 48 & friends' });
  const b = await request(url).post('/v1/jobs').send({ datasetId: vectors.body.id, k: 6, maxIterations: 200, space: 'standardize' });
  expect(a.status).toBe(202);
  expect(b.status).toBe(202);
  imageJob = a.body.id;
  vectorJob = b.body.id;
  expect((await settle(url, `/v1/jobs/${imageJob}`)).status).toBe('completed');
  expect((await settle(url, `/v1/jobs/${vectorJob}`)).status).toBe('completed');
});

afterAll(async () => {
  await t?.stop();
  if (work) rmSync(work, { recursive: true, force: true });
});

describe('report routes over HTTP', () => {
  it('serves the page as HTML with a script-free Content-Security-Policy', async () => {
    const res = await request(url).get(`/v1/jobs/${imageJob}/report`);
    expect(res.status).toBe(200);
    expect(res.headers['content-type']).toBe('text/html; charset=utf-8');
    expect(res.headers['content-security-policy']).toBe(REPORT_CSP);
    expect(REPORT_CSP).toBe("default-src 'none'; img-src 'self'; style-src 'unsafe-inline'; base-uri 'none'; form-action 'none'; frame-ancestors 'none'");
    expect(res.headers['x-content-type-options']).toBe('nosniff');
    expect(res.text).not.toMatch(/<script/i);
    expect(res.text).toContain('<h1>week 48 &amp; friends</h1>');
    expect(res.text).toContain('<strong>sorting line &lt;demo&gt;</strong>');
  });

  it('draws a vector dataset as a 2-D map of a 2,000-row sample with the k representatives marked', async () => {
    const res = await request(url).get(`/v1/jobs/${vectorJob}/report`);
    expect(res.status).toBe(200);
    const svg = /<svg class="scatter"[\s\S]*?<\/svg>/.exec(res.text)?.[0] ?? '';
    expect(svg.match(/<circle class="pt"/g)).toHaveLength(2000);
    expect(svg.match(/<circle class="rep"/g)).toHaveLength(6);
    expect(res.text).toContain('(columns standardized)');
    for (const label of ['north', 'south', 'east']) expect(res.text).toContain(`${label} <span class="muted">`);
    expect(res.text).not.toContain('contact-sheet.png');
    // The same job draws the same sample.
    const again = await request(url).get(`/v1/jobs/${vectorJob}/report`);
    expect(again.text).toBe(res.text);
  });

  it('answers the same errors as the other job routes', async () => {
    const missing = await request(url).get('/v1/jobs/job_nope/report');
    expect(missing.status).toBe(404);
    expect(missing.body.error.code).toBe('JOB_NOT_FOUND');

    const ds = (await request(url).get(`/v1/jobs/${vectorJob}`)).body.datasetId as string;
    const slow = await request(url).post('/v1/jobs').send({ datasetId: ds, k: 6, maxIterations: 1_000_000, plateauTolerance: 0 });
    const early = await request(url).get(`/v1/jobs/${slow.body.id}/report`);
    expect(early.status).toBe(409);
    expect(early.body.error.code).toBe('JOB_NOT_COMPLETED');
    await request(url).post(`/v1/jobs/${slow.body.id}/cancel`);
    await settle(url, `/v1/jobs/${slow.body.id}`);
  });

  it('serves the thumbnails of an image dataset’s rows, and rejects other rows', async () => {
    const ok = await request(url).get(`/v1/jobs/${imageJob}/thumbnails/0.png`).buffer(true);
    expect(ok.status).toBe(200);
    expect(ok.headers['content-type']).toBe('image/png');
    expect((await sharp(ok.body as Buffer).metadata()).format).toBe('png');
    const last = await request(url).get(`/v1/jobs/${imageJob}/thumbnails/119.png`);
    expect(last.status).toBe(200);

    const beyond = await request(url).get(`/v1/jobs/${imageJob}/thumbnails/120.png`);
    expect(beyond.status).toBe(404);
    expect(beyond.body.error.code).toBe('ROUTE_NOT_FOUND');
    for (const bad of ['01', 'x', '-1', '1e2', '1.5']) {
      const res = await request(url).get(`/v1/jobs/${imageJob}/thumbnails/${bad}.png`);
      expect(res.status, bad).toBe(400);
      expect(res.body.error.code).toBe('INVALID_ARGUMENT');
    }
    const icon = await request(url).get(`/v1/jobs/${imageJob}/report-icon.svg`);
    expect(icon.status).toBe(200);
    expect(icon.headers['content-type']).toMatch(/^image\/svg\+xml/);
    const vector = await request(url).get(`/v1/jobs/${vectorJob}/thumbnails/0.png`);
    expect(vector.status).toBe(409);
    expect(vector.body.error.code).toBe('DATASET_HAS_NO_IMAGES');
  });
});

describe.skipIf(skipBrowser)('report page in Chromium', () => {
  let browser: Browser;

  beforeAll(async () => {
    if (chromiumMissing) throw new Error(`${CHROMIUM} does not exist: CI must install Debian's chromium (apt-get install -y chromium), see .ci/run`);
    browser = await chromium.launch({ executablePath: CHROMIUM, args: CHROMIUM_ARGS });
  });
  afterAll(async () => browser?.close());

  async function open(jobId: string) {
    const page = await browser.newPage({ viewport: { width: 1200, height: 900 } });
    const problems: string[] = [];
    const foreign: string[] = [];
    page.on('console', (m) => {
      if (m.type() === 'error') problems.push(`console error: ${m.text()} (${m.location().url})`);
    });
    page.on('pageerror', (e) => problems.push(`page error: ${e.message}`));
    page.on('requestfailed', (r) => problems.push(`request failed: ${r.url()} ${r.failure()?.errorText ?? ''}`));
    page.on('response', (r) => {
      if (r.status() >= 400) problems.push(`HTTP ${r.status()}: ${r.url()}`);
    });
    page.on('request', (r) => {
      if (!r.url().startsWith(`${url}/`)) foreign.push(r.url());
    });
    const res = await page.goto(`${url}/v1/jobs/${jobId}/report`, { waitUntil: 'load' });
    expect(res?.status()).toBe(200);
    expect(res?.headers()['content-security-policy']).toBe(REPORT_CSP);
    return { page, problems, foreign };
  }

  it('renders the image job’s report with no errors, the contact sheet loaded, both charts and 8 table rows', async () => {
    const { page, problems, foreign } = await open(imageJob);
    try {
      // DOM objects through `unknown`: the project compiles without the DOM library.
      const images = await page.$$eval('img', (els) => els.map((el) => el as unknown as { getAttribute(n: string): string | null; complete: boolean; naturalWidth: number }).map((img) => ({ src: img.getAttribute('src'), complete: img.complete, width: img.naturalWidth })));
      const sheet = images.find((i) => i.src?.startsWith('contact-sheet.png'));
      expect(sheet, 'contact sheet <img>').toBeDefined();
      expect(sheet!.complete).toBe(true);
      expect(sheet!.width).toBeGreaterThan(0);
      const thumbs = images.filter((i) => i.src?.startsWith('thumbnails/'));
      expect(thumbs.length).toBeGreaterThanOrEqual(8 + 1);
      for (const th of thumbs) expect(th.width, th.src ?? '').toBeGreaterThan(0);

      expect(await page.locator('svg.prefix').count()).toBe(1);
      expect(await page.locator('svg.prefix polyline[data-series="selection"]').count()).toBe(1);
      expect(await page.locator('svg.prefix polyline[data-series="random"]').count()).toBe(1);
      expect(await page.locator('table.reps tbody tr').count()).toBe(8);
      expect(await page.locator('table.worst tbody tr').count()).toBeGreaterThan(0);
      expect(await page.locator('script').count()).toBe(0);
      expect(await page.locator('h1').textContent()).toBe('week 48 & friends');

      mkdirSync('test-artifacts', { recursive: true });
      await page.screenshot({ path: 'test-artifacts/report-page.png', fullPage: true });
      if (process.env.UPDATE_DOCS_SCREENSHOT === '1') copyFileSync('test-artifacts/report-page.png', 'docs/report-page.png');
      expect(problems).toEqual([]);
      expect(foreign).toEqual([]);
    } finally {
      await page.close();
    }
  });

  it('renders the vector job’s report with the map and no errors', async () => {
    const { page, problems, foreign } = await open(vectorJob);
    try {
      expect(await page.locator('svg.scatter circle.pt').count()).toBe(2000);
      expect(await page.locator('svg.scatter circle.rep').count()).toBe(6);
      expect(await page.locator('table.reps tbody tr').count()).toBe(6);
      mkdirSync('test-artifacts', { recursive: true });
      await page.screenshot({ path: 'test-artifacts/report-page-vectors.png', fullPage: true });
      expect(problems).toEqual([]);
      expect(foreign).toEqual([]);
    } finally {
      await page.close();
    }
  });
});
