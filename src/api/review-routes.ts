import { z } from 'zod';
import { CairnError } from '../errors.js';
import type { ResultDocument } from '../jobs/result-document.js';
import type { SelectSpec, TaskRef } from '../jobs/task.js';
import { csvCell } from '../jobs/assignment-export.js';
import type { App, RouteDeps } from './app.js';
import { datasetView } from './resources.js';
import { errorBody, idParams } from './schemas.js';

const errors = { 400: errorBody, 401: errorBody, 404: errorBody, 409: errorBody, 429: errorBody };

const prefixQuery = z.object({
  m: z.coerce.number().int().min(1).optional().describe('How many representatives, from rank 1; default all k. At most k.'),
});

const prefixBody = z.object({
  jobId: z.string(),
  m: z.number().int(),
  k: z.number().int(),
  representatives: z.array(z.record(z.string(), z.unknown())).describe('The first m representatives in rank order, as in the result.'),
  d2: z.number().describe('D² of the first m representatives with uniform weights 1/m.'),
  randomD2: z.number().describe('Median D² of random m-subsets (same draws as the result’s baseline).'),
  curve: z.array(z.object({ m: z.number().int(), value: z.number(), random: z.number() })).describe('The whole prefix curve: D² of the first m (uniform weights) and of random m-subsets, m = 1..k.'),
});

const reviewQuery = z.object({
  format: z.enum(['json', 'csv']).default('json').describe('json (default) or csv.'),
  worst: z.coerce.number().int().min(0).max(10_000).optional().describe('How many poorly covered items to include; default all the result lists (the job’s worstCount).'),
  m: z.coerce.number().int().min(1).optional().describe('Only the first m representatives; default all.'),
});

export interface ReviewItem {
  reason: 'representative' | 'poorly covered';
  id: string;
  index: number;
  label: string | null;
  rank: number | null;
  weight: number | null;
  share: number | null;
  distance: number | null;
  nearestRank: number | null;
  thumbnail: string | null;
}

/** Ranked prefixes of a result, and the review batch: what to send to annotation, and why. */
export function reviewRoutes(app: App, deps: RouteDeps): void {
  const { store, reader } = deps;
  const completedJob = async (tenant: string, id: string): Promise<{ r: TaskRef; spec: SelectSpec; result: ResultDocument }> => {
    const r: TaskRef = { kind: 'job', tenant, id };
    if (!(await store.exists(r))) throw new CairnError('JOB_NOT_FOUND', undefined, { jobId: id });
    const state = await store.readState(r);
    if (state.status !== 'completed') throw new CairnError('JOB_NOT_COMPLETED', `The job is ${state.status}.`, { jobId: id, status: state.status });
    const [spec, text] = await Promise.all([store.readSpec<SelectSpec>(r), store.readText(r, 'result.json')]);
    return { r, spec, result: JSON.parse(text) as ResultDocument };
  };
  const checkM = (m: number | undefined, k: number): number => {
    if (m !== undefined && m > k) throw new CairnError('INVALID_ARGUMENT', `m must be at most k = ${k} (got ${m}).`, { name: 'm', allowed: `1..${k}`, value: m });
    return m ?? k;
  };

  app.get(
    '/v1/jobs/:id/prefix',
    {
      schema: {
        summary: 'The first m representatives',
        description: 'Representatives are ranked so that every prefix is a good summary: for a budget of m < k items, take the first m. Comes with the prefix D² curve and the curve of random subsets for comparison.',
        tags: ['jobs'],
        params: idParams,
        querystring: prefixQuery,
        response: { 200: prefixBody, ...errors },
      },
    },
    async (req) => {
      const { result } = await completedJob(req.tenant, req.params.id);
      const m = checkM(req.query.m, result.k);
      const point = result.discrepancy.prefix[m - 1];
      const representatives = result.representatives.slice(0, m) as unknown as Array<Record<string, unknown>>;
      return { jobId: req.params.id, m, k: result.k, representatives, d2: point.value, randomD2: point.random, curve: result.discrepancy.prefix };
    },
  );

  app.get(
    '/v1/jobs/:id/review-batch',
    {
      schema: {
        summary: 'The review batch: representatives and poorly covered items to send to annotation',
        description:
          'One document listing the representatives (reason `representative`, with rank, weight and share) and the worst-covered items (reason `poorly covered`, with their distance to the nearest representative and its rank), each with id, row index, label and a link to its thumbnail for image datasets. json: `{job, dataset, generatedAt, items}`; csv: one row per item.',
        tags: ['jobs'],
        params: idParams,
        querystring: reviewQuery,
        produces: ['application/json', 'text/csv'],
      },
    },
    async (req, reply) => {
      const { r, spec, result } = await completedJob(req.tenant, req.params.id);
      const m = checkM(req.query.m, result.k);
      const ds = await datasetView(reader, { kind: 'dataset', tenant: req.tenant, id: spec.datasetId }).catch(() => null);
      const thumb = (row: number): string | null => (ds?.hasImages ? `/v1/jobs/${r.id}/thumbnails/${row}.png` : null);
      const labelOf = new Map<number, string | null>(result.representatives.map((p) => [p.index, p.label]));
      const items: ReviewItem[] = [
        ...result.representatives.slice(0, m).map((p) => ({
          reason: 'representative' as const,
          id: p.id,
          index: p.index,
          label: p.label,
          rank: p.rank,
          weight: p.weight,
          share: p.share,
          distance: null,
          nearestRank: null,
          thumbnail: thumb(p.index),
        })),
        ...result.coverage.worstCovered.slice(0, req.query.worst ?? result.coverage.worstCovered.length).map((w) => ({
          reason: 'poorly covered' as const,
          id: w.id,
          index: w.index,
          label: labelOf.get(w.index) ?? null,
          rank: null,
          weight: null,
          share: null,
          distance: w.distance,
          nearestRank: w.nearestRank,
          thumbnail: thumb(w.index),
        })),
      ];
      const filename = `${r.id}-review-batch`;
      if (req.query.format === 'csv') {
        const cell = (v: string | number | null) => (v === null ? '' : typeof v === 'number' ? String(v) : csvCell(v));
        const lines = ['reason,id,index,label,rank,weight,share,distance,nearest_rank,thumbnail'];
        for (const it of items) lines.push([it.reason, it.id, it.index, it.label, it.rank, it.weight, it.share, it.distance, it.nearestRank, it.thumbnail].map(cell).join(','));
        return reply.type('text/csv; charset=utf-8').header('content-disposition', `attachment; filename="${filename}.csv"`).send(lines.join('\n') + '\n');
      }
      const doc = {
        job: { id: r.id, name: spec.name ?? null, k: result.k, space: result.space, d2: result.discrepancy.value },
        dataset: { id: spec.datasetId, source: result.dataset.source, rows: result.rows },
        generatedAt: new Date().toISOString(),
        items,
      };
      return reply.type('application/json').header('content-disposition', `inline; filename="${filename}.json"`).send(doc);
    },
  );
}
