import { Type } from '@sinclair/typebox';
import type { Static } from '@sinclair/typebox';

/*
 * The whole configuration, with its documented defaults. Every field has a default so that
 * `trueshift start` runs on a fresh machine with no file at all: a SQLite file under ./data, the
 * embedded MQTT broker, a drop folder, and the API on loopback.
 */

const Positive = (description: string, fallback: number) =>
  Type.Number({ exclusiveMinimum: 0, default: fallback, description });
const WholeAtLeast = (minimum: number, fallback: number, description: string) =>
  Type.Integer({ minimum, default: fallback, description });

export const SubscriptionSchema = Type.Object(
  {
    filter: Type.String({ minLength: 1, description: 'MQTT topic filter, e.g. site/+/+/pv' }),
    tag: Type.String({
      minLength: 1,
      description:
        'Tag name template: {1}..{n} are topic levels, {#} the levels under a trailing #',
    }),
    format: Type.Union([Type.Literal('number'), Type.Literal('json')], { default: 'json' }),
    valueField: Type.Optional(Type.String({ minLength: 1 })),
    timeField: Type.Optional(Type.String({ minLength: 1 })),
    qualityField: Type.Optional(Type.String({ minLength: 1 })),
    timeUnit: Type.Optional(Type.Union([Type.Literal('ms'), Type.Literal('s')])),
  },
  { additionalProperties: false },
);

