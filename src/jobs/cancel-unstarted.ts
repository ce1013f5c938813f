import { CairnError } from '../errors.js';
import { errorOf } from './task-runner.js';
import type { TaskStore } from './task-store.js';
import { cancelledCode, type TaskRef, type TaskState } from './task.js';

/**
 * Records the cancellation of a task that a queue removed before any runner took it: no runner
 * will ever write its state, so the queue writes the final one itself. Returns the state written,
 * or null when the task folder is gone (deleted meanwhile).
 */
export async function cancelUnstarted(store: TaskStore, ref: TaskRef): Promise<TaskState | null> {
  try {
    const state = await store.readState(ref);
    const now = new Date().toISOString();
    const next: TaskState = { ...state, status: 'cancelled', error: errorOf(new CairnError(cancelledCode(ref.kind))), finishedAt: now, updatedAt: now };
    await store.writeState(ref, next);
    return next;
  } catch {
    return null;
  }
}
