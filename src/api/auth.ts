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

export class ApiKeys {
  private readonly tenantOf = new Map<string, string>();

  constructor(entries: ApiKeyEntry[]) {
    for (const e of entries) this.tenantOf.set(e.hash, e.tenant);
  }

  get enabled(): boolean {
    return this.tenantOf.size > 0;
  }

  /** The tenant of an Authorization header's bearer key; UNAUTHORIZED when missing or unknown. */
  tenant(authorization: string | undefined): string {
    if (!this.enabled) return LOCAL_TENANT;
    const m = /^Bearer\s+(\S+)\s*$/i.exec(authorization ?? '');
    const tenant = m ? this.tenantOf.get(hashApiKey(m[1])) : undefined;
    if (!tenant) throw new CairnError('UNAUTHORIZED');
    return tenant;
  }
}