export const ConfigSchema = Type.Object(
  {
    store: Type.Object(
      {
        kind: Type.Union([Type.Literal('sqlite'), Type.Literal('postgres')], {
          default: 'sqlite',
          description: 'sqlite: one process, one file; postgres: one or several instances share it',
        }),
        path: Type.String({ minLength: 1, default: 'data/trueshift.db' }),
        url: Type.Union([Type.String({ pattern: '^postgres(ql)?://' }), Type.Null()], {
          default: null,
          description: 'PostgreSQL connection URL (kind postgres)',
        }),
        shards: Type.Integer({
          minimum: 1,
          maximum: 1024,
          default: 32,
          description: 'Tags are spread over this many shards; fixed when the database is created',
        }),
        poolSize: WholeAtLeast(2, 10, 'PostgreSQL connections per instance'),
      },
      { additionalProperties: false, default: {} },
    ),
    cluster: Type.Object(
      {
        instance: Type.Union([Type.String({ minLength: 1, maxLength: 64 }), Type.Null()], {
          default: null,
          description: 'This instance name; null takes the host name and process id',
        }),
        leaseMs: WholeAtLeast(1_000, 15_000, 'How long a shard lease lasts without renewal'),
        renewMs: WholeAtLeast(100, 3_000, 'How often leases are renewed and shared out'),
      },
      { additionalProperties: false, default: {} },
    ),
    mqtt: Type.Object(
      {
        url: Type.Union(
          [Type.String({ pattern: '^(mqtt|mqtts|ws|wss|tcp|ssl)://' }), Type.Null()],
          {
            default: null,
            description: 'Broker URL; null starts the embedded broker',
          },
        ),
        embedded: Type.Object(
          {
            host: Type.String({ default: '127.0.0.1' }),
            port: Type.Integer({ minimum: 0, maximum: 65535, default: 18830 }),
          },
          { additionalProperties: false, default: {} },
        ),
        clientId: Type.String({ minLength: 1, maxLength: 64, default: 'trueshift-ingest' }),
        username: Type.Optional(Type.String()),
        password: Type.Optional(Type.String()),
        tls: Type.Optional(
          Type.Object(
            {
              caFile: Type.Optional(Type.String()),
              certFile: Type.Optional(Type.String()),
              keyFile: Type.Optional(Type.String()),
              rejectUnauthorized: Type.Boolean({ default: true }),
            },
            { additionalProperties: false },
          ),
        ),
        sessionExpirySec: WholeAtLeast(
          0,
          86_400,
          'How long the broker keeps the session while away',
        ),
        reconnectMinMs: WholeAtLeast(10, 500, 'First reconnect delay'),
        reconnectMaxMs: WholeAtLeast(10, 30_000, 'Longest reconnect delay'),
        subscriptions: Type.Array(SubscriptionSchema, {
          default: [{ filter: 'trueshift/samples/#', tag: '{#}', format: 'json' }],
        }),
        alertTopic: Type.String({ minLength: 1, default: 'trueshift/alerts' }),
        sharedGroup: Type.Union(
          [Type.String({ minLength: 1, pattern: '^[^/+#]+$' }), Type.Null()],
          {
            default: null,
            description:
              'Subscribe as $share/<group>/<filter> (MQTT 5) so several instances split the messages',
          },
        ),
      },
      { additionalProperties: false, default: {} },
    ),
    sparkplug: Type.Object(
      {
        groups: Type.Array(Type.String({ minLength: 1, pattern: '^[^/+#]+$' }), {
          default: [],
          description: 'Sparkplug B groups to read (spBv1.0/<group>/#); none turns Sparkplug off',
        }),
        tagTemplate: Type.String({
          minLength: 1,
          default: '{group}/{node}/{device}/{metric}',
          description: 'Tag name from {group}, {node}, {device} and {metric}',
        }),
        clientId: Type.String({ minLength: 1, maxLength: 64, default: 'trueshift-sparkplug' }),
      },
      { additionalProperties: false, default: {} },
    ),
    drop: Type.Object(
      {
        folder: Type.String({ minLength: 1, default: 'data/drop' }),
        pollMs: WholeAtLeast(50, 2_000, 'How often the drop folder is looked at'),
      },
      { additionalProperties: false, default: {} },
    ),
    ingest: Type.Object(
      {
        maxFutureMs: WholeAtLeast(0, 300_000, 'Samples further in the future are refused'),
        maxPayloadBytes: WholeAtLeast(64, 262_144, 'Larger MQTT payloads are refused'),
        httpMaxSamples: WholeAtLeast(1, 10_000, 'Largest HTTP batch'),
      },
      { additionalProperties: false, default: {} },
    ),
    http: Type.Object(
      {
        host: Type.String({ minLength: 1, default: '127.0.0.1' }),
        port: Type.Integer({ minimum: 0, maximum: 65535, default: 8640 }),
        readWithoutToken: Type.Boolean({
          default: false,
          description: 'Let anyone who reaches the port read evidence without a token',
        }),
        bodyLimitBytes: WholeAtLeast(1_024, 1_048_576, 'Largest request body'),
        writeRatePerMinute: WholeAtLeast(1, 120, 'Write requests per client per minute'),
      },
      { additionalProperties: false, default: {} },
    ),
    analysis: Type.Object(
      {
        riskLevel: Type.Number({ exclusiveMinimum: 0, exclusiveMaximum: 1, default: 0.05 }),
        nBefore: WholeAtLeast(2, 30, 'Before-window of a mark'),
        alertAfter: WholeAtLeast(1, 3, 'Consecutive credible evaluations before an alert'),
        inControlArl: Type.Number({
          minimum: 10,
          default: 500,
          description: 'Samples between false alarms of the watch',
        }),
        cusumK: Type.Number({ minimum: 0, default: 0.5 }),
        ewmaLambda: Type.Number({ exclusiveMinimum: 0, maximum: 1, default: 0.2 }),
        staleAfterIntervals: Positive('A tag is stale after this many usual intervals', 10),
        stuckAfter: WholeAtLeast(3, 20, 'Identical values in a row that make a tag stuck'),
        pollMs: WholeAtLeast(10, 1_000, 'How often the analyser looks for new samples'),
      },
      { additionalProperties: false, default: {} },
    ),
    webhooks: Type.Array(
      Type.Object(
        {
          url: Type.String({ pattern: '^https?://' }),
          secret: Type.Optional(Type.String({ minLength: 16 })),
        },
        { additionalProperties: false },
      ),
      { default: [] },
    ),
    delivery: Type.Object(
      {
        maxAttempts: WholeAtLeast(1, 10, 'Attempts before an alert delivery is dead'),
        baseDelayMs: WholeAtLeast(10, 1_000, 'First retry delay'),
        maxDelayMs: WholeAtLeast(10, 600_000, 'Longest retry delay'),
      },
      { additionalProperties: false, default: {} },
    ),
    log: Type.Object(
      {
        level: Type.Union(
          ['fatal', 'error', 'warn', 'info', 'debug', 'trace', 'silent'].map((l) =>
            Type.Literal(l),
          ),
          { default: 'info' },
        ),
        pretty: Type.Union([Type.Boolean(), Type.Literal('auto')], { default: 'auto' }),
      },
      { additionalProperties: false, default: {} },
    ),
  },
  { additionalProperties: false },
);

export type Config = Static<typeof ConfigSchema>;
export type SubscriptionConfig = Static<typeof SubscriptionSchema>;
