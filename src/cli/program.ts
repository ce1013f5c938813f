import { Command, InvalidArgumentError, Option } from 'commander';
import { selectOptionsSchema } from '../core/options.js';
import { DEFAULT_IMAGE_OPTIONS } from '../data/read-options.js';
import { runSelectCommand } from './select-command.js';

const shape = selectOptionsSchema.shape;
const describe = (key: keyof typeof shape): string => shape[key].description ?? '';

function integer(value: string): number {
  const n = Number(value);
  if (!Number.isInteger(n)) throw new InvalidArgumentError('must be an integer');
  return n;
}
function number(value: string): number {
  const n = Number(value);
  if (!Number.isFinite(n)) throw new InvalidArgumentError('must be a number');
  return n;
}

/** The `cairn` command line; `main.ts` runs it on process.argv. */
export function buildProgram(): Command {
  const program = new Command();
  program.name('cairn').description('Pick k representative items, with weights and coverage statistics, from a vector or image dataset.');

  program
    .command('select')
    .description('Select k representatives of FILE (.npy, .csv, .tsv, .jsonl, .parquet, or a .zip/.tar/.tar.gz of images) and print the result JSON.')
    .argument('<file>', 'dataset file')
    .requiredOption('--k <n>', describe('k'), integer)
    .option('--seed <s>', describe('seed'), integer)
    .addOption(new Option('--kernel <kind>', describe('kernel')).choices(['energy', 'gaussian']))
    .option('--space <space>', describe('space'))
    .addOption(new Option('--weights <mode>', describe('weights')).choices(['uniform', 'optimized']))
    .addOption(new Option('--optimizer <kind>', describe('optimizer')).choices(['adam', 'sgd']))
    .option('--iterations <n>', describe('maxIterations'), integer)
    .option('--time-budget <seconds>', describe('timeBudgetSeconds'), number)
    .option('--batch-size <n>', describe('batchSize'), integer)
    .option('--alpha <a>', describe('alpha'), number)
    .option('--radius <r>', describe('radius'), number)
    .option('--out <file>', 'write the result JSON to this file instead of stdout')
    .addOption(new Option('--format <format>', 'dataset format; default: detected from the file').choices(['npy', 'csv', 'tsv', 'jsonl', 'parquet', 'zip', 'tar']))
    .option('--id-field <name>', 'column/field holding item ids (CSV, JSON Lines, Parquet); default "id" when present')
    .option('--label-field <name>', 'column/field holding labels, used for coverage statistics only; default "label" when present')
    .option('--vector-field <name>', 'JSON Lines / Parquet field holding the vector; default "vector"')
    .addOption(new Option('--non-finite <policy>', 'rows with NaN/Infinity: fail (default) or drop and count').choices(['fail', 'drop']))
    .option('--image-size <px>', `image archives: side of the square images are resized to; default ${DEFAULT_IMAGE_OPTIONS.size}`, integer)
    .addOption(new Option('--image-color <mode>', `image archives: gray or rgb; default ${DEFAULT_IMAGE_OPTIONS.color}`).choices(['gray', 'rgb']))
    .option(
      '--memory-budget <MiB>',
      'memory for copies of the dataset; a larger dataset is read from its (temporary) file in blocks instead of held in memory. Default: half of the physical memory',
      integer,
    )
    .addOption(new Option('--backend <kind>', 'compute backend').choices(['onnx', 'reference']).default('onnx'))
    .option('--quiet', 'no progress bar on stderr')
    .action(async (file: string, flags: Record<string, unknown>) => {
      await runSelectCommand({
        file,
        format: flags.format as never,
        backend: flags.backend as 'onnx' | 'reference',
        out: flags.out as string | undefined,
        memoryBudgetBytes: flags.memoryBudget === undefined ? undefined : (flags.memoryBudget as number) * 1024 ** 2,
        progress: !flags.quiet,
        read: {
          idField: flags.idField as string | undefined,
          labelField: flags.labelField as string | undefined,
          vectorField: flags.vectorField as string | undefined,
          nonFinite: flags.nonFinite as 'fail' | 'drop' | undefined,
          image: { size: flags.imageSize as number | undefined, color: flags.imageColor as 'gray' | 'rgb' | undefined },
        },
        options: {
          k: flags.k as number,
          seed: flags.seed as number | undefined,
          kernel: flags.kernel as 'energy' | 'gaussian' | undefined,
          space: flags.space as string | undefined,
          weights: flags.weights as 'uniform' | 'optimized' | undefined,
          optimizer: flags.optimizer as 'adam' | 'sgd' | undefined,
          maxIterations: flags.iterations as number | undefined,
          timeBudgetSeconds: flags.timeBudget as number | undefined,
          batchSize: flags.batchSize as number | undefined,
          alpha: flags.alpha as number | undefined,
          radius: flags.radius as number | undefined,
        },
      });
    });

  program
    .command('serve')
    .description('Run the HTTP API (configured by CAIRN_* environment variables; see README). Without REDIS_URL it also runs the jobs, in worker threads.')
    .action(async () => {
      const { runServe } = await import('./service-commands.js');
      await runServe();
    });

  program
    .command('worker')
    .description('Run queued ingestion and selection jobs from Redis (REDIS_URL); start as many as you like, on any machine sharing CAIRN_DATA_DIR.')
    .action(async () => {
      const { runWorker } = await import('./service-commands.js');
      await runWorker();
    });

  program
    .command('keygen')
    .description('Print a new API key for a tenant and the CAIRN_API_KEYS entry (its hash) for the server.')
    .requiredOption('--tenant <name>', 'tenant the key belongs to: lowercase letters, digits, _ and -')
    .action(async (flags: { tenant: string }) => {
      const { runKeygen } = await import('./service-commands.js');
      runKeygen(flags.tenant);
    });

  return program;
}
