#!/usr/bin/env node
// The workspace ships TypeScript sources; tsx compiles them on load so that a fresh clone
// needs no build step before `npx keelson ...` works.
import { register } from 'tsx/esm/api';

register();
const { main } = await import('../src/main.ts');
process.exitCode = await main(process.argv.slice(2));
