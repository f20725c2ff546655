export * from './conflate.ts';
export * from './latency.ts';
export * from './runner.ts';
