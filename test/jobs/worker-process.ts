import pino from 'pino';
import { loadConfig } from '../../src/config.js';
import { startBullWorker } from '../../src/jobs/bullmq-worker.js';

/**
 * A BullMQ worker as its own process, configured like `cairn worker` from the environment, for tests
 * that kill one (test/jobs/worker-kill.test.ts). Prints "ready" once started; SIGTERM closes it.
 */
const config = loadConfig();
const log = pino({ level: config.LOG_LEVEL });
if (!config.REDIS_URL) throw new Error('REDIS_URL is required');
const worker = await startBullWorker({
  redisUrl: config.REDIS_URL,
  prefix: config.CAIRN_QUEUE_PREFIX,
  dataDir: config.CAIRN_DATA_DIR,
  concurrency: config.CAIRN_WORKER_CONCURRENCY,
  maxAttempts: config.CAIRN_JOB_ATTEMPTS,
  computeThreads: config.CAIRN_COMPUTE_THREADS,
  checkpointEveryMs: config.CAIRN_CHECKPOINT_SECONDS * 1000,
  stalledMs: config.CAIRN_STALLED_SECONDS * 1000,
  log,
});
process.once('SIGTERM', () => {
  void worker.close(0).then(
    () => process.exit(0),
    () => process.exit(1),
  );
});
process.stdout.write('ready\n');
