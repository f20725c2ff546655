// Each command lives in its own module and is loaded only when asked for, so that `keelson price`
// never pays for kafkajs or the HTTP stack.
export interface CommandIo {
  stdin: NodeJS.ReadableStream;
  stdout: NodeJS.WritableStream;
  stderr: NodeJS.WritableStream;
}

export type Command = (argv: string[], io: CommandIo) => Promise<number>;

const commands: Record<string, { summary: string; load: () => Promise<{ run: Command }> }> = {
  price: {
    summary: 'price options from JSON lines (Greeks, implied vol)',
    load: () => import('./commands/price.ts'),
  },
  replay: {
    summary: 'run the engine over a tape of contract inputs',
    load: () => import('./commands/replay.ts'),
  },
  run: {
    summary: 'run the pipeline (embedded default, or on Kafka with --brokers)',
    load: () => import('./commands/run.ts'),
  },
  topics: { summary: 'create the Kafka topics, idempotently', load: () => import('./commands/topics.ts') },
  sim: {
    summary: 'publish the simulated market and trade flow to Kafka',
    load: () => import('./commands/sim.ts'),
  },
  board: {
    summary: "serve the desk's live view from the Kafka output topics",
    load: () => import('./commands/board.ts'),
  },
};

function usage(): string {
  const rows = Object.entries(commands).map(([name, c]) => `  ${name.padEnd(8)} ${c.summary}`);
  return `usage: keelson <command> [options]\n\ncommands:\n${rows.join('\n')}\n\n'keelson <command> --help' for a command's options.\n`;
}

export async function main(argv: string[], io: CommandIo = process): Promise<number> {
  const [name, ...rest] = argv;
  if (!name || name === '--help' || name === '-h' || name === 'help') {
    io.stdout.write(usage());
    return name ? 0 : 1;
  }
  const entry = commands[name];
  if (!entry) {
    io.stderr.write(`keelson: unknown command '${name}'\n\n${usage()}`);
    return 1;
  }
  const mod = await entry.load();
  return mod.run(rest, io);
}
