export {};
export * from './sse.ts';
export * from './metrics.ts';
