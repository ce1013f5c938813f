import { randomBytes } from 'node:crypto';
import { mkdir, readdir, readFile, rename, rm, stat, unlink, writeFile } from 'node:fs/promises';
import { join } from 'node:path';
import { pathExists, tempNameFor, writeFileAtomic } from '../data/file-ops.js';
import { CairnError } from '../errors.js';
import { TASK_KINDS, type TaskKind, type TaskRef, type TaskSpec, type TaskState } from './task.js';

/**
 * Where everything lives under the data folder:
 *
 *   uploads/                              uploads being received (deleted once their task exists)
 *   tenants/<tenant>/store/<datasetId>/   stored datasets (matrix.f32, items.jsonl, thumbs/, meta.json)
 *   tenants/<tenant>/dataset/<id>/        ingestion task: spec.json, state.json, source (the upload, until ingested)
 *   tenants/<tenant>/embeddings/<dataset>/ cached embeddings per model (see EmbeddingCache)
 *   tenants/<tenant>/embed/<id>/          embedding shard task: spec.json, state.json
 *   tenants/<tenant>/job/<id>/            selection task: spec.json, state.json, checkpoint.json,
 *                                         result.json, summary.json, projection.json, assignments.bin,
 *                                         passes.json, cancel (a marker), and while a full pass is
 *                                         shared with other workers passes/<pass>/ (see pass-shards.ts)
 *   tenants/<tenant>/pass/<id>/           pass shard task: spec.json, state.json (deleted with its pass)
 *   idempotency/<tenant>/<hash>.json      first answers to Idempotency-Key requests
 *
 * Each file has one writer: spec.json and `cancel` the API, state.json and the outputs the task's
 * runner. Every write goes to a temporary name and is renamed into place, so a reader sees a
 * whole file or the previous one, never half of one.
 */
export class TaskStore {
  constructor(readonly dataDir: string) {}

  storeDir(tenant: string): string {
    return join(this.dataDir, 'tenants', tenant, 'store');
  }

  /** Cached embeddings of one dataset (see EmbeddingCache). */
  embeddingsDir(tenant: string, datasetId: string): string {
    return join(this.dataDir, 'tenants', tenant, 'embeddings', datasetId);
  }

  uploadsDir(): string {
    return join(this.dataDir, 'uploads');
  }

  dir(ref: TaskRef): string {
    return join(this.dataDir, 'tenants', ref.tenant, ref.kind, ref.id);
  }

  file(ref: TaskRef, name: TaskFile): string {
    return join(this.dir(ref), name);
  }

  /** Creates the task folder with its spec and a queued state; an existing task is an error. */
  async create(ref: TaskRef, spec: TaskSpec, files: { source?: string } = {}): Promise<TaskState> {
    const dir = this.dir(ref);
    await mkdir(join(this.dataDir, 'tenants', ref.tenant, ref.kind), { recursive: true });
    const tmp = tempNameFor(dir);
    await mkdir(tmp);
    try {
      const now = new Date().toISOString();
      const state: TaskState = { status: 'queued', attempt: 0, progress: { phase: 'queued', fraction: 0 }, error: null, startedAt: null, finishedAt: null, updatedAt: now };
      await writeFile(join(tmp, 'spec.json'), JSON.stringify(spec, null, 2) + '\n');
      await writeFile(join(tmp, 'state.json'), JSON.stringify(state) + '\n');
      if (files.source) await rename(files.source, join(tmp, 'source'));
      await rename(tmp, dir);
      return state;
    } catch (err) {
      await rm(tmp, { recursive: true, force: true });
      throw err;
    }
  }

  async exists(ref: TaskRef): Promise<boolean> {
    return pathExists(join(this.dir(ref), 'spec.json'));
  }

  async readSpec<S extends TaskSpec = TaskSpec>(ref: TaskRef): Promise<S> {
    return JSON.parse(await this.readText(ref, 'spec.json')) as S;
  }

  async readState(ref: TaskRef): Promise<TaskState> {
    return JSON.parse(await this.readText(ref, 'state.json')) as TaskState;
  }

  async writeState(ref: TaskRef, state: TaskState): Promise<void> {
    await this.writeAtomic(ref, 'state.json', JSON.stringify(state) + '\n');
  }

