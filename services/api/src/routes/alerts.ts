import { Type } from '@sinclair/typebox';
import { CAUTION } from '@trueshift/config';
import { outboxTargets } from '@trueshift/delivery';
import { TrueshiftError } from '@trueshift/errors';
import type { AlertChange as StoreAlertChange } from '@trueshift/store';
import { actorOf } from '../access.js';
import type { ApiApp, ApiContext } from '../context.js';
import {
  AcknowledgeBody,
  Alert,
  AlertChange,
  AlertIdParams,
  AlertListQuery,
  Caution,
  ClearBody,
  errors,
} from '../schemas.js';

export function alertRoutes(app: ApiApp, ctx: ApiContext): void {
  const { store, clock, hub, config } = ctx;

  function announce(change: StoreAlertChange): { caution: string } & StoreAlertChange {
    hub.publish('alert', change);
    ctx.wakeDelivery();
    return { caution: CAUTION, ...change };
  }

  app.get(
    '/alerts',
    {
      config: { scope: 'read' },
      schema: {
        summary: 'Alerts, newest first, by state and tag',
        tags: ['alerts'],
        querystring: AlertListQuery,
        response: {
          200: Type.Object({ caution: Caution, alerts: Type.Array(Alert) }),
          ...errors(400, 401, 403),
        },
      },
    },
    async (request) => {
      const q = request.query;
      const alerts = await store.listAlerts({
        ...(q.state === undefined ? {} : { state: q.state }),
        ...(q.tag === undefined ? {} : { tag: q.tag }),
        limit: q.limit,
      });
      return { caution: CAUTION, alerts };
    },
  );

  app.get(
    '/alerts/:id',
    {
      config: { scope: 'read' },
      schema: {
        summary: 'One alert with the evidence that opened it',
        tags: ['alerts'],
        params: AlertIdParams,
        response: {
          200: Type.Object({ caution: Caution, alert: Alert }),
          ...errors(400, 401, 403, 404),
        },
      },
    },
    async (request) => {
      const alert = await store.getAlert(request.params.id);
      if (alert === null)
        throw new TrueshiftError('ALERT_NOT_FOUND', `Alert ${request.params.id}.`);
      return { caution: CAUTION, alert };
    },
  );

  app.post(
    '/alerts/:id/acknowledge',
    {
      config: { scope: 'write' },
      schema: {
        summary: 'Acknowledge an alert with a note; it stays until cleared',
        tags: ['alerts'],
        params: AlertIdParams,
        body: AcknowledgeBody,
        response: {
          200: Type.Composite([Type.Object({ caution: Caution }), AlertChange]),
          ...errors(400, 401, 403, 404, 409, 413, 429),
        },
      },
    },
    async (request) => {
      const now = clock();
      const change = await store.acknowledgeAlert(
        request.params.id,
        actorOf(request.caller),
        request.body.note,
        now,
        outboxTargets(config, now),
      );
      return announce(change);
    },
  );

  app.post(
    '/alerts/:id/clear',
    {
      config: { scope: 'write' },
      // Fastify validates an absent body as undefined, which no object schema accepts; a bare POST
      // (no Content-Type, nothing sent) means "no note", so it is validated as an empty object.
      preValidation: (request, _reply, done) => {
        if ((request.body as { note?: string } | undefined) === undefined) request.body = {};
        done();
      },
      schema: {
        summary: 'Clear an alert: the condition is dealt with',
        description:
          'A later occurrence of the same condition opens a new alert. The body is optional: a note saying why, kept as the note of the alert, or nothing at all.',
        tags: ['alerts'],
        params: AlertIdParams,
        body: ClearBody,
        response: {
          200: Type.Composite([Type.Object({ caution: Caution }), AlertChange]),
          ...errors(400, 401, 403, 404, 409, 413, 429),
        },
      },
    },
    async (request) => {
      const now = clock();
      const change = await store.clearAlert(
        request.params.id,
        now,
        outboxTargets(config, now),
        request.body.note,
      );
      return announce(change);
    },
  );
}
