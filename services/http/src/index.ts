export {};
export * from './sse.ts';
export * from './metrics.ts';
export * from './server.ts';