  /** Writes a file of the task folder under a temporary name, then renames it into place. */
  async writeAtomic(ref: TaskRef, name: TaskFile, data: string | Uint8Array): Promise<void> {
    await writeFileAtomic(this.file(ref, name), data);
  }

  async readText(ref: TaskRef, name: TaskFile): Promise<string> {
    try {
      return await readFile(this.file(ref, name), 'utf8');
    } catch (err) {
      if ((err as NodeJS.ErrnoException).code === 'ENOENT') throw notFound(ref);
      throw err;
    }
  }

  async readOptional(ref: TaskRef, name: TaskFile): Promise<string | null> {
    try {
      return await readFile(this.file(ref, name), 'utf8');
    } catch (err) {
      if ((err as NodeJS.ErrnoException).code === 'ENOENT') return null;
      throw err;
    }
  }

  async removeFile(ref: TaskRef, name: TaskFile): Promise<void> {
    await unlink(this.file(ref, name)).catch(() => undefined);
  }

  async requestCancel(ref: TaskRef): Promise<void> {
    await writeFile(this.file(ref, 'cancel'), new Date().toISOString());
  }

  async cancelRequested(ref: TaskRef): Promise<boolean> {
    return pathExists(this.file(ref, 'cancel'));
  }

  /** Ids of a tenant's tasks of one kind (complete folders only). */
  async list(tenant: string, kind: TaskKind): Promise<string[]> {
    try {
      const entries = await readdir(join(this.dataDir, 'tenants', tenant, kind), { withFileTypes: true });
      return entries.filter((e) => e.isDirectory() && !e.name.includes('.tmp-') && !e.name.includes('.trash-')).map((e) => e.name);
    } catch (err) {
      if ((err as NodeJS.ErrnoException).code === 'ENOENT') return [];
      throw err;
    }
  }

  async tenants(): Promise<string[]> {
    try {
      return (await readdir(join(this.dataDir, 'tenants'), { withFileTypes: true })).filter((e) => e.isDirectory()).map((e) => e.name);
    } catch {
      return [];
    }
  }

  /** Removes the task folder: renamed away first, so no reader sees it half deleted. */
  async remove(ref: TaskRef): Promise<void> {
    const trash = `${this.dir(ref)}.trash-${randomBytes(6).toString('hex')}`;
    try {
      await rename(this.dir(ref), trash);
    } catch (err) {
      if ((err as NodeJS.ErrnoException).code === 'ENOENT') throw notFound(ref);
      throw err;
    }
    await rm(trash, { recursive: true, force: true });
  }

  /**
   * Deletes what a crash can leave behind: half-created task folders, folders being deleted,
   * uploads never turned into tasks, and the dataset store's unfinished ingestions. Run at start-up
   * by the process that owns the data folder (the API), when no ingestion of its own is running.
   */
  async sweepLeftovers(olderThanMs = 0): Promise<number> {
    let removed = 0;
    const cutoff = Date.now() - olderThanMs;
    const sweep = async (dir: string, match: (name: string) => boolean): Promise<void> => {
      let names: string[];
      try {
        names = await readdir(dir);
      } catch {
        return;
      }
      for (const name of names.filter(match)) {
        const path = join(dir, name);
        const s = await stat(path).catch(() => null);
        if (s && s.mtimeMs <= cutoff) {
          await rm(path, { recursive: true, force: true });
          removed++;
        }
      }
    };
    await sweep(this.uploadsDir(), () => true);
    for (const tenant of await this.tenants()) {
      for (const kind of TASK_KINDS) await sweep(join(this.dataDir, 'tenants', tenant, kind), (n) => n.includes('.tmp-') || n.includes('.trash-'));
      await sweep(this.storeDir(tenant), (n) => n.startsWith('.tmp-') || n.startsWith('.trash-'));
    }
    return removed;
  }
}

export type TaskFile = 'spec.json' | 'state.json' | 'checkpoint.json' | 'result.json' | 'summary.json' | 'projection.json' | 'assignments.bin' | 'passes.json' | 'cancel' | 'source';

export function notFound(ref: TaskRef): CairnError {
  if (ref.kind === 'dataset') return new CairnError('DATASET_NOT_FOUND', undefined, { datasetId: ref.id });
  return new CairnError('JOB_NOT_FOUND', undefined, { jobId: ref.id });
}
