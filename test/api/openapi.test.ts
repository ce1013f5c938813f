import { readFileSync } from 'node:fs';
import request from 'supertest';
import { describe, expect, it } from 'vitest';
import { openapiDocument, openapiText } from '../../src/api/openapi-document.js';
import { ERROR_CATALOGUE } from '../../src/errors.js';
import { testServer } from './api-helpers.js';

describe('OpenAPI document', () => {
  it('the committed openapi/openapi.json is what the schemas generate (run `npm run openapi` after changing a route)', async () => {
    const committed = readFileSync(new URL('../../openapi/openapi.json', import.meta.url), 'utf8');
    expect(committed).toBe(openapiText(await openapiDocument()));
  });

  it('documents every route, the error shape and every error code', async () => {
    const doc = await openapiDocument();
    const paths = Object.keys(doc.paths as object);
    for (const p of ['/v1/datasets', '/v1/datasets/{id}', '/v1/jobs', '/v1/jobs/{id}', '/v1/jobs/{id}/events', '/v1/jobs/{id}/result', '/v1/jobs/{id}/assignments', '/v1/jobs/{id}/contact-sheet.png', '/healthz', '/readyz', '/metrics']) {
      expect(paths).toContain(p);
    }
    const text = JSON.stringify(doc);
    for (const code of Object.keys(ERROR_CATALOGUE)) expect(text).toContain(code);
  });

  it('is served at /openapi.json, with a viewer at /docs', async () => {
    const t = await testServer();
    try {
      const res = await request(t.server.url).get('/openapi.json');
      expect(res.status).toBe(200);
      expect(res.body.info.title).toBe('cairn');
      const docs = await request(t.server.url).get('/docs/').redirects(2);
      expect(docs.status).toBe(200);
      expect(docs.text).toContain('<html');
    } finally {
      await t.stop();
    }
  });
});
