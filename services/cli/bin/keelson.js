#!/usr/bin/env node
// The workspace ships TypeScript sources; tsx compiles them on load so that a fresh clone
// needs no build step before `npx keelson ...` works.
import { setTimeout } from 'node:timers';
import { register } from 'tsx/esm/api';

register();
const { main } = await import('../src/main.ts');
process.exitCode = await main(process.argv.slice(2));
// The command's work is done: a handle some library left open must not keep the process alive.
setTimeout(() => {
  process.stderr.write(
    `keelson: exiting; still open after the command finished: ${process.getActiveResourcesInfo().join(', ')}\n`,
  );
  process.exit();
}, 3_000).unref();
