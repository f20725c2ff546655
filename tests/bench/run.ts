// `npm run bench`: every tests/bench/*.bench.ts in its own process, one after another, so that one
// benchmark's heap and JIT state never colour the next one's figures. `npm run bench -- quant`
// runs only the files whose name contains "quant".
import { readdirSync } from 'node:fs';
import { spawnSync } from 'node:child_process';
import { dirname, join } from 'node:path';
import { fileURLToPath } from 'node:url';

const here = dirname(fileURLToPath(import.meta.url));
const filter = process.argv.slice(2);
const files = readdirSync(here)
  .filter((f) => f.endsWith('.bench.ts'))
  .filter((f) => filter.length === 0 || filter.some((w) => f.includes(w)))
  .sort();
let failed = 0;
for (const f of files) {
  process.stdout.write(`\n=== ${f}\n`);
  const r = spawnSync(process.execPath, ['--import', 'tsx', '--expose-gc', join(here, f)], {
    stdio: 'inherit',
  });
  if (r.status !== 0) failed++;
}
process.exit(failed ? 1 : 0);
