import type { FastifyReply, FastifyRequest } from 'fastify';
import type { JobQueue } from '../jobs/queue.js';
import { isFinal, type TaskRef, type TaskStatus } from '../jobs/task.js';

/** Comment lines keep idle connections (and the proxies between) from timing out. */
const HEARTBEAT_MS = 15_000;
/** The task's files are re-read this often too, in case a queue event was missed. */
const POLL_MS = 2_000;

/**
 * Server-Sent Events of one task: an `state` event with the resource at once and at every change
 * the queue reports, then an `end` event once the task has finished, after which the stream closes.
 */
export class EventStreams {
  private readonly open = new Set<() => void>();

  constructor(private readonly queue: JobQueue) {}

  async stream<T extends { status: TaskStatus; progress: unknown }>(req: FastifyRequest, reply: FastifyReply, ref: TaskRef, view: () => Promise<T>): Promise<void> {
    const first = await view();
    reply.hijack();
    const res = reply.raw;
    res.writeHead(200, {
      'content-type': 'text/event-stream; charset=utf-8',
      'cache-control': 'no-cache, no-transform',
      connection: 'keep-alive',
      'x-accel-buffering': 'no',
    });
    let closed = false;
    let last = '';
    let seq = 0;
    const send = (event: string, data: unknown): void => {
      if (closed) return;
      res.write(`id: ${++seq}\nevent: ${event}\ndata: ${JSON.stringify(data)}\n\n`);
    };
    const close = (): void => {
      if (closed) return;
      closed = true;
      clearInterval(heartbeat);
      clearInterval(poll);
      unsubscribe();
      this.open.delete(close);
      res.end();
    };
    const publish = (resource: T): void => {
      const text = JSON.stringify(resource);
      if (text === last) return;
      last = text;
      send('state', resource);
      if (isFinal(resource.status)) {
        send('end', { status: resource.status });
        close();
      }
    };
    let refreshing = false;
    let again = false;
    const refresh = (): void => {
      if (closed) return;
      if (refreshing) {
        again = true; // a change arrived while reading: read once more afterwards
        return;
      }
      refreshing = true;
      view()
        .then(publish, () => close())
        .finally(() => {
          refreshing = false;
          if (again) {
            again = false;
            refresh();
          }
        });
    };
    const unsubscribe = this.queue.subscribe((e) => {
      if (e.ref.kind === ref.kind && e.ref.tenant === ref.tenant && e.ref.id === ref.id) refresh();
    });
    const heartbeat = setInterval(() => !closed && res.write(': keep-alive\n\n'), HEARTBEAT_MS);
    const poll = setInterval(refresh, POLL_MS);
    this.open.add(close);
    req.raw.on('close', close);
    publish(first);
  }

  /** Ends every open stream (the server is closing; clients reconnect elsewhere). */
  closeAll(): void {
    for (const close of [...this.open]) close();
  }
}
