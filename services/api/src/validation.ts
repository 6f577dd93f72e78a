import { Ajv } from 'ajv';
import type { ValidateFunction } from 'ajv';
import formats from 'ajv-formats';
import type { FastifySchemaCompiler } from 'fastify';

/*
 * Two validators. Query strings and path parameters arrive as text, so numbers in them are
 * converted; bodies are JSON and must already carry the right types, so "5" for a number is an
 * error there. Neither removes unknown fields (Fastify's default would drop them silently), so
 * additionalProperties: false really rejects.
 */
function makeAjv(coerce: boolean): Ajv {
  const ajv = new Ajv({
    coerceTypes: coerce ? 'array' : false,
    useDefaults: true,
    removeAdditional: false,
    // One error is enough to answer with, and collecting all of them costs time on hostile input.
    allErrors: false,
    strict: false,
  });
  formats.default(ajv);
  return ajv;
}

export function validatorCompiler(): FastifySchemaCompiler<unknown> {
  const body = makeAjv(false);
  const text = makeAjv(true);
  return ({ schema, httpPart }): ValidateFunction =>
    (httpPart === 'body' ? body : text).compile(schema as object);
}
