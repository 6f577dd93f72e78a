/**
 * The one catalogue of error codes. Every error trueshift reports, on the command line, over HTTP
 * or in a log, carries one of these codes, so scripts and other plant systems can rely on them.
 */
export const errorCatalogue = {
  INVALID_ARGUMENT: { status: 400, message: 'An argument is missing or not valid.' },
  CSV_BAD_HEADER: { status: 400, message: 'The CSV file has no usable header row.' },
  CSV_BAD_ROW: { status: 400, message: 'A row of the CSV file cannot be read.' },
  CSV_EMPTY: { status: 400, message: 'The CSV file holds no samples.' },
  PAYLOAD_TOO_LARGE: { status: 413, message: 'The payload is larger than the allowed limit.' },
  PAYLOAD_NOT_UTF8: { status: 400, message: 'The payload is not valid UTF-8 text.' },
  PAYLOAD_NOT_JSON: { status: 400, message: 'The payload is not valid JSON.' },
  PAYLOAD_SHAPE: { status: 400, message: 'The payload does not have the expected shape.' },
  TAG_NAME_INVALID: { status: 400, message: 'The tag name is not valid.' },
  VALUE_NOT_NUMBER: { status: 400, message: 'The sample value is missing or not a number.' },
  VALUE_NOT_FINITE: { status: 400, message: 'The sample value is not a finite number.' },
  VALUE_OUT_OF_RANGE: {
    status: 422,
    message: "The sample value lies outside the tag's valid range.",
  },
  TIME_MISSING: { status: 400, message: 'The sample has no time.' },
  TIME_UNREADABLE: { status: 400, message: 'The sample time cannot be read.' },
  TIME_IN_FUTURE: { status: 400, message: 'The sample time lies too far in the future.' },
  QUALITY_INVALID: { status: 400, message: 'The sample quality is not a valid quality code.' },
  SPARKPLUG_DECODE: {
    status: 400,
    message: 'The Sparkplug B message cannot be decoded.',
  },
  SPARKPLUG_INVALID: {
    status: 400,
    message: 'The Sparkplug B message breaks the Sparkplug specification.',
  },
  SPARKPLUG_UNKNOWN_ALIAS: {
    status: 400,
    message: "The Sparkplug metric was not announced in the edge node's or device's BIRTH.",
  },
  SPARKPLUG_NO_BIRTH: {
    status: 409,
    message: 'Sparkplug DATA arrived without a current BIRTH, so its metrics are unknown.',
  },
  SPARKPLUG_VALUE_RANGE: {
    status: 400,
    message: 'A 64-bit integer in the Sparkplug message lies beyond 2^53, past exact numbers.',
  },
  CHANGE_NOT_IN_DATA: {
    status: 400,
    message: 'The moment of the change does not fall inside the data.',
  },
  NOT_ENOUGH_HISTORY: {
    status: 422,
    message: 'There is not enough in-control history to reach the chosen risk level.',
  },
  FILE_NOT_FOUND: { status: 404, message: 'The file does not exist or cannot be read.' },
  SAMPLE_CONFLICT: {
    status: 409,
    message: 'A different value is already stored for this tag and time; the stored value is kept.',
  },
  MARK_NOT_FOUND: { status: 404, message: 'There is no mark with this id.' },
  MARK_WITHDRAWN: { status: 409, message: 'The mark has been withdrawn and can no longer change.' },
  ALERT_NOT_FOUND: { status: 404, message: 'There is no alert with this id.' },
  ALERT_CLEARED: { status: 409, message: 'The alert has been cleared and can no longer change.' },
  NO_USABLE_SAMPLES: {
    status: 400,
    message: 'Nothing in the request could be stored: every sample in it was rejected.',
  },
  CONTENT_TYPE_UNSUPPORTED: {
    status: 415,
    message: 'The request body must be JSON, sent as Content-Type: application/json.',
  },
  STORE_UNAVAILABLE: {
    status: 503,
    message: 'The store could not take the samples; nothing was acknowledged, so send them again.',
  },
  REQUEST_INVALID: {
    status: 400,
    message: 'The request does not match what this route accepts.',
  },
  UNAUTHORIZED: {
    status: 401,
    message: 'A valid token is needed: send it as Authorization: Bearer <token>.',
  },
  FORBIDDEN: { status: 403, message: 'The token does not carry the scope this route needs.' },
  NOT_FOUND: { status: 404, message: 'There is no such route or resource.' },
  TAG_NOT_FOUND: { status: 404, message: 'There is no tag with this name.' },
  TOKEN_NOT_FOUND: { status: 404, message: 'There is no token with this id.' },
  EVIDENCE_NOT_FOUND: {
    status: 404,
    message: 'There is no evidence for this mark and tag yet.',
  },
  RATE_LIMITED: {
    status: 429,
    message: 'Too many write requests; wait before sending more.',
  },
  LEASE_LOST: {
    status: 409,
    message:
      'This instance no longer holds the lease on the shard; another instance analyses it now.',
  },
  INSTANCE_NAME_TAKEN: {
    status: 409,
    message: 'Another running process uses this instance name; give each instance its own name.',
  },
  STORE_SHARDS_MISMATCH: {
    status: 500,
    message: 'The database was set up with another number of shards than the configuration gives.',
  },
  CONFIG_INVALID: { status: 500, message: 'The configuration is not valid.' },
  INTERNAL: { status: 500, message: 'An unexpected internal error occurred.' },
} as const satisfies Record<string, { status: number; message: string }>;

export type ErrorCode = keyof typeof errorCatalogue;

export interface ErrorBody {
  code: ErrorCode;
  message: string;
  detail?: string;
}

export class TrueshiftError extends Error {
  readonly code: ErrorCode;
  readonly status: number;
  readonly detail: string | undefined;

  constructor(code: ErrorCode, detail?: string, options?: { cause?: unknown }) {
    const entry = errorCatalogue[code];
    super(detail === undefined ? entry.message : `${entry.message} ${detail}`, options);
    this.name = 'TrueshiftError';
    this.code = code;
    this.status = entry.status;
    this.detail = detail;
  }

  toBody(): ErrorBody {
    const body: ErrorBody = { code: this.code, message: errorCatalogue[this.code].message };
    if (this.detail !== undefined) body.detail = this.detail;
    return body;
  }
}

export function isTrueshiftError(value: unknown): value is TrueshiftError {
  return value instanceof TrueshiftError;
}
