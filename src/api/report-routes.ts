import { readFile, stat } from 'node:fs/promises';
import { join } from 'node:path';
import { z } from 'zod';
import { THUMBS_DIR } from '../data/dataset-writer.js';
import { META_FILE, type StoredDatasetMeta } from '../data/stored-dataset.js';
import { CairnError } from '../errors.js';
import type { SelectSpec, TaskRef } from '../jobs/task.js';
import { loadReportInput } from '../report/report-data.js';
import { renderReportPage } from '../report/report-page.js';
import type { App, AppDeps } from './app.js';
import { idParams, resourceId } from './schemas.js';

/**
 * The report page allows no script at all, images from this origin only (the contact sheet and
 * thumbnails), and its one inline style sheet; it cannot be framed, post forms or change its base URL.
 */
export const REPORT_CSP = "default-src 'none'; img-src 'self'; style-src 'unsafe-inline'; base-uri 'none'; form-action 'none'; frame-ancestors 'none'";

const API_KEY_NOTE =
  'With API keys configured, a browser (which sends no Authorization header) opens the report through a link from `POST /v1/jobs/{id}/report-link`: its `access` token then opens the page and everything the page loads or links (icon, contact sheet, thumbnails, result, assignments) for 24 hours.';

export const reportQuery = z.object({
  access: z.string().max(256).optional().describe('A report token from POST /v1/jobs/{id}/report-link (instead of an Authorization header); the page passes it on to its images and links.'),
});

export const reportLink = z.object({
  path: z.string().describe('Path of the report page, with the access token when API keys are configured; relative to the API’s address.'),
  expiresAt: z.string().nullable().describe('When the token stops opening the report (ISO 8601); null without API keys (no token needed).'),
});

/** Three stacked stones, in the report's accent colour. */
export const REPORT_ICON_SVG =
  '<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 32 32"><ellipse cx="16" cy="26" rx="12" ry="4.5" fill="#1f6f78"/><ellipse cx="16" cy="17.5" rx="8.5" ry="4" fill="#3a8a92"/><ellipse cx="16" cy="10" rx="5" ry="3.2" fill="#6aaab0"/></svg>';

export const thumbnailParams = z.object({
  id: resourceId,
  row: z
    .string()
    .regex(/^(0|[1-9][0-9]{0,9})$/, 'a row number: 0, or a positive integer without leading zeros')
    .describe('0-based row of the item in the job’s dataset.'),
});

/**
 * The HTML report of a completed job, and the dataset thumbnails it shows. Needs only the task
 * store from the app's dependencies (so AppDeps and the route modules' RouteDeps both fit).
 */
