// `keelson replay TAPE --out DIR`: the engine over a JSON-lines tape with the event clock. The same
// tape always gives byte-identical files: no wall clock, outputs stamped with valuation time.
import { mkdir, readFile, writeFile } from 'node:fs/promises';
import { basename, join } from 'node:path';
import { RiskEngine } from '@keelson/engine';
import type { AlertMsg, ExposureMsg, RejectedMsg, StaleFeedMsg } from '@keelson/shared-types';
import type { CommandIo } from '../main.ts';

const HELP = `usage: keelson replay TAPE --out DIR [options]

Runs the risk engine over TAPE, a file of contract input messages, one JSON object per line, in
file order. Valuation time is the largest ts among the lines that passed validation so far. Limits
on the nodes a line changed are checked after every line; at the end of the tape every position is
revalued at the last tape time and every limit is checked once more.

Writes, in DIR (created when missing):
  exposures.jsonl   the final snapshot: one exposure per kept node, sorted by nodeKey
  alerts.jsonl      every limit alert and stale-feed event, in the order they happened
  rejected.jsonl    every rejected line, with its reason and source "<tape file> line <n>"

options:
  --out DIR                  output directory (required)
  --reporting-currency CCY   currency of all amounts (default USD)
  --stale-after SECONDS      a feed is stale once its last spot is older than this (default 5)
  --help                     this text

exit status: 0 when the tape was read (whatever its lines held), 1 on usage errors or when the
tape cannot be read.
`;

interface ReplayArgs {
  tape: string;
  out: string;
  reportingCurrency: string;
  staleAfterMs: number;
}

function parseArgs(argv: string[]): ReplayArgs | { help: true } | { error: string } {
  let tape: string | undefined;
  let out: string | undefined;
  let reportingCurrency = 'USD';
  let staleAfterMs = 5000;
  for (let i = 0; i < argv.length; i++) {
    const a = argv[i] as string;
    const eq = a.startsWith('--') ? a.indexOf('=') : -1;
    const name = eq > 0 ? a.slice(0, eq) : a;
    const inline = eq > 0 ? a.slice(eq + 1) : undefined;
    const value = (): string | undefined => {
      if (inline !== undefined) return inline;
      const v = argv[i + 1];
      if (v === undefined || v.startsWith('--')) return undefined;
      i++;
      return v;
    };
    switch (name) {
      case '--help':
      case '-h':
        return { help: true };
      case '--out': {
        const v = value();
        if (v === undefined || v === '') return { error: '--out needs a directory' };
        out = v;
        break;
      }
      case '--reporting-currency': {
        const v = value();
        if (v === undefined || !/^[A-Z]{3}$/.test(v)) {
          return {
            error: `--reporting-currency needs a three-letter upper-case code (got ${v === undefined ? 'nothing' : JSON.stringify(v)})`,
          };
        }
        reportingCurrency = v;
        break;
      }
      case '--stale-after': {
        const v = value();
        const s = v === undefined ? Number.NaN : Number(v);
        if (v === undefined || v.trim() === '' || !Number.isFinite(s) || s < 0) {
          return {
            error: `--stale-after needs a number of seconds >= 0 (got ${v === undefined ? 'nothing' : JSON.stringify(v)})`,
          };
        }
        staleAfterMs = s * 1000;
        break;
      }
      default:
        if (a.startsWith('-')) return { error: `unknown option ${a}` };
        if (tape !== undefined) return { error: `one tape only (got ${tape} and ${a})` };
        tape = a;
    }
  }
  if (tape === undefined) return { error: 'missing TAPE' };
  if (out === undefined) return { error: 'missing --out DIR' };
  return { tape, out, reportingCurrency, staleAfterMs };
}

function jsonl(rows: readonly object[]): string {
  let s = '';
  for (const r of rows) s += `${JSON.stringify(r)}\n`;
  return s;
}

export async function run(argv: string[], io: CommandIo): Promise<number> {
  const args = parseArgs(argv);
  if ('help' in args) {
    io.stdout.write(HELP);
    return 0;
  }
  if ('error' in args) {
    io.stderr.write(`keelson replay: ${args.error}\n\n${HELP}`);
    return 1;
  }
  let text: string;
  try {
    text = await readFile(args.tape, 'utf8');
  } catch (err) {
    io.stderr.write(`keelson replay: cannot read tape ${args.tape}: ${(err as Error).message}\n`);
    return 1;
  }

  const engine = new RiskEngine({
    clock: 'event',
    reportingCurrency: args.reportingCurrency,
    staleAfterMs: args.staleAfterMs,
  });
  const name = basename(args.tape);
  const alerts: (AlertMsg | StaleFeedMsg)[] = [];
  const rejected: RejectedMsg[] = [];
  const counts = { lines: 0, accepted: 0, duplicate: 0, rejected: 0 };
  const lines = text.split('\n');
  // a final newline ends the last line; it does not start another
  if (lines.length > 0 && lines[lines.length - 1] === '') lines.pop();
  for (let n = 0; n < lines.length; n++) {
    const line = (lines[n] as string).replace(/\r$/, '');
    if (line.trim() === '') continue;
    counts.lines += 1;
    counts[engine.ingest(line, `${name} line ${n + 1}`)] += 1;
    // drained per line so the exposure buffer stays small on long tapes
    const d = engine.drain();
    alerts.push(...d.alerts);
    rejected.push(...d.rejected);
  }
  engine.revalueAll();
  const end = engine.drain();
  alerts.push(...end.alerts);
  rejected.push(...end.rejected);
  const snapshot: ExposureMsg[] = engine.snapshot();

  try {
    await mkdir(args.out, { recursive: true });
    await writeFile(join(args.out, 'exposures.jsonl'), jsonl(snapshot));
    await writeFile(join(args.out, 'alerts.jsonl'), jsonl(alerts));
    await writeFile(join(args.out, 'rejected.jsonl'), jsonl(rejected));
  } catch (err) {
    io.stderr.write(`keelson replay: cannot write to ${args.out}: ${(err as Error).message}\n`);
    return 1;
  }
  const limitAlerts = alerts.filter((a) => a.type === 'alert').length;
  io.stdout.write(
    `replayed ${name}: ${counts.lines} lines, ${counts.accepted} accepted, ${counts.duplicate} duplicates, ` +
      `${counts.rejected} rejected; ${snapshot.length} nodes, ${limitAlerts} alerts, ` +
      `${alerts.length - limitAlerts} stale-feed events -> ${args.out}\n`,
  );
  return 0;
}
