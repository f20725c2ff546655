export async function main(argv: string[]): Promise<number> {
  process.stdout.write(`keelson: not yet (${argv.join(' ')})\n`);
  return 0;
}