export function reportRoutes(app: App, deps: Pick<AppDeps, 'store' | 'keys'>): void {
  const { store, keys } = deps;
  const jobRef = (tenant: string, id: string): TaskRef => ({ kind: 'job', tenant, id });
  const existing = async (tenant: string, id: string): Promise<TaskRef> => {
    const r = jobRef(tenant, id);
    if (!(await store.exists(r))) throw new CairnError('JOB_NOT_FOUND', undefined, { jobId: id });
    return r;
  };

  app.get(
    '/v1/jobs/:id/report',
    {
      schema: {
        summary: 'A readable HTML report of a completed job',
        description:
          'One self-contained HTML page (no scripts, inline styles and SVG charts only): job parameters and timings, D² and its ratio to random subsets, coverage distances, the contact sheet (image datasets) or a 2-D projection of a row sample with the representatives marked (vector datasets), the prefix D² curve against random subsets, the representatives and the worst-covered items. Served with a strict Content-Security-Policy. Errors are the JSON error body: 404 JOB_NOT_FOUND, 409 JOB_NOT_COMPLETED (as for the result). ' +
          API_KEY_NOTE,
        tags: ['jobs'],
        params: idParams,
        querystring: reportQuery,
        produces: ['text/html'],
      },
    },
    async (req, reply) => {
      const r = await existing(req.tenant, req.params.id);
      const state = await store.readState(r);
      if (state.status !== 'completed') throw new CairnError('JOB_NOT_COMPLETED', `The job is ${state.status}.`, { jobId: r.id, status: state.status });
      const spec = await store.readSpec<SelectSpec>(r);
      const html = renderReportPage({ ...(await loadReportInput(store, r, spec)), access: req.query.access });
      return reply
        .type('text/html; charset=utf-8')
        .header('content-security-policy', REPORT_CSP)
        .header('x-content-type-options', 'nosniff')
        .header('referrer-policy', 'no-referrer')
        .header('cache-control', 'private, no-cache')
        .send(html);
    },
  );

  app.post(
    '/v1/jobs/:id/report-link',
    {
      schema: {
        summary: 'A link that opens the job’s report in a browser',
        description:
          'With API keys configured, browsers cannot send the Authorization header the report needs. This answers the report’s path with an `access` token bound to this job and tenant, valid for 24 hours; the page passes it on to the images and links it loads. Without API keys, the plain path. The job need not be completed yet (the page answers 409 JOB_NOT_COMPLETED until it is). 404 JOB_NOT_FOUND.',
        tags: ['jobs'],
        params: idParams,
        response: { 200: reportLink },
      },
    },
    async (req) => {
      const r = await existing(req.tenant, req.params.id);
      const path = `/v1/jobs/${encodeURIComponent(r.id)}/report`;
      if (!keys.enabled) return { path, expiresAt: null };
      const { token, expiresAt } = keys.reportToken(req.tenant, r.id);
      return { path: `${path}?access=${encodeURIComponent(token)}`, expiresAt: expiresAt.toISOString() };
    },
  );

  app.get(
    '/v1/jobs/:id/report-icon.svg',
    {
      schema: {
        summary: 'The report page’s icon',
        description: 'A small static SVG the report links as its icon, so browsers do not ask for a missing /favicon.ico. The same for every job.',
        tags: ['jobs'],
        params: idParams,
        produces: ['image/svg+xml'],
      },
    },
    async (_req, reply) => reply.type('image/svg+xml').header('cache-control', 'public, max-age=86400').header('x-content-type-options', 'nosniff').send(REPORT_ICON_SVG),
  );

  app.get(
    '/v1/jobs/:id/thumbnails/:row.png',
    {
      schema: {
        summary: 'A thumbnail of an item of the job’s dataset (image datasets)',
        description:
          'The PNG thumbnail stored at ingestion for one row of the dataset the job selected from; the report page shows these for the representatives and the worst-covered items. 404 DATASET_NOT_FOUND when the dataset has been deleted, 409 DATASET_HAS_NO_IMAGES for a vector dataset, 404 ROUTE_NOT_FOUND for a row outside the dataset. ' +
          API_KEY_NOTE,
        tags: ['jobs'],
        params: thumbnailParams,
        produces: ['image/png'],
      },
    },
    async (req, reply) => {
      const r = await existing(req.tenant, req.params.id);
      const row = Number(req.params.row);
      const spec = await store.readSpec<SelectSpec>(r);
      const dir = join(store.storeDir(req.tenant), spec.datasetId);
      const meta = await readFile(join(dir, META_FILE), 'utf8')
        .then((text) => JSON.parse(text) as StoredDatasetMeta)
        .catch(() => null);
      if (!meta) throw new CairnError('DATASET_NOT_FOUND', 'The job’s dataset has been deleted.', { datasetId: spec.datasetId });
      const thumbs = join(dir, THUMBS_DIR);
      if (!(await stat(thumbs).catch(() => null))?.isDirectory()) throw new CairnError('DATASET_HAS_NO_IMAGES', 'The dataset has no images, so there are no thumbnails.', { datasetId: spec.datasetId });
      if (row >= meta.rows) throw new CairnError('ROUTE_NOT_FOUND', `The dataset has ${meta.rows} rows; there is no row ${row}.`, { row, rows: meta.rows });
      const png = await readFile(join(thumbs, `${row}.png`)).catch(() => null);
      if (!png) throw new CairnError('ROUTE_NOT_FOUND', `No thumbnail is stored for row ${row}.`, { row });
      return reply.type('image/png').header('cache-control', 'private, max-age=3600').header('x-content-type-options', 'nosniff').send(png);
    },
  );
}
