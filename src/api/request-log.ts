import { LogController, type FastifyReply, type FastifyRequest } from 'fastify';

/**
 * What the API logs per request: nothing when a request arrives, and one line when it has been
 * answered, at debug level (method, route pattern, status, ms; never the query string or a body,
 * which can carry item ids). fastify's default is two info lines per request that serialize the
 * request and the reply; on the status-poll path (scripts/bench/status-poll.mjs) they cost more
 * than the route. Failures stay where they were: a failed response is an error line here, 5xx
 * answers are logged by the app's error handler, stream and serializer failures by fastify.
 */
export class RequestLog extends LogController {
  override incomingRequest(): void {}

  override requestCompleted(error: Error | null | undefined, request: FastifyRequest, reply: FastifyReply): void {
    const fields = { method: request.method, route: request.routeOptions.url ?? null, status: reply.statusCode, ms: Math.round(reply.elapsedTime * 10) / 10 };
    if (error) reply.log.error({ ...fields, err: error }, 'request errored');
    else reply.log.debug(fields, 'request completed');
  }
}
