import { type ErrorBody, type ErrorCode, TrueshiftError } from '@trueshift/errors';
import { parseHttpSamples } from '@trueshift/formats';
import type { QuarantineInput, Store } from '@trueshift/store';
import type {
  FastifyError,
  FastifyInstance,
  FastifyReply,
  FastifyRequest,
  onRequestAsyncHookHandler,
} from 'fastify';
import { createValidRanges } from './valid-ranges.js';

export const SAMPLES_ROUTE = '/api/v1/samples';

export interface HttpIngestOptions {
  /** The most samples one request may carry. */
  maxSamples: number;
  maxFutureMs: number;
  /** The largest body accepted, in bytes; 512 bytes per allowed sample by default. */
  maxBodyBytes?: number;
  /** How old the in-memory copy of the tags' valid ranges may get; 60 s by default. */
  rangeRefreshMs?: number;
}

export interface HttpIngestDeps {
  store: Store;
  clock: () => number;
  options: HttpIngestOptions;
  /**
   * Runs before the body is read: the place for authentication, which answers (401, 403) and so
   * ends the request before anything is parsed or stored.
   */
  authenticate?: onRequestAsyncHookHandler;
}

export interface HttpRejection {
  /** The element's position in the body; absent when the body as a whole was refused. */
  index?: number;
  reason: string;
  code: ErrorCode;
}

/** The answer to a batch with at least one usable sample. */
export interface HttpIngestResult {
  stored: number;
  duplicates: number;
  /** Samples whose (tag, time) already holds another value; the store kept that one. */
  conflicts: number;
  /** Rejections written to the quarantine; each is listed in `rejected`. */
  quarantined: number;
  rejected: HttpRejection[];
}

// parseHttpSamples puts "At index N: " before each element's reason; the index is read back from it.
const INDEX_PREFIX = /^At index (\d+): /;

function toRejection(entry: QuarantineInput): HttpRejection {
  const match = INDEX_PREFIX.exec(entry.reason);
  return match === null
    ? { reason: entry.reason, code: entry.code }
    : { index: Number(match[1]), reason: entry.reason, code: entry.code };
}

function sendError(reply: FastifyReply, error: TrueshiftError, extra?: object): FastifyReply {
  const body: ErrorBody & object = { ...error.toBody(), ...extra };
  return reply.code(error.status).send(body);
}

/** Fastify's own refusals (body limit, JSON syntax, media type) as bodies from the catalogue. */
function refusal(error: FastifyError, bodyLimit: number): TrueshiftError {
  switch (error.code) {
    case 'FST_ERR_CTP_BODY_TOO_LARGE':
      return new TrueshiftError(
        'PAYLOAD_TOO_LARGE',
        `The body is larger than ${bodyLimit} bytes; send the samples in smaller batches.`,
      );
    case 'FST_ERR_CTP_INVALID_JSON_BODY':
      return new TrueshiftError('PAYLOAD_NOT_JSON', 'The body cannot be read as JSON.');
    case 'FST_ERR_CTP_EMPTY_JSON_BODY':
      return new TrueshiftError('PAYLOAD_NOT_JSON', 'The body is empty.');
    case 'FST_ERR_CTP_INVALID_MEDIA_TYPE':
      return new TrueshiftError('CONTENT_TYPE_UNSUPPORTED');
    default:
      break;
  }
  const status = error.statusCode ?? 500;
  return status >= 400 && status < 500
    ? new TrueshiftError('INVALID_ARGUMENT', error.message)
    : new TrueshiftError('INTERNAL');
}

/**
 * POST /api/v1/samples: a JSON array of { tag, time | t, value, quality? }, judged by
 * parseHttpSamples like every other source. Good samples are stored and bad ones quarantined, and the
 * answer lists each rejection; when nothing in the body is usable the answer is an error body.
 * The answer is sent only after the store committed, so a 200 means stored.
 */
export function registerHttpIngest(app: FastifyInstance, deps: HttpIngestDeps): void {
  const { store, clock, options } = deps;
  const bodyLimit = options.maxBodyBytes ?? options.maxSamples * 512;
  const ranges = createValidRanges(store, clock, options.rangeRefreshMs ?? 60_000);

  app.route({
    method: 'POST',
    url: SAMPLES_ROUTE,
    bodyLimit,
    ...(deps.authenticate !== undefined && { onRequest: deps.authenticate }),
    errorHandler(error: FastifyError, request: FastifyRequest, reply: FastifyReply) {
      const refused = refusal(error, bodyLimit);
      if (refused.status >= 500) request.log.error({ err: error }, 'sample batch failed');
      void sendError(reply, refused);
    },
    async handler(request, reply) {
      const type = (request.headers['content-type'] ?? '').split(';')[0]?.trim().toLowerCase();
      if (type !== 'application/json') {
        return sendError(reply, new TrueshiftError('CONTENT_TYPE_UNSUPPORTED'));
      }
      const now = clock();
      try {
        await ranges.refresh();
      } catch (error) {
        request.log.warn({ err: error }, 'cannot reload the tags; keeping the valid ranges known');
      }
      const parsed = parseHttpSamples(request.body, {
        receivedAt: now,
        now,
        maxFutureMs: options.maxFutureMs,
        maxSamples: options.maxSamples,
        validRange: ranges.lookup,
      });
      let written = { inserted: 0, duplicates: 0, conflicts: 0 };
      try {
        if (parsed.samples.length > 0) written = await store.writeSamples(parsed.samples);
        if (parsed.rejected.length > 0) await store.quarantine(parsed.rejected);
      } catch (error) {
        request.log.error({ err: error }, 'the store did not take the sample batch');
        const why = error instanceof Error ? error.message : String(error);
        return sendError(reply, new TrueshiftError('STORE_UNAVAILABLE', why));
      }
      const rejected = parsed.rejected.map(toRejection);
      const first = rejected[0];
      if (parsed.samples.length === 0 && first !== undefined) {
        if (rejected.length === 1 && first.index === undefined) {
          // The body as a whole was refused: not an array, empty, or too many samples.
          return sendError(reply, new TrueshiftError(first.code, first.reason));
        }
        const detail = `All ${rejected.length} samples were rejected; see "rejected" for each reason.`;
        return sendError(reply, new TrueshiftError('NO_USABLE_SAMPLES', detail), { rejected });
      }
      const result: HttpIngestResult = {
        stored: written.inserted,
        duplicates: written.duplicates,
        conflicts: written.conflicts,
        quarantined: parsed.rejected.length,
        rejected,
      };
      return reply.code(200).send(result);
    },
  });
}
