export * from './aggregator.ts';
export { runKafkaPipeline } from './kafka-pipeline.ts';
export type { PipelineIo } from './kafka-pipeline.ts';
