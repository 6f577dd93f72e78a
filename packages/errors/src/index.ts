export { errorCatalogue, TrueshiftError, isTrueshiftError } from './catalogue.js';
export type { ErrorCode, ErrorBody } from './catalogue.js';
