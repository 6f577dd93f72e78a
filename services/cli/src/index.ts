export { runCli } from './cli.js';
export type { CliContext } from './cli.js';
export { processIo, EXIT, exitCodeOf } from './io.js';
export type { CliIo, ExitCode } from './io.js';
export { analyseText, parseAnalyseArgs, renderReport, ANALYSE_HELP } from './analyse.js';
export type { AnalyseReport, AnalyseRequest } from './analyse.js';
export { evidenceRows, signalTimes, VERDICT_WORDS } from './evidence-rows.js';
export type { SignalTimes } from './evidence-rows.js';
export { demoPlant } from './demo-plant.js';
export type { DemoTag } from './demo-plant.js';
export {
  createLivePlant,
  PLANT_MARKS,
  STEAM,
  SOLIDS,
  CONDUCTIVITY,
  LEAK_START_MS,
} from './live-plant.js';
export type { LivePlant, PlantMark, PlantSample, PlantTag } from './live-plant.js';
export { backfillMessages, demoConfig, runLiveDemo } from './commands/live-demo.js';
export type { LiveDemoDeps, LiveDemoOptions } from './commands/live-demo.js';
export { DEMO_SEED } from './commands/demo.js';
export { progressLine, createProgressBar } from './progress.js';
export { CAUTION } from './caution.js';
