import { z } from 'zod';
import type { App, RouteDeps } from './app.js';
import { errorBody, modelEntry } from './schemas.js';

export function modelRoutes(app: App, deps: RouteDeps): void {
  app.get(
    '/v1/models',
    {
      schema: {
        summary: 'List the embedding models',
        description: 'Every model of the models folder with its validation status: a ready model can be named in a job’s `embedding.model`; an invalid one shows the error that stopped it.',
        tags: ['models'],
        response: { 200: z.object({ models: z.array(modelEntry) }), 401: errorBody, 429: errorBody },
      },
    },
    async () => ({ models: deps.models.list() as Array<z.infer<typeof modelEntry>> }),
  );
}
