export * from './conflate.ts';
export * from './latency.ts';
export * from './runner.ts';
export * from './alert-log.ts';
export * from './feeder.ts';
export * from './summary.ts';
export * from './logger.ts';
export * from './embedded.ts';
