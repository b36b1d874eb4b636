#!/usr/bin/env node
// Entry for the `nullsteer` command. The sources are TypeScript run through tsx's loader,
// so `npm ci` is the only build step.
import { register } from 'tsx/esm/api';

register();
const { main } = await import('../server/cli.ts');
process.exitCode = await main(process.argv.slice(2));
