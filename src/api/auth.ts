import { createHash, randomBytes } from 'node:crypto';
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

export class ApiKeys {
  private readonly tenantOf = new Map<string, string>();
  /** Accepted Authorization headers → tenant, so a poll costs a Map lookup instead of a regex and a SHA-256. */
  private readonly accepted = new Map<string, string>();

  constructor(entries: ApiKeyEntry[]) {
    for (const e of entries) this.tenantOf.set(e.hash, e.tenant);
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
}
