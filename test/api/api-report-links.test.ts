import request from 'supertest';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { ApiKeys, hashApiKey, REPORT_LINK_SECONDS } from '../../src/api/auth.js';
import { parseApiKeys } from '../../src/config.js';
import { swatchTar } from '../data/archive-fixtures.js';
import { clusterMatrix, npyOf } from '../jobs/task-fixtures.js';
import { settle, testServer, type TestServer } from './api-helpers.js';

/**
 * With API keys on, a browser (no Authorization header) opens a job's report through a link from
 * POST /v1/jobs/{id}/report-link: the token opens the page and everything the page loads or links,
 * for that job only, until it expires.
 */
const keyA = 'cairn_test-key-of-tenant-a-0123456789abcdef';
const keyB = 'cairn_test-key-of-tenant-b-0123456789abcdef';
const A = { authorization: `Bearer ${keyA}` };
const B = { authorization: `Bearer ${keyB}` };
const KEYS = `north-yard:${hashApiKey(keyA)}, south-yard:${hashApiKey(keyB)}`;

describe('report links with API keys on', () => {
  let t: TestServer;
  let url: string;
  let jobId: string;
  let otherJobId: string;

  beforeAll(async () => {
    t = await testServer({ CAIRN_API_KEYS: KEYS, CAIRN_HOST: '127.0.0.1' });
    url = t.server.url;
    const images = (await request(url).post('/v1/datasets').set(A).attach('file', await swatchTar(24), 'parts.tar')).body.id;
    await settle(url, `/v1/datasets/${images}`, A);
    jobId = (await request(url).post('/v1/jobs').set(A).send({ datasetId: images, k: 3, maxIterations: 60 })).body.id;
    await settle(url, `/v1/jobs/${jobId}`, A);
    const vectors = (await request(url).post('/v1/datasets').set(A).attach('file', npyOf(clusterMatrix(200, 4)), 'v.npy')).body.id;
    await settle(url, `/v1/datasets/${vectors}`, A);
    otherJobId = (await request(url).post('/v1/jobs').set(A).send({ datasetId: vectors, k: 2, maxIterations: 40 })).body.id;
    await settle(url, `/v1/jobs/${otherJobId}`, A);
  });
  afterAll(async () => t?.stop());

  it('opens the page and every image and link on it without a header', async () => {
    expect((await request(url).get(`/v1/jobs/${jobId}/report`)).status).toBe(401);
    const made = await request(url).post(`/v1/jobs/${jobId}/report-link`).set(A);
    expect(made.status).toBe(200);
    expect(made.body.path).toMatch(new RegExp(`^/v1/jobs/${jobId}/report\\?access=north-yard\\.[0-9]+\\.[A-Za-z0-9_-]{43}$`));
    const hours = (Date.parse(made.body.expiresAt) - Date.now()) / 3_600_000;
    expect(hours).toBeGreaterThan(23.9);
    expect(hours).toBeLessThanOrEqual(REPORT_LINK_SECONDS / 3600);

    const page = await request(url).get(made.body.path);
    expect(page.status).toBe(200);
    expect(page.headers['content-type']).toMatch(/^text\/html/);
    const html = page.text;
    const links = [...html.matchAll(/(?:src|href)="([^"]+)"/g)].map((m) => m[1].replaceAll('&amp;', '&'));
    // The icon, the contact sheet, a thumbnail per representative (and worst-covered item), the result and the assignments.
    expect(links.some((l) => l.startsWith('contact-sheet.png?'))).toBe(true);
    expect(links.filter((l) => l.startsWith('thumbnails/')).length).toBeGreaterThanOrEqual(3);
    expect(links).toEqual(expect.arrayContaining([expect.stringMatching(/^report-icon\.svg\?access=/), expect.stringMatching(/^result\?access=/), expect.stringMatching(/^assignments\?format=csv&access=/)]));
    for (const link of links) {
      expect(link, link).toContain('access=');
      const res = await request(url).get(`/v1/jobs/${jobId}/${link}`).buffer(true);
      expect({ link, status: res.status }).toEqual({ link, status: 200 });
    }
  });

  it('opens nothing else: another job, other routes, other methods, a forged or expired token', async () => {
    const token = new URL(`http://x${(await request(url).post(`/v1/jobs/${jobId}/report-link`).set(A)).body.path}`).searchParams.get('access')!;
    const access = `access=${encodeURIComponent(token)}`;
    const refused = async (method: 'get' | 'post' | 'delete', path: string) => {
      const res = await request(url)[method](path);
      expect({ path, method, status: res.status }).toEqual({ path, method, status: 401 });
      expect(res.body.error.code).toBe('UNAUTHORIZED');
    };
    await refused('get', `/v1/jobs/${otherJobId}/report?${access}`);
    await refused('get', `/v1/jobs/${jobId}?${access}`);
    await refused('get', `/v1/jobs?${access}`);
    await refused('post', `/v1/jobs/${jobId}/cancel?${access}`);
    await refused('delete', `/v1/jobs/${jobId}?${access}`);
    const [tenant, expiry, mac] = token.split('.');
    await refused('get', `/v1/jobs/${jobId}/report?access=${tenant}.${Number(expiry) + 3600}.${mac}`);
    await refused('get', `/v1/jobs/${jobId}/report?access=south-yard.${expiry}.${mac}`);
    await refused('get', `/v1/jobs/${jobId}/report?access=${tenant}.${expiry}.${mac.slice(1)}A`);
    // A malformed escape in the path: refused as a client error, not a server error.
    expect((await request(url).get(`/v1/jobs/%E0%A4%A/report?${access}`)).status).toBe(400);
    // Made 25 hours ago with the server's own key material: expired.
    const old = new ApiKeys(parseApiKeys(KEYS)).reportToken('north-yard', jobId, Date.now() - 25 * 3600 * 1000).token;
    await refused('get', `/v1/jobs/${jobId}/report?access=${encodeURIComponent(old)}`);
    // The same construction one hour ago is accepted: the key material is the configuration's.
    const fresh = new ApiKeys(parseApiKeys(KEYS)).reportToken('north-yard', jobId, Date.now() - 3600 * 1000).token;
    expect((await request(url).get(`/v1/jobs/${jobId}/report?access=${encodeURIComponent(fresh)}`)).status).toBe(200);
    // Another tenant cannot make a link to the job: it does not exist for them.
    expect((await request(url).post(`/v1/jobs/${jobId}/report-link`).set(B)).status).toBe(404);
  });
});

describe('report links without API keys', () => {
  let t: TestServer;
  beforeAll(async () => {
    t = await testServer();
  });
  afterAll(async () => t?.stop());

  it('answer the plain path (no token needed) and 404 for an unknown job', async () => {
    const url = t.server.url;
    const ds = (await request(url).post('/v1/datasets').attach('file', npyOf(clusterMatrix(120, 5)), 'v.npy')).body.id;
    await settle(url, `/v1/datasets/${ds}`);
    const job = (await request(url).post('/v1/jobs').send({ datasetId: ds, k: 2, maxIterations: 30 })).body.id;
    const made = await request(url).post(`/v1/jobs/${job}/report-link`);
    expect(made.body).toEqual({ path: `/v1/jobs/${job}/report`, expiresAt: null });
    expect((await request(url).post('/v1/jobs/job_nope/report-link')).body.error.code).toBe('JOB_NOT_FOUND');
  });
});
