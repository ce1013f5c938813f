import { createHash, createHmac, randomBytes, timingSafeEqual } from 'node:crypto';
import type { ApiKeyEntry } from '../config.js';
import { CairnError } from '../errors.js';

/** The tenant of requests when no API keys are configured (the API then listens on 127.0.0.1 only). */
export const LOCAL_TENANT = 'local';

/**
 * API keys are random 32-byte secrets; the configuration holds only their SHA-256. A fast hash is
 * enough for secrets with 256 bits of entropy (no dictionary to try); a slow password hash would
 * cost every request milliseconds.
 */
export function hashApiKey(key: string): string {
  return createHash('sha256').update(key, 'utf8').digest('hex');
}

export function newApiKey(): string {
  return `cairn_${randomBytes(32).toString('base64url')}`;
}

/** Bound on remembered Authorization headers (only accepted ones are remembered). */
const MAX_ACCEPTED = 1024;

/** How long a report link (POST /v1/jobs/{id}/report-link) opens the report. */
export const REPORT_LINK_SECONDS = 24 * 3600;

/**
 * What a report link opens without an Authorization header (GET only): the report page of its job
 * and what the page loads or links (icon, contact sheet, thumbnails, result, assignments).
 * Groups: the job id, the query string.
 */
const REPORT_PARTS = /^\/v1\/jobs\/([^/?#]+)\/(?:report|report-icon\.svg|contact-sheet\.png|thumbnails\/[0-9]+\.png|result|assignments)\?([^#]*)$/;

export class ApiKeys {
  private readonly tenantOf = new Map<string, string>();
  /** Accepted Authorization headers → tenant, so a poll costs a Map lookup instead of a regex and a SHA-256. */
  private readonly accepted = new Map<string, string>();
  private readonly tenants = new Set<string>();
  /**
   * HMAC key of report links, derived from the configured entries: every API process with the same
   * CAIRN_API_KEYS accepts the others' links, and replacing the keys revokes every link.
   */
  private readonly linkKey: Buffer;

  constructor(entries: ApiKeyEntry[]) {
    for (const e of entries) {
      this.tenantOf.set(e.hash, e.tenant);
      this.tenants.add(e.tenant);
    }
    const material = entries.map((e) => `${e.tenant}:${e.hash}`).sort().join('\n');
    this.linkKey = createHash('sha256').update(`cairn report links\n${material}`).digest();
  }

  get enabled(): boolean {
    return this.tenantOf.size > 0;
  }

  /** The tenant of an Authorization header's bearer key; UNAUTHORIZED when missing or unknown. */
  tenant(authorization: string | undefined): string {
    if (!this.enabled) return LOCAL_TENANT;
    const known = authorization === undefined ? undefined : this.accepted.get(authorization);
    if (known) return known;
    const m = /^Bearer\s+(\S+)\s*$/i.exec(authorization ?? '');
    const tenant = m ? this.tenantOf.get(hashApiKey(m[1])) : undefined;
    if (!tenant) throw new CairnError('UNAUTHORIZED');
    // Unknown keys are never remembered, so guessing cannot grow the map.
    if (this.accepted.size >= MAX_ACCEPTED) this.accepted.clear();
    this.accepted.set(authorization!, tenant);
    return tenant;
  }

  /**
   * The tenant of a request: from its Authorization header, or, for a GET of a report's parts
   * without one, from the report token in its `access` query parameter.
   */
  tenantOfRequest(method: string, url: string, authorization: string | undefined): string {
    if (authorization === undefined && this.enabled && (method === 'GET' || method === 'HEAD')) {
      const m = REPORT_PARTS.exec(url);
      const access = m ? new URLSearchParams(m[2]).get('access') : null;
      if (m && access !== null) return this.reportTenant(access, decodePath(m[1]));
    }
    return this.tenant(authorization);
  }

  /** A token opening one job's report for REPORT_LINK_SECONDS: `<tenant>.<expiry, Unix seconds>.<HMAC>`. */
  reportToken(tenant: string, jobId: string, now = Date.now()): { token: string; expiresAt: Date } {
    const expiry = Math.floor(now / 1000) + REPORT_LINK_SECONDS;
    return { token: `${tenant}.${expiry}.${this.mac(tenant, jobId, expiry)}`, expiresAt: new Date(expiry * 1000) };
  }

  /** The tenant a report token was made for; UNAUTHORIZED when it is malformed, forged, expired or another job's. */
  reportTenant(token: string, jobId: string, now = Date.now()): string {
    const m = /^([a-z0-9][a-z0-9_-]{0,63})\.([0-9]{1,12})\.([A-Za-z0-9_-]{43})$/.exec(token);
    if (!m || !this.tenants.has(m[1])) throw new CairnError('UNAUTHORIZED', 'The report link is not valid.');
    const expiry = Number(m[2]);
    const expected = Buffer.from(this.mac(m[1], jobId, expiry), 'base64url');
    if (!timingSafeEqual(expected, Buffer.from(m[3], 'base64url'))) throw new CairnError('UNAUTHORIZED', 'The report link is not valid.');
    if (expiry * 1000 <= now) throw new CairnError('UNAUTHORIZED', 'The report link has expired: ask for a new one (POST /v1/jobs/{id}/report-link).');
    return m[1];
  }

  private mac(tenant: string, jobId: string, expiry: number): string {
    return createHmac('sha256', this.linkKey).update(`${tenant}\n${jobId}\n${expiry}`).digest('base64url');
  }
}

/** A path segment decoded; a malformed escape is an invalid link, not a server error. */
function decodePath(segment: string): string {
  try {
    return decodeURIComponent(segment);
  } catch {
    throw new CairnError('UNAUTHORIZED', 'The report link is not valid.');
  }
}
