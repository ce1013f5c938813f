import { Counter, Gauge, Histogram, Registry, collectDefaultMetrics } from 'prom-client';
import type { JobQueue } from '../jobs/queue.js';

/** The API's Prometheus metrics: queue depth (read at scrape time), task durations, ingest bytes, request latency. */
export class Metrics {
  readonly registry = new Registry();
  readonly taskSeconds: Histogram<'kind' | 'status'>;
  readonly uploadBytes: Counter;
  readonly httpSeconds: Histogram<'method' | 'route' | 'status'>;

  constructor(queue: JobQueue) {
    collectDefaultMetrics({ register: this.registry, prefix: 'cairn_' });
    new Gauge({
      name: 'cairn_queue_tasks',
      help: 'Tasks in the queue by state (waiting includes retries in backoff).',
      labelNames: ['state'],
      registers: [this.registry],
      async collect() {
        const c = await queue.counts().catch(() => null);
        if (!c) return;
        this.set({ state: 'waiting' }, c.waiting);
        this.set({ state: 'active' }, c.active);
      },
    });
    this.taskSeconds = new Histogram({
      name: 'cairn_task_duration_seconds',
      help: 'Wall time of finished tasks, from first start to end, by kind (dataset: ingestion; job: selection) and final status.',
      labelNames: ['kind', 'status'],
      buckets: [0.5, 1, 2, 5, 10, 30, 60, 120, 300, 600, 1800, 3600],
      registers: [this.registry],
    });
    this.uploadBytes = new Counter({ name: 'cairn_upload_bytes_total', help: 'Bytes of dataset uploads received.', registers: [this.registry] });
    this.httpSeconds = new Histogram({
      name: 'cairn_http_request_duration_seconds',
      help: 'API request latency by route.',
      labelNames: ['method', 'route', 'status'],
      buckets: [0.001, 0.0025, 0.005, 0.01, 0.02, 0.05, 0.1, 0.25, 1, 5],
      registers: [this.registry],
    });
  }
}
