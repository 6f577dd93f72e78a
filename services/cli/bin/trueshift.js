#!/usr/bin/env node
// The dispatcher itself, not the package index: the index also exports the live demo, whose imports
// (the whole service) would slow every command down.
import { runCli } from '../dist/cli.js';

// A reader that stops early (trueshift alerts | head) closes the pipe: stop quietly, as Unix tools do.
process.stdout.on('error', (error) => {
  if (error.code === 'EPIPE') process.exit(process.exitCode ?? 0);
  throw error;
});

process.exitCode = await runCli(process.argv.slice(2));
