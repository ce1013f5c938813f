import { z } from 'zod';
import { totalmem } from 'node:os';

/**
 * The one configuration of `cairn serve` and `cairn worker`, read from environment variables and
 * validated once at start-up. Every setting documents its default here; README's configuration
 * table is generated from this schema (src/config-table.ts) and a test keeps the two equal.
 */
/** Plain decimal numbers only: z.coerce would take ' ' as 0, and '0x1F90' or '1e3' silently. */
const decimal = (pattern: RegExp) => z.string().regex(pattern, 'must be a plain decimal number').transform(Number);
const int = (min: number, max: number) => decimal(/^\d+$/).pipe(z.number().int().min(min).max(max));
const num = (min: number, max: number) => decimal(/^\d+(\.\d+)?$/).pipe(z.number().min(min).max(max));

export const configSchema = z.object({
  CAIRN_HOST: z.string().min(1).default('0.0.0.0').describe('Address the API listens on. Default 0.0.0.0; forced to 127.0.0.1 while no API keys are configured.'),
  CAIRN_PORT: int(0, 65535).default(8080).describe('TCP port of the API. Default 8080.'),
  CAIRN_DATA_DIR: z.string().min(1).default('./cairn-data').describe('Folder for uploads, stored datasets, jobs and results; shared by the API and every worker. Default ./cairn-data.'),
  CAIRN_MODELS_DIR: z.string().min(1).default('./models').describe('Folder of embedding models: each an .onnx file with a .json description beside it (see README, Embedding models). Default ./models.'),
  CAIRN_EMBED_SHARD_ROWS: int(16, 1_000_000).default(2048).describe('Images per embedding shard: a job that needs an embedding splits it into shards that any worker can run. Default 2048.'),
  CAIRN_PASS_SHARD_ROWS: int(0, 2 ** 31)
    .default(262_144)
    .describe(
      "Rows per shard of a selection's full passes (snapping, coverage): a pass over more rows is split into shards that other workers (BullMQ, or the embedded queue's other threads when CAIRN_WORKER_CONCURRENCY ≥ 2) compute alongside the job; results are identical either way. Rounded down to whole blocks of 16,384 rows; 0 turns shards off. Default 262144.",
    ),
  REDIS_URL: z.string().regex(/^rediss?:\/\/\S+$/, 'must be a redis:// or rediss:// URL').optional().describe('Redis for the BullMQ queues (redis://host:port/db). Unset: the embedded queue runs jobs in-process on worker threads, with job state on disk.'),
  CAIRN_QUEUE_PREFIX: z.string().regex(/^[A-Za-z0-9:_-]{1,64}$/).default('cairn').describe('Key prefix of the BullMQ queues in Redis. Default cairn.'),
  CAIRN_API_KEYS: z.string().default('').describe("API keys as comma-separated 'tenant:sha256-hex-of-key' entries (`cairn keygen` prints one). Empty (default): auth is off and the API binds to 127.0.0.1."),
  CAIRN_MAX_UPLOAD_BYTES: int(1, 2 ** 45).default(8 * 1024 ** 3).describe('Largest dataset upload, in bytes. Default 8 GiB.'),
  CAIRN_RATE_LIMIT_PER_MINUTE: int(0, 1e7).default(1200).describe('Requests per minute per API key (per address when auth is off); 0 turns the limit off. Default 1200.'),
  CAIRN_WORKER_CONCURRENCY: int(1, 64).default(1).describe('Jobs one worker (or the embedded queue) runs at once. Default 1.'),
  CAIRN_MEMORY_BUDGET_MB: int(0, 2 ** 30)
    .default(0)
    .describe(
      'Memory each running selection may use for copies of its dataset, in MiB. A dataset larger than this is read from its file in blocks (slower, same method); smaller ones are held in memory. 0 (default): half of the physical memory divided by CAIRN_WORKER_CONCURRENCY.',
    ),
  CAIRN_COMPUTE_THREADS: int(0, 256).default(0).describe('Threads of each job’s compute kernels; 0 (default) uses every core (the embedded queue leaves one for the API when there are two or more).'),
  CAIRN_JOB_ATTEMPTS: int(1, 20).default(3).describe('Attempts of a job that fails for a transient reason (bad data fails at once). Default 3.'),
  CAIRN_CHECKPOINT_SECONDS: num(0.1, 3600).default(10).describe('How often a running selection saves its state, so another worker can resume it. Default 10.'),
  CAIRN_STALLED_SECONDS: num(1, 3600).default(30).describe('A job whose worker has not renewed its lock for this long is given to another worker. Default 30.'),
  CAIRN_RETENTION_HOURS: num(0, 1e6).default(720).describe('Datasets and finished jobs older than this are deleted; 0 keeps them until DELETE. Default 720 (30 days).'),
  CAIRN_SHUTDOWN_GRACE_SECONDS: num(0, 3600).default(20).describe('On SIGTERM, how long running jobs may take to finish before they are stopped and left to resume. Default 20.'),
  LOG_LEVEL: z.enum(['fatal', 'error', 'warn', 'info', 'debug', 'trace', 'silent']).default('info').describe('pino log level. Default info.'),
});

