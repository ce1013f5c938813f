import pino from 'pino';
import { loadConfig } from '../../src/config.js';
import { bullWorkerOptions, startBullWorker } from '../../src/jobs/bullmq-worker.js';

/**
 * A BullMQ worker as its own process, configured like `cairn worker` from the environment, for tests
 * that kill one (test/jobs/worker-kill.test.ts). Prints "ready" once started; SIGTERM closes it.
 */
const config = loadConfig();
const log = pino({ level: config.LOG_LEVEL });
const worker = await startBullWorker(bullWorkerOptions(config, log));
process.once('SIGTERM', () => {
  void worker.close(0).then(
    () => process.exit(0),
    () => process.exit(1),
  );
});
process.stdout.write('ready\n');
