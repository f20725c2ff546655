// `keelson run --brokers`: the entry run.ts calls. The pipeline itself lives with the aggregate
// stage (@keelson/aggregator), which depends on the engine, the runtime and this package; loading
// it only here, on demand, keeps @keelson/bus free of a dependency cycle and `keelson price` free
// of all of it.
export interface KafkaRunOptions {
  argv: string[];
  io: { stdout: NodeJS.WritableStream; stderr: NodeJS.WritableStream };
  brokers: string;
}

export async function runOnKafka(opts: KafkaRunOptions): Promise<number> {
  const { runKafkaPipeline } = (await import('@keelson/aggregator')) as {
    runKafkaPipeline: (o: KafkaRunOptions) => Promise<number>;
  };
  return runKafkaPipeline(opts);
}
