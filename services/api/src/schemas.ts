import { Type } from '@sinclair/typebox';
import type { TSchema } from '@sinclair/typebox';
import { TAG_NAME_MAX_LENGTH } from '@trueshift/formats';

/*
 * The shapes the API takes and gives, as JSON Schema through TypeBox: requests are validated
 * against them, responses serialised by them, and the OpenAPI document is built from them.
 * Request bodies refuse unknown fields so a misspelt setting is an error, not a silent default.
 */

const closed = { additionalProperties: false } as const;
const Nullable = <T extends TSchema>(schema: T) => Type.Union([schema, Type.Null()]);
const EpochMs = (description: string) => Type.Number({ description: `${description} (epoch ms)` });
const IdInt = Type.Integer({ minimum: 1 });

export const TagName = Type.String({ minLength: 1, maxLength: TAG_NAME_MAX_LENGTH });
export const Reason = Type.String({ minLength: 1, maxLength: 2000 });
export const Limit = (fallback: number, maximum: number) =>
  Type.Integer({ minimum: 1, maximum, default: fallback });

export const ErrorBody = Type.Object(
  {
    code: Type.String({ description: 'A code from the trueshift error catalogue' }),
    message: Type.String(),
    detail: Type.Optional(Type.String()),
  },
  { description: 'An error from the trueshift catalogue' },
);

const settingsFields = {
  kind: Type.Union([Type.Literal('batch'), Type.Literal('continuous')]),
  periodMs: Type.Integer({ minimum: 1 }),
  riskLevel: Type.Number({ exclusiveMinimum: 0, exclusiveMaximum: 1 }),
  nBefore: Type.Integer({ minimum: 1 }),
  nAfterCap: Type.Integer({ minimum: 1 }),
  smallestShift: Type.Number({ exclusiveMinimum: 0 }),
  inControlArl: Type.Number({ exclusiveMinimum: 1, maximum: 1e9 }),
  cusumK: Type.Number({ minimum: 0 }),
  ewmaLambda: Type.Number({ exclusiveMinimum: 0, maximum: 1 }),
  alertAfter: Type.Integer({ minimum: 1 }),
  staleAfterIntervals: Type.Number({ exclusiveMinimum: 0 }),
};

export const TagSettings = Type.Object({
  kind: Type.Optional(settingsFields.kind),
  periodMs: Type.Optional(settingsFields.periodMs),
  riskLevel: Type.Optional(settingsFields.riskLevel),
  nBefore: Type.Optional(settingsFields.nBefore),
  nAfterCap: Type.Optional(settingsFields.nAfterCap),
  smallestShift: Type.Optional(settingsFields.smallestShift),
  inControlArl: Type.Optional(settingsFields.inControlArl),
  cusumK: Type.Optional(settingsFields.cusumK),
  ewmaLambda: Type.Optional(settingsFields.ewmaLambda),
  alertAfter: Type.Optional(settingsFields.alertAfter),
  staleAfterIntervals: Type.Optional(settingsFields.staleAfterIntervals),
});

/** A setting given as null goes back to the service's default. */
export const TagSettingsPatch = Type.Object(
  {
    kind: Type.Optional(Nullable(settingsFields.kind)),
    periodMs: Type.Optional(Nullable(settingsFields.periodMs)),
    riskLevel: Type.Optional(Nullable(settingsFields.riskLevel)),
    nBefore: Type.Optional(Nullable(settingsFields.nBefore)),
    nAfterCap: Type.Optional(Nullable(settingsFields.nAfterCap)),
    smallestShift: Type.Optional(Nullable(settingsFields.smallestShift)),
    inControlArl: Type.Optional(Nullable(settingsFields.inControlArl)),
    cusumK: Type.Optional(Nullable(settingsFields.cusumK)),
    ewmaLambda: Type.Optional(Nullable(settingsFields.ewmaLambda)),
    alertAfter: Type.Optional(Nullable(settingsFields.alertAfter)),
    staleAfterIntervals: Type.Optional(Nullable(settingsFields.staleAfterIntervals)),
  },
  closed,
);

const Better = Type.Union([Type.Literal('higher'), Type.Literal('lower'), Type.Literal('either')]);
const Direction = Type.Union([Type.Literal('rise'), Type.Literal('fall'), Type.Literal('either')]);

