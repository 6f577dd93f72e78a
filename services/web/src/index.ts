export { registerWeb } from './register-web.js';
export type { WebDeps } from './register-web.js';
export { loadFigures, RUN_POINTS } from './figures-source.js';
export { loadOverview } from './overview-source.js';