export type Config = z.infer<typeof configSchema>;

/** Thrown for a bad setting: names the variable and its allowed range; the process stops with it. */
export class ConfigError extends Error {
  constructor(readonly problems: Array<{ name: string; message: string }>) {
    super(`Invalid configuration:\n${problems.map((p) => `  ${p.name}: ${p.message}`).join('\n')}`);
    this.name = 'ConfigError';
  }
}

export function loadConfig(env: Record<string, string | undefined> = process.env): Config {
  const picked: Record<string, string> = {};
  for (const name of Object.keys(configSchema.shape)) {
    const v = env[name]?.trim();
    if (v !== undefined && v !== '') picked[name] = v;
  }
  const parsed = configSchema.safeParse(picked);
  if (!parsed.success) {
    throw new ConfigError(
      parsed.error.issues.map((i) => {
        const name = String(i.path[0]);
        // Secrets (a Redis password, key hashes) never go to stderr or logs.
        const shown = SECRET_SETTINGS.has(name) ? '(value hidden)' : `(got ${JSON.stringify(picked[name])})`;
        return { name, message: `${i.message} ${shown}` };
      }),
    );
  }
  parseApiKeys(parsed.data.CAIRN_API_KEYS);
  return parsed.data;
}

const SECRET_SETTINGS = new Set(['REDIS_URL', 'CAIRN_API_KEYS']);

export interface ApiKeyEntry {
  tenant: string;
  /** Hex SHA-256 of the key. */
  hash: string;
}

/** Tenant names become folder names. */
export const TENANT_NAME = /^[a-z0-9][a-z0-9_-]{0,63}$/;

export function parseApiKeys(text: string): ApiKeyEntry[] {
  const entries: ApiKeyEntry[] = [];
  for (const part of text.split(',').map((p) => p.trim()).filter(Boolean)) {
    const [tenant, hash, extra] = part.split(':');
    if (extra !== undefined || !TENANT_NAME.test(tenant ?? '') || !/^[0-9a-f]{64}$/.test(hash ?? '')) {
      throw new ConfigError([{ name: 'CAIRN_API_KEYS', message: `each entry must be 'tenant:sha256-hex' with tenant matching ${TENANT_NAME} (entry ${entries.length + 1} is not)` }]);
    }
    if (entries.some((e) => e.hash === hash)) {
      throw new ConfigError([{ name: 'CAIRN_API_KEYS', message: `one key hash is listed twice (tenants ${entries.find((e) => e.hash === hash)!.tenant} and ${tenant}); a key belongs to one tenant` }]);
    }
    entries.push({ tenant, hash });
  }
  return entries;
}

/** CAIRN_MEMORY_BUDGET_MB in bytes, with 0 resolved to its automatic value. */
export function memoryBudgetBytes(config: Pick<Config, 'CAIRN_MEMORY_BUDGET_MB' | 'CAIRN_WORKER_CONCURRENCY'>): number {
  const mb = config.CAIRN_MEMORY_BUDGET_MB;
  return mb > 0 ? mb * 1024 ** 2 : Math.floor(totalmem() / 2 / config.CAIRN_WORKER_CONCURRENCY);
}