export const Tag = Type.Object({
  name: Type.String(),
  unit: Nullable(Type.String()),
  description: Nullable(Type.String()),
  better: Better,
  validMin: Nullable(Type.Number()),
  validMax: Nullable(Type.Number()),
  settings: TagSettings,
  createdAt: EpochMs('When the tag was first seen'),
  updatedAt: EpochMs('Last change of its settings'),
});

export const TagPatch = Type.Object(
  {
    unit: Type.Optional(Nullable(Type.String({ maxLength: 100 }))),
    description: Type.Optional(Nullable(Type.String({ maxLength: 2000 }))),
    better: Type.Optional(Better),
    validMin: Type.Optional(Nullable(Type.Number())),
    validMax: Type.Optional(Nullable(Type.Number())),
    settings: Type.Optional(TagSettingsPatch),
  },
  { ...closed, minProperties: 1 },
);

const MarkFields = {
  tags: Type.Array(TagName, { minItems: 1, maxItems: 100, uniqueItems: true }),
  at: Type.Integer({ description: 'The moment the change went live (epoch ms)' }),
  label: Type.String({ minLength: 1, maxLength: 200 }),
  note: Type.String({ maxLength: 4000 }),
  direction: Direction,
  smallestShift: Nullable(Type.Number({ exclusiveMinimum: 0 })),
  nBefore: Nullable(Type.Integer({ minimum: 2 })),
  nAfterCap: Nullable(Type.Integer({ minimum: 1 })),
  riskLevel: Nullable(Type.Number({ exclusiveMinimum: 0, exclusiveMaximum: 1 })),
  settlingMs: Nullable(Type.Integer({ minimum: 0 })),
};

export const MarkCreate = Type.Object(
  {
    tags: MarkFields.tags,
    at: MarkFields.at,
    label: MarkFields.label,
    note: Type.Optional(MarkFields.note),
    direction: MarkFields.direction,
    smallestShift: Type.Optional(MarkFields.smallestShift),
    nBefore: Type.Optional(MarkFields.nBefore),
    nAfterCap: Type.Optional(MarkFields.nAfterCap),
    riskLevel: Type.Optional(MarkFields.riskLevel),
    settlingMs: Type.Optional(MarkFields.settlingMs),
  },
  closed,
);

export const MarkCorrect = Type.Object(
  {
    reason: Reason,
    tags: Type.Optional(MarkFields.tags),
    at: Type.Optional(MarkFields.at),
    label: Type.Optional(MarkFields.label),
    note: Type.Optional(MarkFields.note),
    direction: Type.Optional(MarkFields.direction),
    smallestShift: Type.Optional(MarkFields.smallestShift),
    nBefore: Type.Optional(MarkFields.nBefore),
    nAfterCap: Type.Optional(MarkFields.nAfterCap),
    riskLevel: Type.Optional(MarkFields.riskLevel),
    settlingMs: Type.Optional(MarkFields.settlingMs),
  },
  { ...closed, minProperties: 2 },
);

export const ReasonBody = Type.Object({ reason: Reason }, closed);

export const Mark = Type.Object({
  id: Type.String(),
  tags: Type.Array(Type.String()),
  at: EpochMs('The moment the change went live'),
  label: Type.String(),
  note: Type.String(),
  direction: Direction,
  smallestShift: Nullable(Type.Number()),
  nBefore: Nullable(Type.Integer()),
  nAfterCap: Nullable(Type.Integer()),
  riskLevel: Nullable(Type.Number()),
  settlingMs: Nullable(Type.Integer()),
  createdAt: Type.Number(),
  updatedAt: Type.Number(),
  withdrawnAt: Nullable(Type.Number()),
  revision: Type.Integer(),
});

export const MarkRevision = Type.Object({
  markId: Type.String(),
  revision: Type.Integer(),
  changedAt: Type.Number(),
  changedBy: Type.String(),
  action: Type.Union([
    Type.Literal('created'),
    Type.Literal('corrected'),
    Type.Literal('withdrawn'),
  ]),
  reason: Type.String(),
  mark: Mark,
});

