export * from './bus.ts';
export * from './memory.ts';
export * from './kafka.ts';
export * from './kafka-config.ts';
export * from './kafka-topics.ts';
export * from './kafka-runner.ts';
export * from './kafka-partition.ts';
