import { createHash } from 'node:crypto';
import { mkdir, readdir, readFile, rm, stat } from 'node:fs/promises';
import { join } from 'node:path';
import { writeFileAtomic } from '../data/file-ops.js';
import { CairnError } from '../errors.js';

export interface StoredAnswer {
  status: number;
  body: unknown;
}

interface IdempotencyRecord extends StoredAnswer {
  fingerprint: string;
  createdAt: string;
}

/** How long a first answer is kept for retries of the same request. */
export const IDEMPOTENCY_TTL_MS = 24 * 3600 * 1000;

/**
 * First answers to requests that carried an Idempotency-Key, per tenant, on disk (so a retry that
 * reaches another API process, or the same one after a restart, gets the same answer). The key is
 * stored hashed. A retry with the same key and the same request (fingerprint) gets the first
 * answer; with a different request, IDEMPOTENCY_KEY_REUSED.
 */
export class IdempotencyStore {
  private readonly pending = new Map<string, Promise<StoredAnswer>>();

  constructor(private readonly dir: string) {}

  private path(tenant: string, key: string): string {
    return join(this.dir, tenant, `${createHash('sha256').update(key).digest('hex')}.json`);
  }

  async lookup(tenant: string, key: string, fingerprint: string): Promise<StoredAnswer | null> {
    const path = this.path(tenant, key);
    const inFlight = this.pending.get(path);
    if (inFlight) await inFlight.catch(() => undefined);
    let record: IdempotencyRecord;
    try {
      record = JSON.parse(await readFile(path, 'utf8')) as IdempotencyRecord;
    } catch {
      return null;
    }
    if (record.fingerprint !== fingerprint) throw new CairnError('IDEMPOTENCY_KEY_REUSED');
    return { status: record.status, body: record.body };
  }

  /**
   * Runs `answer` once per (tenant, key) in this process and stores its result; concurrent calls
   * with the same key wait for the first. Errors are not stored: a failed request may be retried.
   */
  async run(tenant: string, key: string, fingerprint: string, answer: () => Promise<StoredAnswer>): Promise<StoredAnswer> {
    const path = this.path(tenant, key);
    const earlier = await this.lookup(tenant, key, fingerprint);
    if (earlier) return earlier;
    const inFlight = this.pending.get(path);
    if (inFlight) {
      await inFlight.catch(() => undefined);
      return this.run(tenant, key, fingerprint, answer);
    }
    const work = (async () => {
      const result = await answer();
      const record: IdempotencyRecord = { ...result, fingerprint, createdAt: new Date().toISOString() };
      await mkdir(join(this.dir, tenant), { recursive: true });
      await writeFileAtomic(path, JSON.stringify(record));
      return result;
    })();
    this.pending.set(path, work);
    try {
      return await work;
    } finally {
      this.pending.delete(path);
    }
  }

  /** Deletes answers older than the TTL. */
  async sweep(now = Date.now()): Promise<void> {
    for (const tenant of await readdir(this.dir).catch(() => [] as string[])) {
      for (const name of await readdir(join(this.dir, tenant)).catch(() => [] as string[])) {
        const p = join(this.dir, tenant, name);
        const s = await stat(p).catch(() => null);
        if (s && now - s.mtimeMs > IDEMPOTENCY_TTL_MS) await rm(p, { force: true });
      }
    }
  }
}

export function fingerprintOf(value: unknown): string {
  return createHash('sha256').update(JSON.stringify(value)).digest('hex');
}