export const Snapshot = Type.Object({
  id: Type.Integer(),
  markId: Type.String(),
  tag: Type.String(),
  sampleTime: EpochMs('The last sample the evidence includes'),
  evaluatedAt: Type.Number(),
  nAfter: Type.Integer(),
  risk: Nullable(Type.Number()),
  verdict: Type.String(),
  body: Type.Unknown({ description: 'The whole evidence' }),
});

const AlertState = Type.Union([
  Type.Literal('open'),
  Type.Literal('acknowledged'),
  Type.Literal('cleared'),
]);

export const Alert = Type.Object({
  id: Type.Integer(),
  tag: Type.String(),
  markId: Nullable(Type.String()),
  kind: Type.Union([
    Type.Literal('credible-shift'),
    Type.Literal('unmarked-shift'),
    Type.Literal('stale'),
    Type.Literal('stuck'),
    Type.Literal('out-of-range'),
  ]),
  dedupeKey: Type.String(),
  title: Type.String(),
  state: AlertState,
  openedAt: Type.Number(),
  updatedAt: Type.Number(),
  repeats: Type.Integer(),
  acknowledgedAt: Nullable(Type.Number()),
  acknowledgedBy: Nullable(Type.String()),
  note: Nullable(Type.String()),
  clearedAt: Nullable(Type.Number()),
  evidence: Type.Unknown(),
});

export const AlertListQuery = Type.Object(
  {
    state: Type.Optional(AlertState),
    tag: Type.Optional(TagName),
    limit: Limit(100, 1000),
  },
  closed,
);

const AlertNote = Type.String({ minLength: 1, maxLength: 2000 });

export const AcknowledgeBody = Type.Object({ note: AlertNote }, closed);

/** The route reads an absent body (a bare POST, no Content-Type) as this object with no note. */
export const ClearBody = Type.Object({ note: Type.Optional(AlertNote) }, closed);

export const AlertChange = Type.Object({
  change: Type.Union([
    Type.Literal('opened'),
    Type.Literal('repeated'),
    Type.Literal('acknowledged'),
    Type.Literal('cleared'),
  ]),
  alert: Alert,
});

export const QuarantineEntry = Type.Object({
  id: Type.Integer(),
  source: Type.String(),
  raw: Type.String(),
  reason: Type.String(),
  code: Type.String(),
  tag: Nullable(Type.String()),
  receivedAt: Type.Number(),
});

const OutboxState = Type.Union([
  Type.Literal('pending'),
  Type.Literal('delivered'),
  Type.Literal('dead'),
]);

export const OutboxEntry = Type.Object({
  id: Type.Integer(),
  channel: Type.Union([Type.Literal('webhook'), Type.Literal('mqtt')]),
  target: Type.String(),
  idempotencyKey: Type.String(),
  payload: Type.Unknown(),
  createdAt: Type.Number(),
  state: OutboxState,
  attempts: Type.Integer(),
  nextAttemptAt: Type.Number(),
  lastError: Nullable(Type.String()),
  deliveredAt: Nullable(Type.Number()),
});

export const OutboxQuery = Type.Object(
  { state: Type.Optional(OutboxState), limit: Limit(100, 1000) },
  closed,
);

const Scope = Type.Union([Type.Literal('read'), Type.Literal('write'), Type.Literal('admin')]);

export const TokenView = Type.Object({
  id: Type.String(),
  name: Type.String(),
  scopes: Type.Array(Scope),
  createdAt: Type.Number(),
  revokedAt: Nullable(Type.Number()),
});

export const TokenCreate = Type.Object(
  {
    name: Type.String({ minLength: 1, maxLength: 200 }),
    scopes: Type.Array(Scope, { minItems: 1, maxItems: 3, uniqueItems: true }),
  },
  closed,
);

export const Caution = Type.String({ description: "The project's caution, on every report" });

export const MarkIdParams = Type.Object({ id: Type.String({ minLength: 1, maxLength: 100 }) });
export const AlertIdParams = Type.Object({ id: IdInt });
export const TagParams = Type.Object({ name: TagName });
export const MarkTagParams = Type.Object({
  id: Type.String({ minLength: 1, maxLength: 100 }),
  tag: TagName,
});

/** The error responses a route can give, for the OpenAPI document. */
export function errors(...statuses: number[]): Record<number, typeof ErrorBody> {
  const out: Record<number, typeof ErrorBody> = {};
  for (const status of statuses) out[status] = ErrorBody;
  return out;
}
