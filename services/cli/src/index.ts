export { runCli, processIo, EXIT } from './cli.js';
export type { CliIo } from './cli.js';
export { analyseText, parseAnalyseArgs, renderReport, ANALYSE_HELP } from './analyse.js';
export type { AnalyseReport, AnalyseRequest } from './analyse.js';
export { demoPlant } from './demo-plant.js';
export type { DemoTag } from './demo-plant.js';
export { CAUTION } from './caution.js';
