export { buildDelivery, deliveryBody, signBody } from './build-delivery.js';
export type { Delivery, DeliveryDeps, DeliveryTimers, DrainResult } from './build-delivery.js';
export { retryDelay, retryAfterMs } from './back-off.js';
export type { BackOffOptions } from './back-off.js';
export { outboxTargets } from './outbox-targets.js';
export type { OutboxTarget } from './outbox-targets.js';
