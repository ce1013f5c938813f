import pino from 'pino';
import { hashApiKey, newApiKey } from '../api/auth.js';
import { startServer } from '../api/server.js';
import { ConfigError, loadConfig, TENANT_NAME, type Config } from '../config.js';
import { bullWorkerOptions, startBullWorker } from '../jobs/bullmq-worker.js';

/** Reads the configuration once; a bad setting stops the process naming the variable and its range. */
function configOrExit(): Config {
  try {
    return loadConfig();
  } catch (err) {
    if (err instanceof ConfigError) {
      process.stderr.write(`${err.message}\n`);
      process.exit(2);
    }
    throw err;
  }
}

/** Runs `stop` once on SIGTERM / SIGINT, then exits; a second signal exits at once. */
function onSignals(stop: () => Promise<void>, log: pino.Logger): void {
  let stopping = false;
  const handler = (signal: NodeJS.Signals) => {
    if (stopping) process.exit(1);
    stopping = true;
    log.info({ signal }, 'shutting down');
    stop().then(
      () => process.exit(0),
      (err: unknown) => {
        log.error({ err }, 'shutdown failed');
        process.exit(1);
      },
    );
  };
  process.on('SIGTERM', handler);
  process.on('SIGINT', handler);
}

export async function runServe(): Promise<void> {
  const config = configOrExit();
  const log = pino({ level: config.LOG_LEVEL });
  const server = await startServer(config, log);
  onSignals(() => server.close(), log);
}

export async function runWorker(): Promise<void> {
  const config = configOrExit();
  const log = pino({ level: config.LOG_LEVEL });
  if (!config.REDIS_URL) {
    process.stderr.write('cairn worker needs REDIS_URL (without it, `cairn serve` runs jobs itself).\n');
    process.exit(2);
  }
  const worker = await startBullWorker(bullWorkerOptions(config, log));

  log.info({ concurrency: config.CAIRN_WORKER_CONCURRENCY }, 'cairn worker started');
  onSignals(() => worker.close(config.CAIRN_SHUTDOWN_GRACE_SECONDS * 1000), log);
}

/** Prints a new API key (give it to the client) and its configuration entry (give it to the server). */
export function runKeygen(tenant: string, out: NodeJS.WritableStream = process.stdout): void {
  if (!TENANT_NAME.test(tenant)) throw new Error(`tenant must match ${TENANT_NAME}`);
  const key = newApiKey();
  out.write(`key:    ${key}\nconfig: ${tenant}:${hashApiKey(key)}\n`);
  out.write('Append the config entry to CAIRN_API_KEYS (comma-separated); the key itself is not stored anywhere.\n');
}
