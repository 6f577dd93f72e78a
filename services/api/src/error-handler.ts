import { errorCatalogue, isTrueshiftError, TrueshiftError } from '@trueshift/errors';
import type { ErrorCode } from '@trueshift/errors';
import type { FastifyError, FastifyReply, FastifyRequest } from 'fastify';

/** Fastify's own request errors, as catalogue codes. */
const FASTIFY_CODES: Readonly<Record<string, ErrorCode>> = {
  FST_ERR_CTP_BODY_TOO_LARGE: 'PAYLOAD_TOO_LARGE',
  FST_ERR_CTP_INVALID_MEDIA_TYPE: 'CONTENT_TYPE_UNSUPPORTED',
  FST_ERR_CTP_INVALID_CONTENT_LENGTH: 'REQUEST_INVALID',
  FST_ERR_CTP_EMPTY_JSON_BODY: 'PAYLOAD_NOT_JSON',
  FST_ERR_CTP_INVALID_JSON_BODY: 'PAYLOAD_NOT_JSON',
  FST_ERR_VALIDATION: 'REQUEST_INVALID',
};

function isFastifyError(error: unknown): error is FastifyError {
  return error instanceof Error && 'code' in error && typeof error.code === 'string';
}

/** Any error as the catalogue's error, so every failure has one of its codes and statuses. */
export function toTrueshiftError(error: unknown): TrueshiftError {
  if (isTrueshiftError(error)) return error;
  if (isFastifyError(error)) {
    const mapped = FASTIFY_CODES[error.code];
    if (mapped !== undefined) return new TrueshiftError(mapped, error.message, { cause: error });
    // A body that JSON.parse refused: the parser's SyntaxError carries status 400 and no code.
    if (error.validation !== undefined) {
      return new TrueshiftError('REQUEST_INVALID', error.message, { cause: error });
    }
  }
  if (error instanceof SyntaxError && 'statusCode' in error && error.statusCode === 400) {
    return new TrueshiftError('PAYLOAD_NOT_JSON', error.message, { cause: error });
  }
  const status =
    error instanceof Error && 'statusCode' in error && typeof error.statusCode === 'number'
      ? error.statusCode
      : 500;
  if (status === 413) return new TrueshiftError('PAYLOAD_TOO_LARGE', undefined, { cause: error });
  if (status === 415)
    return new TrueshiftError('CONTENT_TYPE_UNSUPPORTED', undefined, { cause: error });
  if (status >= 400 && status < 500 && error instanceof Error) {
    return new TrueshiftError('REQUEST_INVALID', error.message, { cause: error });
  }
  return new TrueshiftError('INTERNAL', undefined, { cause: error });
}

export function errorHandler(error: unknown, request: FastifyRequest, reply: FastifyReply): void {
  const known = toTrueshiftError(error);
  if (known.code === 'INTERNAL') {
    request.log.error({ err: error }, 'request failed');
  } else if (known.status >= 500) {
    request.log.warn({ err: error }, 'request refused');
  }
  void reply.code(errorCatalogue[known.code].status).send(known.toBody());
}

export function notFoundHandler(request: FastifyRequest, reply: FastifyReply): void {
  void reply
    .code(404)
    // The path only: a query string may carry something that should not be echoed into logs.
    .send(
      new TrueshiftError(
        'NOT_FOUND',
        `${request.method} ${request.url.split('?')[0] ?? ''}`,
      ).toBody(),
    );
}
